# shockflow — the commands a newcomer needs. Everything runs inside ./.venv, built from pyproject.toml.
PYTHON ?= python3
VENV := .venv
PY := $(VENV)/bin/python
STAMP := $(VENV)/.installed-$(shell cat pyproject.toml | cksum | cut -d' ' -f1)
# Prefect's own processes: no telemetry, and room for a slow first start of its temporary server.
export DO_NOT_TRACK := 1
export PREFECT_SERVER_ANALYTICS_ENABLED := false
export PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS := 120

.PHONY: demo test test-slow bench lint venv clean

$(STAMP): pyproject.toml
	@test -x $(PY) || $(PYTHON) -m venv $(VENV)
	$(PY) -m pip install --quiet --upgrade pip
	$(PY) -m pip install --quiet -e '.[test,dask,dev]'
	@rm -f $(VENV)/.installed-*
	@touch $(STAMP)

venv: $(STAMP)

## make demo: build the demo warehouse from data_samples/ and serve the dashboard on http://127.0.0.1:8050
## (another port: `make demo PORT=8060`)
PORT ?=
demo: $(STAMP)
	$(VENV)/bin/shockflow demo $(if $(PORT),--port $(PORT))

## make test: the whole suite (slow Monte Carlo checks excluded; `make test-slow` runs them)
test: $(STAMP)
	@$(PY) -m tests.preflight
	$(PY) -m pytest

test-slow: $(STAMP)
	$(PY) -m pytest -m slow

## make bench: benchmarks, printed as tables of ratios against baselines run side by side
bench: $(STAMP)
	$(PY) -m bench

lint: $(STAMP)
	$(VENV)/bin/ruff check arlib serving charts pipeline dashboard shockflow data_samples tests bench
	$(VENV)/bin/mypy

clean:
	rm -rf $(VENV) build *.egg-info .pytest_cache shockflow.duckdb demo_output
