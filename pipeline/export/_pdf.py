"""PDF of the HTML report, printed by a headless Chromium.

Command (every flag keeps the browser off the network and out of the user's profile):

    chromium --headless --no-sandbox --disable-gpu --disable-background-networking
             --disable-component-update --disable-sync --no-first-run
             --user-data-dir=<tmp> --virtual-time-budget=10000 --no-pdf-header-footer
             --print-to-pdf=<file> file://<report.html>

`--virtual-time-budget` lets the page's scripts (plotly drawing the charts) finish before
printing. Without a Chromium the PDF is skipped with a logged warning, not an error.
"""

from __future__ import annotations

import logging
import re
import shutil
import subprocess
import tempfile
from pathlib import Path

from pipeline.errors import ExportError
from pipeline.export._paths import chromium_profile_prefix

__all__ = ["find_chromium", "pdf_page_count", "print_pdf"]

log = logging.getLogger("shockflow.export")

#: Names tried, in order, when no explicit browser path is given.
_BROWSERS = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")
_FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-extensions",
    "--no-first-run",
    "--no-default-browser-check",
    "--hide-scrollbars",
    "--window-size=1024,1400",
    "--virtual-time-budget=10000",
    "--no-pdf-header-footer",
)


def find_chromium(explicit: str | Path | None = None) -> str | None:
    """The browser to print with: `explicit` if given (must exist), else the first on PATH."""
    if explicit is not None:
        path = shutil.which(str(explicit))
        if path is None:
            msg = (f"`chromium_path` {str(explicit)!r} is not an executable; install Debian's "
                   "chromium (`apt-get install -y chromium`) or pass its path")
            raise ExportError(msg)
        return path
    for name in _BROWSERS:
        path = shutil.which(name)
        if path:
            return path
    return None


def pdf_page_count(path: Path) -> int:
    """Pages in a PDF, counted from its page objects (`/Type /Page`, not `/Pages`)."""
    data = path.read_bytes()
    if not data.startswith(b"%PDF-"):
        msg = f"{path} is not a PDF (it does not start with %PDF-)"
        raise ExportError(msg)
    return len(re.findall(rb"/Type\s*/Page(?![s\w])", data))


def print_pdf(html_path: Path, pdf_path: Path, *, browser: str, timeout: float = 120.0) -> Path:
    """Print `html_path` to `pdf_path` with the headless `browser`; returns `pdf_path`."""
    html_path = html_path.resolve()
    pdf_path = pdf_path.resolve()
    pdf_path.unlink(missing_ok=True)
    with tempfile.TemporaryDirectory(prefix=chromium_profile_prefix()) as profile:  # pid in the name: see _paths
        cmd = [browser, *_FLAGS, f"--user-data-dir={profile}", f"--print-to-pdf={pdf_path}",
               html_path.as_uri()]
        try:
            proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout,
                                  check=False, stdin=subprocess.DEVNULL)
        except subprocess.TimeoutExpired as exc:
            msg = (f"printing {html_path.name} to PDF with {browser} took over {timeout:.0f} s; "
                   "retry, or leave \"pdf\" out of the export formats")
            raise ExportError(msg) from exc
    if proc.returncode != 0 or not pdf_path.is_file() or pdf_path.stat().st_size == 0:
        tail = " ".join((proc.stderr or "").split())[-400:]
        msg = (f"{browser} could not print {html_path} to PDF (exit {proc.returncode}): {tail}; "
               "check that chromium starts headless (`chromium --headless --no-sandbox "
               "--dump-dom about:blank`)")
        raise ExportError(msg)
    pdf_page_count(pdf_path)  # raises when the file is not a PDF
    return pdf_path
