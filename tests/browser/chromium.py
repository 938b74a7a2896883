"""Find and drive headless Chromium for the report's real-browser test.

The page under test records its own outcome in ``<pre id="render-status">``
(see :mod:`ratescape.report`); Chromium's ``--dump-dom`` prints the DOM
after ``--virtual-time-budget`` milliseconds of virtual time, so no
DevTools client is needed. Networking is cut off by a proxy that points at
the discard port of the loopback address and applies to every host
(``<-loopback>`` removes the implicit loopback bypass); ``file://`` pages
do not use the proxy.
"""
from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

CANDIDATES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable", "chrome")


def find_chromium() -> str | None:
    """Path of a Chromium executable: $RATESCAPE_CHROMIUM, then PATH, then /usr/bin/chromium."""
    env = os.environ.get("RATESCAPE_CHROMIUM")
    if env and Path(env).exists():
        return env
    for name in CANDIDATES:
        found = shutil.which(name)
        if found:
            return found
    return "/usr/bin/chromium" if Path("/usr/bin/chromium").exists() else None


def running_under_ci() -> bool:
    """True when the CI environment variable is set to a true-ish value."""
    return os.environ.get("CI", "").strip().lower() not in ("", "0", "false", "no")


def headless_flags(user_data_dir: str | Path) -> list[str]:
    """Chromium flags: headless, no sandbox (containers), no network, no background services."""
    return [
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-dev-shm-usage",
        "--disable-quic",
        "--no-first-run",
        "--no-default-browser-check",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--disable-extensions",
        "--disable-features=Translate,MediaRouter,OptimizationHints",
        "--proxy-server=127.0.0.1:9",
        "--proxy-bypass-list=<-loopback>",
        "--allow-file-access-from-files",
        "--enable-logging=stderr",
        "--v=0",
        f"--user-data-dir={user_data_dir}",
    ]


@dataclass
class PageResult:
    """What the browser saw: the DOM after the budget, Chromium's log, and the page's status record."""

    dom: str
    log: str
    returncode: int
    status: dict | None

    def console_errors(self) -> list[str]:
        """Console messages at error level from Chromium's log (``:ERROR:CONSOLE``/``Uncaught``)."""
        return [line for line in self.log.splitlines()
                if ("CONSOLE" in line and ("ERROR" in line.split("CONSOLE")[0] or "Uncaught" in line))
                or "Uncaught" in line]


_STATUS_RE = re.compile(r'<pre id="render-status"[^>]*>(.*?)</pre>', re.S)


def load_page(path: str | Path, *, budget_ms: int = 5000, timeout_s: float = 90.0,
              chromium: str | None = None) -> PageResult:
    """Open ``path`` from disk in headless Chromium and return the rendered DOM.

    ``timeout_s`` only guards against a hung browser; it is not a check.
    """
    exe = chromium or find_chromium()
    if exe is None:
        raise FileNotFoundError("no Chromium found; install it with .ci/install-browser.sh")
    url = Path(path).resolve().as_uri()
    with tempfile.TemporaryDirectory(prefix="ratescape-chromium-") as profile:
        cmd = [exe, *headless_flags(profile), f"--virtual-time-budget={int(budget_ms)}", "--dump-dom", url]
        proc = subprocess.run(cmd, capture_output=True, text=True, timeout=timeout_s,
                              env={**os.environ, "HOME": profile})
    status = None
    match = _STATUS_RE.search(proc.stdout)
    if match:
        import html

        text = html.unescape(match.group(1)).strip()
        if text:
            try:
                status = json.loads(text)
            except ValueError:
                status = {"unparsed": text}
    return PageResult(dom=proc.stdout, log=proc.stderr, returncode=proc.returncode, status=status)
