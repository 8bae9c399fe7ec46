"""The nightly schedule: a Prefect 3 deployment of the nightly flow, served on the configured cron.

``shockflow schedule --config FILE`` calls :func:`serve`. A cron schedule needs a real Prefect
server (the temporary server Prefect starts for a lone flow run registers a schedule but never
fires it), so `serve` either uses the server a team already runs or starts one of its own:

**A team's own Prefect server.** Set ``PREFECT_API_URL`` before starting the command, e.g.::

    export PREFECT_API_URL=http://prefect.internal:4200/api
    shockflow schedule --config shockflow.toml

(or ``prefect config set PREFECT_API_URL=...`` in the active Prefect profile; a Prefect Cloud
workspace URL with ``PREFECT_API_KEY`` works the same way). The deployment
``shockflow-nightly/nightly`` then appears on that server with its cron and time zone, every
nightly run (scheduled or started from the UI with "Run") is recorded there, and the process
that ran ``shockflow schedule`` executes the runs. Nothing is started locally.

**No server configured.** `serve` starts ``prefect server start --host 127.0.0.1 --port <free>``
as a child process, with its SQLite database and Prefect home in ``<warehouse>.prefect/``
beside the warehouse file (so the run history survives restarts), analytics off, and waits (up
to 120 s) for ``/api/health``. The UI is then at the logged address while the command runs.

On exit (Ctrl-C or SIGTERM) the runner stops, the deployment is left **active** (not paused: a
later ``shockflow schedule`` or another runner picks it up again), and a server started here is
stopped. Validation of ``[schedule] cron`` and ``timezone`` happens before anything starts.
"""

from __future__ import annotations

import asyncio
import contextlib
import datetime as dt
import logging
import os
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from pipeline._today import schedule_today, today_in
from pipeline.errors import ScheduleError

if TYPE_CHECKING:
    from prefect import Flow
    from prefect.deployments.runner import RunnerDeployment
    from prefect.runner import Runner

__all__ = [
    "DEPLOYMENT_NAME",
    "LocalPrefectServer",
    "build_deployment",
    "check_schedule",
    "schedule_today",
    "serve",
    "today_in",
]

log = logging.getLogger("shockflow.schedule")

#: Name of the deployment (the flow's name is the other half: `<flow name>/nightly`).
DEPLOYMENT_NAME = "nightly"
#: How long a server started here may take to report healthy (a first start migrates SQLite).
SERVER_STARTUP_TIMEOUT = 120.0
#: Environment for every Prefect process this module starts: no telemetry, time for a slow start.
PREFECT_QUIET_ENV = {
    "DO_NOT_TRACK": "1",
    "PREFECT_SERVER_ANALYTICS_ENABLED": "false",
    "PREFECT_SERVER_EPHEMERAL_STARTUP_TIMEOUT_SECONDS": "120",
}


# -- validation -----------------------------------------------------------------------------------

def check_schedule(cron: str, timezone: str, *, where: str = "[schedule]") -> tuple[str, str]:
    """Validate a 5-field cron expression and an IANA time zone; returns them normalised.

    Raises `ScheduleError` naming the key, the bad value and an example of a good one.
    """
    from cronsim import CronSim, CronSimError  # ships with Prefect 3

    if not isinstance(cron, str) or len(cron.split()) != 5:
        msg = (f"{where} cron is {cron!r}; it needs 5 fields (minute hour day-of-month month "
               "day-of-week), e.g. '0 22 * * 1-5' for 22:00 on weekdays")
        raise ScheduleError(msg)
    cron = " ".join(cron.split())
    try:
        CronSim(cron, dt.datetime(2000, 1, 1))
    except CronSimError as exc:
        msg = (f"{where} cron {cron!r} is not a valid cron expression ({exc}); "
               "e.g. '0 22 * * 1-5' for 22:00 on weekdays")
        raise ScheduleError(msg) from exc
    try:
        ZoneInfo(str(timezone))
    except (ZoneInfoNotFoundError, ValueError) as exc:
        msg = (f"{where} timezone {timezone!r} is not an IANA time zone; use a name such as "
               "'UTC', 'Europe/London' or 'America/New_York'")
        raise ScheduleError(msg) from exc
    return cron, str(timezone)


# -- the deployment -------------------------------------------------------------------------------

def _nightly_flow() -> Flow[..., Any]:
    from pipeline.flows import nightly_flow

    return nightly_flow


def _config_parameter(flow: Flow[..., Any]) -> str:
    """The nightly flow's parameter that takes the configuration file's path."""
    for name in ("config_path", "config_file", "config"):
        if name in flow.parameters.properties:
            return name
    msg = (f"flow {flow.name!r} takes no configuration-path parameter (looked for config_path, "
           f"config_file, config; it has {sorted(flow.parameters.properties)})")
    raise ScheduleError(msg)


async def _abuild_deployment(config: Any, *, config_path: str | Path,
                             flow: Flow[..., Any] | None = None,
                             name: str = DEPLOYMENT_NAME) -> RunnerDeployment:
    from prefect.schedules import Cron

    cron, tz = check_schedule(config.schedule.cron, config.schedule.timezone,
                              where=f"[schedule] in {config_path}")
    flow = flow or _nightly_flow()
    path = str(Path(config_path).expanduser().resolve())
    return await flow.ato_deployment(
        name=name,
        schedules=[Cron(cron, timezone=tz)],
        parameters={_config_parameter(flow): path},
        paused=False,
        description=(f"shockflow nightly run of {path}: ingest, fit, publish, export. "
                     f"Cron {cron!r} in {tz}."),
        tags=["shockflow"],
    )


def build_deployment(config: Any, *, config_path: str | Path, flow: Flow[..., Any] | None = None,
                     name: str = DEPLOYMENT_NAME) -> RunnerDeployment:
    """The deployment `serve` registers: `flow` (default: the nightly flow) with the config's
    cron and time zone, and the configuration path as its parameter. Talks to no server."""
    return asyncio.run(_abuild_deployment(config, config_path=config_path, flow=flow, name=name))


# -- a Prefect server of our own ------------------------------------------------------------------

def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class LocalPrefectServer:
    """``prefect server start --host 127.0.0.1`` as a child process with its own SQLite file.

    Use as a context manager: entering starts it and waits for ``/api/health``; leaving stops
    it (SIGTERM to its process group, SIGKILL after `stop_timeout`).
    """

    def __init__(self, home: str | Path, *, port: int | None = None,
                 startup_timeout: float = SERVER_STARTUP_TIMEOUT, stop_timeout: float = 20.0) -> None:
        self.home = Path(home).expanduser().resolve()
        self.port = port or _free_port()
        self.startup_timeout = startup_timeout
        self.stop_timeout = stop_timeout
        self.database = self.home / "prefect.db"
        self.log_path = self.home / "server.log"
        self.process: subprocess.Popen[bytes] | None = None

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    @property
    def api_url(self) -> str:
        return f"{self.url}/api"

    def env(self) -> dict[str, str]:
        env = {k: v for k, v in os.environ.items() if not k.startswith("PREFECT_")}
        env.update(PREFECT_QUIET_ENV)
        env.update({
            "PREFECT_HOME": str(self.home),
            "PREFECT_SERVER_DATABASE_CONNECTION_URL": f"sqlite+aiosqlite:///{self.database}",
            "PREFECT_API_URL": self.api_url,
            "PREFECT_LOGGING_LEVEL": "WARNING",
        })
        return env

    def start(self) -> None:
        self.home.mkdir(parents=True, exist_ok=True)
        prefect = Path(sys.executable).with_name("prefect")
        cmd = ([str(prefect)] if prefect.exists() else [sys.executable, "-m", "prefect"]) + [
            "server", "start", "--host", "127.0.0.1", "--port", str(self.port)]
        log.info("starting a Prefect server on %s (database %s)", self.url, self.database)
        with open(self.log_path, "ab") as out:
            self.process = subprocess.Popen(cmd, env=self.env(), stdout=out,
                                            stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
                                            start_new_session=True)  # Ctrl-C goes to us, not it
        self._wait_healthy()

    def _log_tail(self) -> str:
        try:
            text = self.log_path.read_text(encoding="utf-8", errors="replace")
        except OSError:
            return ""
        return " | ".join(line for line in text.strip().splitlines()[-8:])

    def _wait_healthy(self) -> None:
        assert self.process is not None
        deadline = time.monotonic() + self.startup_timeout
        while time.monotonic() < deadline:
            if self.process.poll() is not None:
                msg = (f"the Prefect server on port {self.port} exited with code "
                       f"{self.process.returncode} while starting (log {self.log_path}): "
                       f"{self._log_tail()}")
                raise ScheduleError(msg)
            try:
                with urllib.request.urlopen(f"{self.api_url}/health", timeout=2) as resp:
                    if resp.status == 200 and resp.read().strip() == b"true":
                        log.info("Prefect server healthy at %s", self.url)
                        return
            except (urllib.error.URLError, ConnectionError, TimeoutError, OSError):
                pass
            time.sleep(0.5)
        self.stop()
        msg = (f"the Prefect server on {self.url} was not healthy after "
               f"{self.startup_timeout:.0f} s (log {self.log_path}): {self._log_tail()}; "
               "retry, or point PREFECT_API_URL at a running Prefect server")
        raise ScheduleError(msg)

    def stop(self) -> None:
        proc, self.process = self.process, None
        if proc is None or proc.poll() is not None:
            return
        log.info("stopping the Prefect server on %s", self.url)
        with contextlib.suppress(ProcessLookupError):
            os.killpg(proc.pid, signal.SIGTERM)
        try:
            proc.wait(timeout=self.stop_timeout)
        except subprocess.TimeoutExpired:
            with contextlib.suppress(ProcessLookupError):
                os.killpg(proc.pid, signal.SIGKILL)
            proc.wait(timeout=10)

    def __enter__(self) -> LocalPrefectServer:
        self.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()


def server_home(config: Any) -> Path:
    """`<warehouse>.prefect/` beside the warehouse file: the server's SQLite and Prefect home."""
    warehouse = Path(config.warehouse.path).expanduser().resolve()
    return warehouse.with_name(warehouse.name + ".prefect")


def configured_api_url() -> str | None:
    """The Prefect API the process is pointed at (PREFECT_API_URL, env or profile), if any."""
    from prefect.settings import get_current_settings

    url = get_current_settings().api.url
    return str(url) if url else None


# -- serving --------------------------------------------------------------------------------------

async def _aserve(config: Any, config_path: str | Path, flow: Flow[..., Any] | None,
                  query_seconds: float | None, on_ready: Callable[[Runner], None] | None) -> None:
    from prefect.runner import Runner

    deployment = await _abuild_deployment(config, config_path=config_path, flow=flow)
    # limit=1: a night that overruns never overlaps the next (both would write the warehouse).
    runner = Runner(name=f"shockflow-{socket.gethostname()}", pause_on_shutdown=False,
                    query_seconds=query_seconds, limit=1)
    await runner.aadd_deployment(deployment)
    log.info("serving deployment %s/%s on cron %r (%s)", deployment.flow_name, deployment.name,
             config.schedule.cron, config.schedule.timezone)
    if on_ready is not None:
        # Called once the runner's loop is running, so `runner.stop()` works from other threads.
        async def _ready() -> None:
            while not runner.started:
                await asyncio.sleep(0.05)
            on_ready(runner)

        ready_task = asyncio.ensure_future(_ready())
    try:
        await runner.start()
    finally:
        if on_ready is not None:
            ready_task.cancel()
        await _unpause(deployment)


async def _unpause(deployment: RunnerDeployment) -> None:
    """Leave the deployment active (a runner stopped elsewhere may have paused it)."""
    from prefect.client.orchestration import get_client

    try:
        async with get_client() as client:
            d = await client.read_deployment_by_name(f"{deployment.flow_name}/{deployment.name}")
            if d.paused:
                await client.resume_deployment(d.id)
    except Exception as exc:  # the server may already be gone; say so, do not mask the exit
        log.warning("could not check that deployment %s is active: %s", deployment.name, exc)


@contextlib.contextmanager
def _api(config: Any, api_url: str | None) -> Iterator[str]:
    """Point this process at `api_url`, the configured PREFECT_API_URL, or a server started here."""
    from prefect.settings import PREFECT_API_URL, temporary_settings

    url = api_url or configured_api_url()
    with contextlib.ExitStack() as stack:
        if url is None:
            for k, v in PREFECT_QUIET_ENV.items():
                os.environ.setdefault(k, v)
            server = stack.enter_context(LocalPrefectServer(server_home(config)))
            url = server.api_url
            log.info("no PREFECT_API_URL set: using the Prefect server started at %s (UI %s)",
                     url, server.url)
        else:
            log.info("using the Prefect server at %s", url)
        stack.enter_context(temporary_settings(updates={PREFECT_API_URL: url}))
        yield url


def serve(config: Any, *, config_path: str | Path, flow: Flow[..., Any] | None = None,
          api_url: str | None = None, query_seconds: float | None = None,
          on_ready: Callable[[Runner], None] | None = None) -> None:
    """Serve the nightly deployment on `config.schedule.cron` in `config.schedule.timezone`.

    Blocks until Ctrl-C or SIGTERM (or `runner.stop()` from `on_ready`'s runner). See the module
    docstring for how the Prefect server is chosen and how a team points this at its own.

    Parameters
    ----------
    config : the loaded configuration (`pipeline.config.Config`); uses `schedule.cron`,
        `schedule.timezone` and `warehouse.path` (the local server's files go beside it).
    config_path : the TOML file; passed to every run as the flow's configuration parameter.
    flow : the flow to deploy (default `pipeline.flows.nightly_flow`).
    api_url : a Prefect API URL overriding PREFECT_API_URL.
    query_seconds : how often the runner polls for due runs (Prefect's default when None).
    on_ready : called with the `Runner` once it is polling (tests use it to stop the runner).
    """
    check_schedule(config.schedule.cron, config.schedule.timezone,
                   where=f"[schedule] in {config_path}")
    with _api(config, api_url):
        try:
            asyncio.run(_aserve(config, config_path, flow, query_seconds, on_ready))
        except KeyboardInterrupt:
            log.info("schedule stopped (Ctrl-C)")
