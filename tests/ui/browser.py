"""Driving the real app in headless Chromium: the server, signing in, switching pages, timing.

Shared by the browser test (tests/ui/test_browser.py) and the page-switch benchmark
(tests/benchmarks/bench_ui.py). Chromium is Debian's package, never a browser download;
Playwright only drives it.
"""

from __future__ import annotations

import os
import re
import shutil
import socket
import statistics
import subprocess
import sys
import time
import urllib.request
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

ROOT = Path(__file__).resolve().parents[2]
APP = ROOT / "ui" / "app.py"
ARTIFACTS = ROOT / "tests" / "artifacts"
#: Flags that let Chromium run here: no sandbox (root in a container), no GPU, no calls home.
CHROMIUM_FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--no-first-run",
                  "--disable-quic"]

# A page is shown when its run has ended, its own title is drawn and nothing waits to be drawn.
_PAGE_DONE = """(title) => {
  const app = document.querySelector('[data-testid="stApp"]');
  const h = document.querySelector('[data-testid="stMain"] h1');
  return !!app && app.getAttribute('data-test-script-state') === 'notRunning'
    && !!h && h.innerText.trim().startsWith(title)
    && !document.querySelector('[data-testid="stSkeleton"]');
}"""
_IDLE = """() => { const app = document.querySelector('[data-testid="stApp"]');
  return !!app && app.getAttribute('data-test-script-state') === 'notRunning'; }"""


def chromium() -> str | None:
    return shutil.which("chromium")


def pages() -> list[tuple[str, str]]:
    """(navigation label, page title) of every page, read from the app's own files."""
    from ui.navigation import PAGES

    out = []
    for path, label, *_ in PAGES:
        stem = Path(path).stem
        found = re.search(r'st\.title\("([^"]+)"', (APP.parent / "pages" / f"{stem}.py").read_text())
        out.append((label, found.group(1) if found else label))
    return out


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def health(url: str) -> bool:
    try:
        with urllib.request.urlopen(f"{url}/_stcore/health", timeout=2) as r:
            return r.status == 200
    except OSError:
        return False


def health_round_trip(url: str, n: int = 20) -> float:
    """Median seconds of the server's health request (the floor of any page switch)."""
    times = []
    for _ in range(n):
        t0 = time.perf_counter()
        assert health(url)
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


@contextmanager
def app_server(database_url: str, workdir: Path, *, log: Path) -> Iterator[str]:
    """``streamlit run ui/app.py`` on a free local port, started from ``workdir`` (not the
    repository root, so no configuration file there applies); yields its base URL."""
    port = free_port()
    env = {**os.environ, "SPECLEDGER_DATABASE_URL": database_url,
           "PYTHONPATH": os.pathsep.join(filter(None, [str(ROOT), os.environ.get("PYTHONPATH")]))}
    cmd = [sys.executable, "-m", "streamlit", "run", str(APP), "--server.port", str(port),
           "--server.address", "127.0.0.1", "--server.headless", "true",
           "--browser.gatherUsageStats", "false", "--server.fileWatcherType", "none"]
    with open(log, "wb") as out:
        proc = subprocess.Popen(cmd, cwd=workdir, env=env, stdout=out, stderr=subprocess.STDOUT)
    url = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while not health(url):
            if proc.poll() is not None or time.monotonic() > deadline:
                raise RuntimeError(f"the app did not start; its log:\n{log.read_text()[-3000:]}")
            time.sleep(0.25)
        yield url
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def launch(playwright):
    return playwright.chromium.launch(executable_path=chromium(), args=CHROMIUM_FLAGS)


def wait_idle(page, timeout_s: float = 60) -> None:
    page.wait_for_function(_IDLE, timeout=timeout_s * 1000)


def sign_in(page, url: str, user: str, password: str, first_title: str = "Overview") -> None:
    page.goto(url)
    page.get_by_label("User name").fill(user)
    page.get_by_label("Password", exact=True).fill(password)
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_function(_PAGE_DONE, arg=first_title, timeout=60_000)


def switch(page, label: str, title: str, timeout_s: float = 60) -> float:
    """Click the page's link in the navigation; seconds until the page is fully shown."""
    t0 = time.perf_counter()
    page.get_by_test_id("stSidebarNav").get_by_role("link", name=label, exact=True).click()
    page.wait_for_function(_PAGE_DONE, arg=title, timeout=timeout_s * 1000)
    return time.perf_counter() - t0


def page_switch_times(page, rounds: int = 2) -> dict[str, list[float]]:
    """Seconds per switch to each page in turn, ``rounds`` times round the navigation (the
    pages the signed-in user's roles show: some are for one duty only)."""
    times: dict[str, list[float]] = {}
    nav = page.get_by_test_id("stSidebarNav")
    shown = [(label, title) for label, title in pages()
             if nav.get_by_role("link", name=label, exact=True).count()]
    for _ in range(rounds):
        for label, title in shown:
            times.setdefault(label, []).append(switch(page, label, title))
    return times


def problems_on(page) -> list[str]:
    """Exceptions and unexpected-error messages the page shows (should be none)."""
    shown = page.get_by_test_id("stException").all_inner_texts()
    shown += [t for t in page.get_by_test_id("stAlert").all_inner_texts()
              if "Unexpected error" in t or "Traceback" in t]
    return shown


def toolbar_items(page) -> dict[str, int]:
    """How many deploy buttons and developer menus the page shows (both must be 0)."""
    return {"deploy": page.get_by_test_id("stAppDeployButton").count(),
            "menu": page.get_by_test_id("stMainMenu").count()}
