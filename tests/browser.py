"""Headless-Chromium harness shared by the map and report tests.

Gives pytest fixtures ``chromium_driver`` (one browser per test module) and
``browser_page`` (a fresh page per test, with the logs of earlier tests drained), plus
helpers: :func:`assert_not_blank` for screenshots. The browser runs with every network
request blocked twice over (CDP ``Network.setBlockedURLs`` for http/https/ws and a proxy
pointing at a closed loopback port), and the harness records each request the page tried
so tests can assert that an offline page asked for nothing. Tests are skipped with a clear
reason when Chromium, chromedriver or selenium are not installed.

Load it from a test module with ``pytest_plugins = ["tests.browser"]`` (or from a root
conftest).
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pytest

CHROMIUM = os.environ.get("COVERAGE_AUDIT_CHROMIUM", "/usr/bin/chromium")
CHROMEDRIVER = os.environ.get("COVERAGE_AUDIT_CHROMEDRIVER", "/usr/bin/chromedriver")
WINDOW = (1280, 900)
BLOCKED_URLS = ["http://*", "https://*", "ws://*", "wss://*", "ftp://*"]
# Schemes a self-contained page may use without touching the network.
LOCAL_SCHEMES = ("file:", "data:", "blob:", "about:", "chrome:", "devtools:")
# A closed port on loopback: anything that slips past the CDP block goes nowhere.
DEAD_PROXY = "http://127.0.0.1:9"

CHROMIUM_ARGS = (
    "--headless=new",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-default-apps",
    "--disable-extensions",
    "--disable-dev-shm-usage",
    "--metrics-recording-only",
    "--no-default-browser-check",
    f"--proxy-server={DEAD_PROXY}",
    "--proxy-bypass-list=<-loopback>",
    f"--window-size={WINDOW[0]},{WINDOW[1]}",
)


def chromium_missing() -> str | None:
    """Return why the browser tests cannot run here, or ``None`` when they can."""
    try:
        import selenium  # noqa: F401
    except ImportError:
        return "selenium is not installed (pip install selenium)"
    for path, what in ((CHROMIUM, "Chromium"), (CHROMEDRIVER, "chromedriver")):
        if not (Path(path).exists() or shutil.which(path)):
            return f"{what} not found at {path} (apt-get install chromium chromium-driver)"
    return None


def start_chromium(user_data_dir: str | os.PathLike[str], *, network_log: bool = True) -> Any:
    """Start headless Chromium through chromedriver with the network blocked.

    Parameters
    ----------
    user_data_dir : path-like
        A fresh profile folder (so no state leaks between runs).
    network_log : bool, default True
        Record every request (chromedriver's performance log); benchmarks turn it off
        because collecting the log slows large pages down.

    Returns
    -------
    selenium.webdriver.Chrome
    """
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for arg in CHROMIUM_ARGS:
        options.add_argument(arg)
    options.add_argument(f"--user-data-dir={user_data_dir}")
    prefs = {"browser": "ALL", "performance": "ALL"} if network_log else {"browser": "ALL"}
    options.set_capability("goog:loggingPrefs", prefs)
    driver = webdriver.Chrome(service=Service(executable_path=CHROMEDRIVER), options=options)
    driver.set_page_load_timeout(120)
    driver.set_script_timeout(60)
    driver.execute_cdp_cmd("Network.enable", {})
    driver.execute_cdp_cmd("Network.setBlockedURLs", {"urls": BLOCKED_URLS})
    return driver


@dataclass
class BrowserPage:
    """One test's view of the shared browser: open a page, read its logs, screenshot it."""

    driver: Any
    folder: Path
    console: list[dict[str, Any]] = field(default_factory=list)
    requests: list[str] = field(default_factory=list)
    failed: dict[str, str] = field(default_factory=dict)
    _urls: dict[str, str] = field(default_factory=dict, repr=False)

    def drain_logs(self) -> None:
        """Move pending browser and network log entries into ``console`` and ``requests``."""
        self.console.extend(self.driver.get_log("browser"))
        try:
            entries = self.driver.get_log("performance")
        except Exception:  # a driver started with network_log=False has no such log
            entries = []
        for entry in entries:
            try:
                message = json.loads(entry["message"])["message"]
            except (KeyError, ValueError):
                continue
            method, params = message.get("method"), message.get("params", {})
            if method == "Network.requestWillBeSent":
                self.requests.append(params["request"]["url"])
                self._urls[params.get("requestId", "")] = params["request"]["url"]
            elif method == "Network.loadingFailed":
                url = self._urls.get(params.get("requestId", ""), "?")
                self.failed[url] = params.get("blockedReason") or params.get("errorText", "")

    def open(
        self, path: str | os.PathLike[str], *, ready: str | None = None, timeout: float = 60.0
    ) -> float:
        """Open a local file and wait until the JS expression ``ready`` is truthy.

        Returns
        -------
        float
            Seconds from the start of navigation until ``ready`` held (or until the load
            event when ``ready`` is None).
        """
        url = Path(path).resolve().as_uri()
        start = time.perf_counter()
        self.driver.get(url)
        if ready is not None:
            self.wait_for(ready, timeout=timeout)
        elapsed = time.perf_counter() - start
        self.drain_logs()
        return elapsed

    def wait_for(self, expression: str, *, timeout: float = 30.0) -> Any:
        """Poll the JS ``expression`` until it is truthy; fail the test on time-out."""
        deadline = time.perf_counter() + timeout
        while True:
            value = self.driver.execute_script(f"return ({expression});")
            if value:
                return value
            if time.perf_counter() > deadline:
                self.drain_logs()
                pytest.fail(
                    f"timed out after {timeout:.0f} s waiting for {expression!r}; "
                    f"console: {self.console_errors()}"
                )
            time.sleep(0.05)

    def js(self, script: str, *args: Any) -> Any:
        """Run ``script`` (a function body using ``arguments``) in the page."""
        return self.driver.execute_script(script, *args)

    def console_errors(self) -> list[str]:
        """Console messages of level SEVERE (errors, failed loads) seen so far."""
        return [e["message"] for e in self.console if e.get("level") == "SEVERE"]

    def failed_requests(self) -> dict[str, str]:
        """URL -> why it failed (``blockedReason`` such as "inspector", or the net error)."""
        return dict(self.failed)

    def network_requests(self) -> list[str]:
        """Requests the page tried that would have needed the network (all were blocked)."""
        return [u for u in self.requests if not u.startswith(LOCAL_SCHEMES)]

    def screenshot(self, name: str = "page.png") -> Path:
        """Save a PNG screenshot of the viewport under the test's folder."""
        out = self.folder / name
        self.driver.save_screenshot(str(out))
        return out


def distinct_colours(png: str | os.PathLike[str]) -> tuple[int, float]:
    """Return (number of distinct RGB colours, share of the most common colour) of a PNG."""
    from matplotlib.image import imread

    image = imread(str(png))
    rgb = np.round(np.asarray(image)[..., :3] * 255).astype(np.uint32)
    packed = (rgb[..., 0] << 16) | (rgb[..., 1] << 8) | rgb[..., 2]
    _, counts = np.unique(packed.ravel(), return_counts=True)
    return int(counts.size), float(counts.max() / counts.sum())


def assert_not_blank(
    png: str | os.PathLike[str], *, min_colours: int = 8, max_dominant: float = 0.95
) -> int:
    """Fail unless the screenshot shows something: several colours, none covering it all.

    The limits are common practice, no source: a blank or single-colour page has one or
    two colours; a drawn map has hundreds.
    """
    n_colours, dominant = distinct_colours(png)
    assert n_colours >= min_colours, f"{png}: only {n_colours} colours, looks blank"
    assert dominant <= max_dominant, f"{png}: one colour covers {dominant:.1%} of it"
    return n_colours


@pytest.fixture(scope="module")
def chromium_driver() -> Iterator[Any]:
    """One headless Chromium per test module, network blocked; skipped when unavailable."""
    reason = chromium_missing()
    if reason:
        if os.environ.get("COVERAGE_AUDIT_REQUIRE_BROWSER"):
            # CI installs Chromium (.ci/run sets this): there a missing browser is a fault.
            pytest.fail(f"COVERAGE_AUDIT_REQUIRE_BROWSER is set but {reason}")
        pytest.skip(f"browser tests need headless Chromium: {reason}")
    profile = tempfile.mkdtemp(prefix="ca-chromium-")
    driver = start_chromium(profile)
    try:
        yield driver
    finally:
        driver.quit()
        shutil.rmtree(profile, ignore_errors=True)


@pytest.fixture
def browser_page(chromium_driver: Any, tmp_path: Path) -> Iterator[BrowserPage]:
    """A page for one test: earlier logs drained, screenshots under ``tmp_path``."""
    chromium_driver.get("about:blank")
    chromium_driver.get_log("browser")
    chromium_driver.get_log("performance")
    page = BrowserPage(driver=chromium_driver, folder=tmp_path)
    yield page
