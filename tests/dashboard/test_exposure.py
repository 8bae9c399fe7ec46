"""An exposed dashboard: token strength, the token leaving the address bar, secrets with a trailing
newline, the Secure cookie behind TLS, and one rule (and one source) for the settings involved."""

from __future__ import annotations

import http.client
import re
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from dashboard import DashboardSettings, InsecureBindError, create_app
from dashboard.app import check_bind
from dashboard.auth import COOKIE, MIN_TOKEN_LENGTH
from pipeline.config import is_loopback

from ._served import Served, stop_all
from ._snapshot import write_snapshot
from .test_app import load

ROOT = Path(__file__).resolve().parents[2]
TOKEN = "a-token-of-24-characters"


@pytest.fixture(autouse=True)
def _no_server_left() -> Iterator[None]:
    yield
    stop_all()


# -- one loopback rule ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("host", "loop"),
    [
        ("127.0.0.1", True), ("127.8.9.1", True), ("::1", True), ("[::1]", True), ("localhost", True),
        ("LocalHost", True), (" 127.0.0.1 ", True), ("0.0.0.0", False), ("::", False), ("[::]", False),
        ("192.168.1.4", False), ("example.org", False), ("localhost.example.org", False), ("", False),
    ],
)  # fmt: skip
def test_is_loopback(host: str, loop: bool) -> None:
    assert is_loopback(host) is loop


def test_one_loopback_function_in_the_code() -> None:
    """The config, the dashboard and the execution checks share `pipeline.config.is_loopback`."""
    defs = [
        f"{path.relative_to(ROOT)}: {m.group(0)}"
        for folder in ("pipeline", "dashboard", "arlib")
        for path in sorted((ROOT / folder).rglob("*.py"))
        for m in re.finditer(r"^def \w*loopback\w*\(", path.read_text(), re.MULTILINE)
    ]
    assert defs == ["pipeline/config/_sections.py: def is_loopback("], defs


def test_config_and_dashboard_agree_on_a_bracketed_loopback_address(tmp_path: Path) -> None:
    # the loader used its own rule, which called "[::1]" reachable from other machines
    cfg = load(tmp_path, '[dashboard]\nhost = "[::1]"\n')
    check_bind(DashboardSettings.from_config(cfg))


# -- one source of the dashboard's settings ----------------------------------------------------


def test_settings_come_from_the_loaded_config(tmp_path: Path) -> None:
    cfg = load(tmp_path, '[dashboard]\nport = 8123\ntrusted_proxies = ["127.0.0.1", "10.0.0.0/8"]\n')
    s = DashboardSettings.from_config(cfg, environ={"SHOCKFLOW_DASHBOARD_TOKEN": TOKEN})
    assert (s.port, s.trusted_proxies, s.token) == (8123, ("127.0.0.1", "10.0.0.0/8"), TOKEN)
    # the default variable names live with the config's declaration, not in a second copy
    assert cfg.dashboard.credentials({"SHOCKFLOW_DASHBOARD_TOKEN": TOKEN})["token"] == TOKEN
    # a directly built DashboardSettings starts from the same defaults
    fresh = DashboardSettings(snapshot=tmp_path / "s.duckdb")
    defaults = load(tmp_path).dashboard
    assert (fresh.host, fresh.port, fresh.workers) == (defaults.host, defaults.port, defaults.workers)


def test_config_refuses_a_proxy_that_is_not_an_address(tmp_path: Path) -> None:
    from pipeline.errors import ConfigError

    with pytest.raises(ConfigError, match=r"`dashboard.trusted_proxies` contains 'my proxy'"):
        load(tmp_path, '[dashboard]\ntrusted_proxies = ["my proxy"]\n')


# -- tokens ------------------------------------------------------------------------------------


@pytest.mark.parametrize("host", ["0.0.0.0", "::", "10.1.2.3"])
def test_a_short_token_is_refused_for_an_open_address(tmp_path: Path, host: str) -> None:
    short = "x" * (MIN_TOKEN_LENGTH - 1)
    with pytest.raises(InsecureBindError) as err:
        check_bind(DashboardSettings(snapshot=tmp_path / "s", host=host, token=short))
    text = str(err.value)
    assert "\n" not in text and f"{MIN_TOKEN_LENGTH - 1} characters" in text and short not in text
    check_bind(DashboardSettings(snapshot=tmp_path / "s", host=host, token="x" * MIN_TOKEN_LENGTH))
    check_bind(DashboardSettings(snapshot=tmp_path / "s", host="127.0.0.1", token="short"))  # loopback


@pytest.mark.parametrize("ending", ["\n", "\r\n", "\n\n"])
def test_a_trailing_newline_is_stripped_from_secrets(tmp_path: Path, ending: str) -> None:
    cfg = load(tmp_path, '[dashboard]\ntoken_env = "MY_TOKEN"\n')
    s = DashboardSettings.from_config(cfg, environ={"MY_TOKEN": TOKEN + ending, "SHOCKFLOW_DASHBOARD_USERNAME": "ana\n",
                                                    "SHOCKFLOW_DASHBOARD_PASSWORD": "pw" + ending})  # fmt: skip
    assert (s.token, s.username, s.password) == (TOKEN, "ana", "pw")
    assert DashboardSettings(snapshot=tmp_path / "s", token=TOKEN + ending).token == TOKEN
    in_file = load(tmp_path, f'[dashboard]\ntoken = "{TOKEN}{ending.encode("unicode_escape").decode()}"\n')
    assert DashboardSettings.from_config(in_file).token == TOKEN


def test_the_token_leaves_the_address_bar_even_when_signed_in(snapshot_path: Path) -> None:
    client = create_app(DashboardSettings(snapshot=snapshot_path, token=TOKEN)).server.test_client()
    first = client.get(f"/?token={TOKEN}&x=1")
    assert first.status_code == 303 and first.headers["Location"].endswith("/?x=1")
    assert client.get_cookie(COOKIE) is not None
    # signed in by the cookie, the same address again: redirected, not served with the token shown
    again = client.get(f"/?token={TOKEN}&x=1")
    assert again.status_code == 303 and again.headers["Location"].endswith("/?x=1")
    assert client.get("/?x=1").status_code == 200
    # signed in by a bearer header, with a stale token in the address: also redirected
    fresh = create_app(DashboardSettings(snapshot=snapshot_path, token=TOKEN)).server.test_client()
    r = fresh.get("/?token=stale", headers={"Authorization": f"Bearer {TOKEN}"})
    assert r.status_code == 303 and r.headers["Location"].endswith("/")
    assert fresh.get("/?token=stale").status_code == 401  # not signed in: refused, as before


def test_the_cookie_is_secure_over_tls(snapshot_path: Path) -> None:
    app = create_app(DashboardSettings(snapshot=snapshot_path, token=TOKEN))
    over_tls = app.server.test_client().get(f"/?token={TOKEN}", base_url="https://dash.example.org")
    plain = app.server.test_client().get(f"/?token={TOKEN}")
    assert "Secure" in over_tls.headers["Set-Cookie"]
    assert "Secure" not in plain.headers["Set-Cookie"]


# -- behind a reverse proxy (served by gunicorn) ---------------------------------------------------


@pytest.fixture(scope="module")
def small_snapshot(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return write_snapshot(tmp_path_factory.mktemp("exposure") / "a.duckdb", T=260, window=120, step=20)


def sign_in_cookie(served: Served, headers: dict[str, str]) -> str:
    conn = http.client.HTTPConnection("127.0.0.1", served.port, timeout=60)
    try:
        conn.request("GET", f"/?token={TOKEN}", headers=headers)
        r: Any = conn.getresponse()
        assert r.status == 303
        return str(r.getheader("Set-Cookie"))
    finally:
        conn.close()


def test_forwarded_proto_is_believed_only_from_configured_proxies(small_snapshot: Path) -> None:
    https = {"X-Forwarded-Proto": "https"}
    served = Served(small_snapshot, workers=1, token=TOKEN)
    try:  # not configured: the header is ignored, even from a loopback peer
        assert "Secure" not in sign_in_cookie(served, https)
    finally:
        served.stop()
    served = Served(small_snapshot, workers=1, token=TOKEN, trusted_proxies=["127.0.0.1"])
    try:  # configured: a request the proxy says came over TLS gets a Secure cookie, others do not
        assert "Secure" in sign_in_cookie(served, https)
        assert "Secure" not in sign_in_cookie(served, {})
    finally:
        served.stop()
