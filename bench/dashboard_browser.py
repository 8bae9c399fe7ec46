"""The dashboard in a real browser: first chart painted and every interaction, input to last chart.

Debian's chromium (driven by Playwright, ``executable_path``; never a downloaded browser) opens
the dashboard served as ``shockflow dashboard`` serves it (`dashboard.serve`, gunicorn) on
127.0.0.1 over a serving snapshot (default: the demo's). A script put in the page before any of
its own records, on the page's clock (``performance.now()``):

- every ``/_dash-update-component`` request: sent, answered, body bytes, the callback's outputs;
- every chart drawn: each ``Plotly.react``/``newPlot`` call, finished when its promise resolves and
  the next animation frame has run (the chart is on screen);
- the input event (the Enter key, a click) that starts an interaction;
- every change of the page (a tab's panel shown, a note rewritten), at the next animation frame.

An interaction lasts from its input event to the last request answered, chart drawn or change of
the page painted, once the
page has been quiet (nothing pending, nothing new) for `QUIET_MS`. Reported per case: p50 and p95
over the repeats, the round trips per interaction, the bytes answered, where the time goes — the
summed request times (sent → answered; requests of one chain overlap) and the client's drawing
after the last answer.

First paint: a fresh browser context (empty cache) per repeat; navigation start → the index chart
drawn with data.

A second server runs the code of another checkout (``--baseline DIR``) or git revision
(``--baseline-rev REV``; `make bench` uses `BASELINE_REV`, the dashboard before issue 15) and
both are measured, interleaved, in the same browser: the before/after table. Goals (issue 15):
first chart ≤ 1.5 s, every interaction p95 ≤ 300 ms.

    python -m bench dashboard_browser
    python -m bench.dashboard_browser [--snapshot FILE] [--repeats 10] [--baseline DIR | --baseline-rev REV]
"""

from __future__ import annotations

import argparse
import os
import shutil
import signal
import statistics
import subprocess
import sys
import tempfile
from collections.abc import Iterator, Sequence
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
DEMO_SNAPSHOT = ROOT / "demo_output" / "shockflow-serving.duckdb"
FIRST_PAINT_GOAL_MS = 1500.0
INTERACTION_GOAL_MS = 300.0
QUIET_MS = 400.0  # no request pending or started, no chart drawn, for this long: the interaction is over
TIMEOUT_MS = 120_000

__all__ = ["PROBE", "Measured", "case", "main", "measure", "serve"]

CHROMIUM_ARGS = [
    "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--disable-background-networking",
    "--disable-component-update", "--disable-sync", "--no-first-run",
]  # fmt: skip

#: Put in every page before its own scripts: records requests, chart draws and input events.
PROBE = r"""
(() => {
  const S = window.__perf = {pending: 0, plots: 0, requests: [], renders: [], inputs: [], last: 0};
  const mark = t => { if (t > S.last) S.last = t; };
  const origFetch = window.fetch;
  window.fetch = function (input, init) {
    const url = typeof input === 'string' ? input : (input && input.url) || '';
    if (!url.includes('_dash-update-component')) return origFetch.apply(this, arguments);
    const rec = {start: performance.now(), end: null, bytes: 0, status: 0, output: ''};
    try { rec.output = JSON.parse(init.body).output; } catch (e) {}
    S.pending++; S.requests.push(rec); mark(rec.start);
    return origFetch.apply(this, arguments).then(async resp => {
      rec.status = resp.status;
      try { rec.bytes = (await resp.clone().arrayBuffer()).byteLength; } catch (e) {}
      rec.end = performance.now(); S.pending--; mark(rec.end);
      return resp;
    }, err => { rec.end = performance.now(); S.pending--; mark(rec.end); throw err; });
  };
  const wrap = () => {
    const P = window.Plotly;
    if (!P || !P.react) return false;
    if (P.__perfWrapped) return true;
    for (const name of ['react', 'newPlot']) {
      const orig = P[name];
      P[name] = function (gd) {
        const start = performance.now();
        S.plots++; mark(start);
        const done = () => requestAnimationFrame(() => {
          const end = performance.now();
          const el = typeof gd === 'string' ? document.getElementById(gd) : gd;
          const host = el && el.closest ? el.closest('[id$="-graph"]') : null;
          S.renders.push({id: host ? host.id : '', start, end, traces: (el && el.data || []).length});
          S.plots--; mark(end);
        });
        const p = orig.apply(this, arguments);
        Promise.resolve(p).then(done, done);
        return p;
      };
    }
    P.__perfWrapped = true; S.plotlyAt = performance.now();
    return true;
  };
  // wrap plotly.js the moment it defines itself (a chart may be drawn in the same task)
  let plotly;
  Object.defineProperty(window, 'Plotly', {
    configurable: true, get() { return plotly; }, set(v) { plotly = v; wrap(); },
  });
  // the page's own changes (a tab's panel shown, text updated): marked once painted
  new MutationObserver(() => {
    requestAnimationFrame(() => { const t = performance.now(); S.paints = (S.paints || 0) + 1; mark(t); });
  }).observe(document, {subtree: true, childList: true, attributes: true, characterData: true});
  // an input counts as activity: the page is not quiet until QUIET_MS after it, so an interaction
  // whose first request or change comes some frames after the click is not taken as already over
  for (const kind of ['keydown', 'mousedown']) {
    document.addEventListener(kind, e => { S.inputs.push(e.timeStamp); mark(performance.now()); }, true);
  }
})();
"""

#: True once the page has been quiet for `quiet` ms (nothing pending, nothing new).
_SETTLED = """quiet => { const S = window.__perf;
  return S.pending === 0 && S.plots === 0 && performance.now() - S.last >= quiet; }"""


@dataclass
class Interaction:
    """One interaction as the page saw it: ms from input to the last answer or chart drawn."""

    total_ms: float
    requests: int
    bytes: int
    server_ms: float  # summed request time (sent → answered) of the interaction's round trips
    draw_ms: float  # last chart drawn minus last answer (client drawing after the data arrived)


@dataclass
class Measured:
    """Every sample of one run, by case name."""

    samples: dict[str, list[Interaction]] = field(default_factory=dict)

    def add(self, name: str, item: Interaction) -> None:
        self.samples.setdefault(name, []).append(item)


def _pct(values: Sequence[float], q: float) -> float:
    ordered = sorted(values)
    if len(ordered) == 1:
        return ordered[0]
    return statistics.quantiles(ordered, n=100, method="inclusive")[int(q) - 1]


# -- the server ----------------------------------------------------------------------------------

_SERVER = """
import logging, sys
from dashboard import DashboardSettings, serve
logging.getLogger("dashboard").setLevel(logging.ERROR)
def ready(running):
    print(running.server_port, flush=True)
serve(DashboardSettings(snapshot=sys.argv[1], host="127.0.0.1", port=0), ready=ready)
"""


@contextmanager
def serve(snapshot: Path, code: Path = ROOT) -> Iterator[str]:
    """`dashboard.serve` of the code under `code`, in its own process group; yields its URL."""
    env = {**os.environ, "PYTHONPATH": str(code) + os.pathsep + os.environ.get("PYTHONPATH", "")}
    proc = subprocess.Popen(
        [sys.executable, "-c", _SERVER, str(snapshot)], stdout=subprocess.PIPE,
        stderr=subprocess.DEVNULL, text=True, env=env, cwd=code, start_new_session=True,
    )  # fmt: skip
    try:
        assert proc.stdout is not None
        line = proc.stdout.readline().strip()
        if not line.isdigit():
            msg = f"the dashboard under {code} did not start over {snapshot} (exit code {proc.poll()})"
            raise SystemExit(msg)
        yield f"http://127.0.0.1:{int(line)}/"
    finally:
        if proc.poll() is None:
            proc.terminate()
            try:
                proc.wait(20)
            except subprocess.TimeoutExpired:
                os.killpg(proc.pid, signal.SIGKILL)  # the server's own session
                proc.wait(10)


# -- the browser ---------------------------------------------------------------------------------


def _settle(page: Any) -> None:
    page.wait_for_function(_SETTLED, arg=QUIET_MS, timeout=TIMEOUT_MS, polling=25)


def _since(page: Any, t0_index: int, req0: int, ren0: int) -> Interaction:
    data = page.evaluate(
        """([i, r, d]) => { const S = window.__perf;
           return {t0: S.inputs[i], last: S.last, req: S.requests.slice(r), ren: S.renders.slice(d)}; }""",
        [t0_index, req0, ren0],
    )
    t0 = data["t0"]
    if t0 is None:
        msg = "the page recorded no input event for this interaction"
        raise RuntimeError(msg)
    answers = [x["end"] for x in data["req"] if x["end"] is not None]
    draws = [x["end"] for x in data["ren"] if x["end"] is not None]
    # the last answer, chart drawn or change of the page painted
    last = max([*answers, *draws, data["last"] or t0, t0])
    last_answer = max(answers, default=t0)
    last_draw = max(draws, default=last_answer)
    return Interaction(
        total_ms=last - t0, requests=len(data["req"]), bytes=sum(x["bytes"] for x in data["req"]),
        server_ms=sum(x["end"] - x["start"] for x in data["req"] if x["end"] is not None), draw_ms=max(0.0, last_draw - last_answer),
    )  # fmt: skip


def _counts(page: Any) -> tuple[int, int, int]:
    i, r, d = page.evaluate(
        "() => [window.__perf.inputs.length, window.__perf.requests.length, window.__perf.renders.length]"
    )
    return int(i), int(r), int(d)


def interact(page: Any, action: Any) -> Interaction:
    """Run `action(page)` (one input event first), wait until the page is quiet, measure it."""
    i0, r0, d0 = _counts(page)
    action(page)
    _settle(page)
    return _since(page, i0, r0, d0)


def first_paint(browser: Any, url: str) -> Interaction:
    """A fresh context (empty cache): navigation start → the index chart drawn with data."""
    context = browser.new_context(viewport={"width": 1280, "height": 800})
    try:
        page = context.new_page()
        page.add_init_script(PROBE)
        page.goto(url)
        page.wait_for_function(
            "() => window.__perf.renders.some(r => r.id === 'index-graph' && r.traces > 0)",
            timeout=TIMEOUT_MS, polling=10,
        )  # fmt: skip
        data = page.evaluate(
            """() => { const S = window.__perf;
               const r = S.renders.find(r => r.id === 'index-graph' && r.traces > 0);
               const done = S.requests.filter(q => q.end !== null && q.end <= r.end);
               return {end: r.end, req: done.length, bytes: done.reduce((a, q) => a + q.bytes, 0),
                       server: done.reduce((a, q) => a + q.end - q.start, 0)}; }"""
        )
        return Interaction(data["end"], data["req"], data["bytes"], data["server"], 0.0)
    finally:
        context.close()


def tab_labels(page: Any) -> list[str]:
    return list(page.evaluate("() => [...document.querySelectorAll('.view-tab')].map(t => t.innerText.trim())"))


def open_page(browser: Any, url: str) -> Any:
    page = browser.new_page(viewport={"width": 1280, "height": 800})
    page.set_default_timeout(TIMEOUT_MS)
    page.add_init_script(PROBE)
    page.goto(url)
    page.wait_for_selector("#index-graph .js-plotly-plot")
    _settle(page)
    return page


def _set_end(value: str) -> Any:
    def act(page: Any) -> None:
        page.fill("#window-end", value)
        page.press("#window-end", "Enter")

    return act


def _click_tab(label: str) -> Any:
    def act(page: Any) -> None:
        page.locator(".view-tab", has_text=label).first.click()

    return act


def _tab_case(label: str, changed: bool) -> str:
    which = "Compare windows" if label == "Compare windows" else "other tabs"
    return f"tab switch, {which}: " + ("window changed since shown" if changed else "nothing changed")


def measure(browser: Any, url: str, out: Measured, *, repeats: int, offset: int = 0) -> None:
    """One pass of every case against the dashboard at `url`: `repeats` samples of each.

    Every date-window change asks for a window not asked before in this run (`offset` shifts the
    dates between passes), so no answer is a repeat of an earlier one."""
    import datetime as dt

    for _ in range(max(1, repeats // 2)):
        out.add("first chart painted (fresh browser)", first_paint(browser, url))
    page = open_page(browser, url)
    try:
        labels = tab_labels(page)
        lo = dt.date.fromisoformat(page.input_value("#window-start"))
        hi = dt.date.fromisoformat(page.input_value("#window-end"))

        def new_end(k: int) -> str:
            return (hi - dt.timedelta(days=7 * (3 + 2 * offset + 5 * k) + (hi - lo).days // 10)).isoformat()

        for k in range(repeats):
            out.add("change the window's 'to' date", interact(page, _set_end(new_end(2 * k))))
            for changed in (True, False):
                for label in labels:
                    out.add(_tab_case(label, changed), interact(page, _click_tab(label)))
            page.locator(".view-tab", has_text=labels[0]).first.click()
            _settle(page)
        page.locator(".view-tab", has_text="Compare windows").first.click()
        _settle(page)
        for k in range(repeats):
            out.add("change the 'to' date on Compare windows", interact(page, _set_end(new_end(2 * k + 1))))
    finally:
        page.close()


def run(snapshot: Path, *, repeats: int = 10, baseline: Path | None = None) -> dict[str, Measured]:
    """Measure this checkout (and `baseline`, interleaved: two rounds each) in one browser."""
    from playwright.sync_api import sync_playwright

    chromium = shutil.which("chromium") or "/usr/bin/chromium"
    results = {"this checkout": Measured()}
    if baseline is not None:
        results = {"before (baseline)": Measured(), **results}
    with ExitStack() as stack:
        urls = {"this checkout": stack.enter_context(serve(snapshot))}
        if baseline is not None:
            urls["before (baseline)"] = stack.enter_context(serve(snapshot, baseline))
        p = stack.enter_context(sync_playwright())
        browser = p.chromium.launch(executable_path=chromium, args=CHROMIUM_ARGS)  # fresh contexts, no profile
        for name in results:  # warm each server once (imports, snapshot caches) before measuring
            open_page(browser, urls[name]).close()
        half = max(1, repeats // 2)
        for k in range(2):  # two interleaved passes each, so both see the machine's load alike
            for name in results:
                measure(browser, urls[name], results[name], repeats=half, offset=k)
        browser.close()
    return results


def _row(name: str, samples: list[Interaction], goal: float) -> list[Any]:
    total = [s.total_ms for s in samples]
    p95 = _pct(total, 95)
    return [
        name, len(samples), f"{statistics.median(total):.0f}", f"{p95:.0f}",
        f"{statistics.median(s.requests for s in samples):g}", f"{statistics.median(s.bytes for s in samples) / 1024:.0f}",
        f"{statistics.median(s.server_ms for s in samples):.0f}", f"{statistics.median(s.draw_ms for s in samples):.0f}",
        f"≤ {goal:.0f}", "yes" if p95 <= goal else "no",
    ]  # fmt: skip


def report(results: dict[str, Measured]) -> None:
    from . import environment_line, print_table

    header = ["case", "n", "p50 ms", "p95 ms", "round trips", "KiB answered", "server ms (sum)",
              "draw ms after last answer", "goal p95", "met"]  # fmt: skip
    for label, measured in results.items():
        rows = []
        for name, samples in measured.samples.items():
            goal = FIRST_PAINT_GOAL_MS if name.startswith("first") else INTERACTION_GOAL_MS
            rows.append(_row(name, samples, goal))
        print_table(
            f"Dashboard in chromium — {label}", header, rows,
            notes=[
                "Time = input event (Enter, click) → last callback answered or chart drawn, once the page "
                f"is quiet for {QUIET_MS:.0f} ms; first chart: navigation start → index chart drawn, fresh context.",
                "Server ms sums the interaction's request times (sent → answered); requests of one chain overlap.",
                environment_line(),
            ],
        )  # fmt: skip
    if len(results) == 2:
        (_, before), (_, after) = results.items()
        rows = []
        for name in after.samples:
            if name not in before.samples:
                continue
            b = [s.total_ms for s in before.samples[name]]
            a = [s.total_ms for s in after.samples[name]]
            rows.append([
                name, f"{statistics.median(b):.0f} / {_pct(b, 95):.0f}", f"{statistics.median(a):.0f} / {_pct(a, 95):.0f}",
                f"{_pct(b, 95) / max(_pct(a, 95), 1.0):.1f}×",  # at least 1 ms: a ratio, not a division by 0
                f"{statistics.median(s.requests for s in before.samples[name]):g} → "
                f"{statistics.median(s.requests for s in after.samples[name]):g}",
            ])  # fmt: skip
        print_table(
            "Dashboard in chromium — before and after, side by side (interleaved, same browser and snapshot)",
            ["case", "before p50 / p95 ms", "after p50 / p95 ms", "p95 ratio", "round trips"], rows,
        )  # fmt: skip


#: The dashboard before issue 15's work (the "now" column of its table), measured side by side.
BASELINE_REV = "cb1fa1d"


@contextmanager
def checkout(rev: str) -> Iterator[Path | None]:
    """The tree of git revision `rev` of this repository in a temporary folder (None without git
    or that revision: the table then shows this checkout alone)."""
    with tempfile.TemporaryDirectory(prefix="shockflow-baseline-") as folder:
        try:
            archive = subprocess.run(["git", "-C", str(ROOT), "archive", rev], capture_output=True, check=True)
            subprocess.run(["tar", "-x", "-C", folder], input=archive.stdout, check=True)
        except (OSError, subprocess.CalledProcessError):
            print(f"note: no git revision {rev!r} here; measuring this checkout only")
            yield None
            return
        yield Path(folder)


@contextmanager
def demo_snapshot() -> Iterator[Path]:
    """The demo's serving snapshot: demo_output/'s, or one built now in a temporary folder."""
    if DEMO_SNAPSHOT.exists():
        yield DEMO_SNAPSHOT
        return
    with tempfile.TemporaryDirectory(prefix="shockflow-demo-") as folder:
        print(f"no {DEMO_SNAPSHOT}: building the demo (shockflow demo --no-serve) in {folder}")
        subprocess.run([sys.executable, "-m", "shockflow", "demo", "--no-serve", "--out", folder], cwd=ROOT,
                       check=True, stdout=subprocess.DEVNULL)  # fmt: skip
        yield Path(folder) / "shockflow-serving.duckdb"


def case() -> None:
    """The bench registry's entry: the demo snapshot, this checkout and `BASELINE_REV` side by side."""
    if shutil.which("chromium") is None and not Path("/usr/bin/chromium").exists():
        print("skipped: Debian's chromium is not installed (apt-get install -y chromium)")
        return
    with demo_snapshot() as snapshot, checkout(BASELINE_REV) as baseline:
        report(run(snapshot, repeats=10, baseline=baseline))


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m bench.dashboard_browser", description=__doc__)
    parser.add_argument("--snapshot", type=Path, default=None, help="a serving snapshot (default: the demo's)")
    parser.add_argument("--repeats", type=int, default=10)
    parser.add_argument("--baseline", type=Path, default=None, help="another checkout's root, measured side by side")
    parser.add_argument("--baseline-rev", default=None, help=f"a git revision to measure side by side (e.g. {BASELINE_REV})")
    args = parser.parse_args(argv)
    if args.snapshot is not None and not args.snapshot.exists():
        raise SystemExit(f"no serving snapshot at {args.snapshot}; pass --snapshot FILE or omit it for the demo's")
    with ExitStack() as stack:
        # absolute: each server runs in its own checkout folder (a relative path would name another file)
        snapshot = args.snapshot.resolve() if args.snapshot else stack.enter_context(demo_snapshot())
        baseline = args.baseline
        if baseline is None and args.baseline_rev:
            baseline = stack.enter_context(checkout(args.baseline_rev))
        report(run(snapshot, repeats=args.repeats, baseline=baseline))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
