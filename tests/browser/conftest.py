"""Browser tests: Debian's Chromium driven by Playwright against the real server on a loopback port.

Every test here is marked ``browser`` and put in one xdist group, so under ``pytest -n 2 --dist loadgroup`` the
browser tests share one worker (one server, one browser) while the other worker runs the rest of the suite.
Screenshots of each step go to test-artifacts/screenshots/ (kept by CI as artifacts).
"""

from __future__ import annotations

import os
import re
import tempfile
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from playwright.sync_api import APIResponse, Browser, Page

from tests.browser.charts import STRIP
from tests.browser.live_server import PASSWORD, LiveServer, running_server

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]
ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts"
SCREENSHOTS = ARTIFACTS / "screenshots"
VIEWPORT = {"width": 1280, "height": 800}
HOOK = "window.tracedeskWorkbench"


def pytest_configure(config: pytest.Config) -> None:
    # pytest-xdist registers this marker itself; without xdist (-p no:xdist) strict markers would refuse it.
    config.addinivalue_line("markers", "xdist_group(name): run in the named xdist group (one worker)")


def pytest_collection_modifyitems(items: list[pytest.Item]) -> None:
    here = Path(__file__).parent
    for item in items:
        if here in Path(str(item.fspath)).parents:
            item.add_marker(pytest.mark.browser)
            item.add_marker(pytest.mark.xdist_group("browser"))


@pytest.fixture(scope="session")
def browser_type_launch_args(browser_type_launch_args: dict[str, Any]) -> dict[str, Any]:
    """Debian's Chromium, never a downloaded one. CI (TRACEDESK_REQUIRE_SERVICES) fails without it; others skip."""
    if not CHROMIUM.exists():
        message = f"{CHROMIUM} is missing: apt-get install -y chromium (never `playwright install`)"
        if os.environ.get("TRACEDESK_REQUIRE_SERVICES"):
            pytest.fail(message)
        pytest.skip(message)
    return {**browser_type_launch_args, "executable_path": str(CHROMIUM), "args": CHROMIUM_ARGS}


@pytest.fixture(scope="session")
def live_server() -> Iterator[LiveServer]:
    with tempfile.TemporaryDirectory(prefix="tracedesk-browser-") as folder, running_server(Path(folder)) as server:
        yield server


@pytest.fixture(scope="session")
def base_url(live_server: LiveServer) -> str:
    return live_server.base_url


@pytest.fixture(scope="session")
def browser_context_args(browser_context_args: dict[str, Any]) -> dict[str, Any]:
    return {**browser_context_args, "viewport": VIEWPORT, "accept_downloads": True}


@dataclass
class ConsoleWatch:
    """Console errors and uncaught exceptions of the pages a test opens; expected ones are named explicitly."""

    errors: list[str] = field(default_factory=list)
    allowed: list[re.Pattern[str]] = field(default_factory=list)

    def watch(self, page: Page) -> Page:
        page.on("console", lambda message: self.errors.append(message.text) if message.type == "error" else None)
        page.on("pageerror", lambda error: self.errors.append(f"uncaught: {error}"))
        return page

    def allow(self, pattern: str) -> None:
        self.allowed.append(re.compile(pattern))

    def unexpected(self) -> list[str]:
        return [text for text in self.errors if not any(p.search(text) for p in self.allowed)]


@pytest.fixture
def console(page: Page) -> Iterator[ConsoleWatch]:
    watch = ConsoleWatch()
    watch.watch(page)
    yield watch
    assert watch.unexpected() == [], f"console errors: {watch.unexpected()}"


def shoot(page: Page, name: str) -> None:
    SCREENSHOTS.mkdir(parents=True, exist_ok=True)
    page.screenshot(path=str(SCREENSHOTS / f"{name}.png"))


def log_in(page: Page, username: str = "tom", password: str = PASSWORD) -> None:
    page.goto("/login")
    page.get_by_label("User name").fill(username)
    page.get_by_label("Password").fill(password)
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_url(lambda url: "/login" not in url)
    page.wait_for_selector('meta[name="csrf-token"]', state="attached")


def csrf(page: Page) -> str:
    token = page.locator('meta[name="csrf-token"]').get_attribute("content")
    assert token, "the page carries no CSRF token"
    return token


def api(page: Page, method: str, path: str, **kwargs: Any) -> APIResponse:
    """A JSON API call with the page's session and CSRF token; asserts a 2xx answer."""
    headers = {"X-CSRF-Token": csrf(page), **kwargs.pop("headers", {})}
    response = page.request.fetch(path, method=method, headers=headers, **kwargs)
    assert response.ok, f"{method} {path}: {response.status} {response.text()}"
    return response


def upload_sheet(page: Page, png: bytes, *, name: str, collection: str) -> int:
    collection_id = api(page, "POST", "/api/v1/collections", data={"name": collection}).json()["id"]
    files = {"files": {"name": name, "mimeType": "image/png", "buffer": png}}
    answer = api(page, "POST", f"/api/v1/collections/{collection_id}/sheets", multipart=files).json()
    return int(answer["sheets"][0]["id"])


def calibrate_strip_through_the_api(page: Page, sheet_id: int) -> None:
    """Calibrate a `charts.strip_chart_png` sheet at its four frame corners (0-48 h, 0-10 m), as if clicked."""
    corners = [(0.0, 0.0), (48.0, 0.0), (48.0, 10.0), (0.0, 10.0)]
    points = [
        {"pixel": STRIP.data_to_pixel(np.array([x]), np.array([y]))[0].tolist(), "value": [x, y]} for x, y in corners
    ]
    calibration = {
        "kind": "cartesian",
        "x_axis": {"scale": "time"},
        "y_axis": {"scale": "linear", "unit": "m"},
        "control_points": points,
    }
    api(page, "PUT", f"/api/v1/sheets/{sheet_id}/calibration", data=calibration)


def open_workbench(page: Page, sheet_id: int) -> None:
    page.goto(f"/sheets/{sheet_id}/workbench")
    page.wait_for_selector("[data-workbench][data-ready='true']")


def show_whole(page: Page, width: float, height: float) -> None:
    page.evaluate(f"{HOOK}.showImageRect(0, 0, {width}, {height})")


def image_to_page(page: Page, u: float, v: float) -> tuple[float, float]:
    point = page.evaluate(f"{HOOK}.imageToPage({u}, {v})")
    return float(point["x"]), float(point["y"])


def click_image(page: Page, u: float, v: float, **kwargs: Any) -> None:
    page.mouse.click(*image_to_page(page, u, v), **kwargs)


def drag_image(page: Page, start: tuple[float, float], end: tuple[float, float]) -> None:
    x0, y0 = image_to_page(page, *start)
    x1, y1 = image_to_page(page, *end)
    page.mouse.move(x0, y0)
    page.mouse.down()
    page.mouse.move((x0 + x1) / 2, (y0 + y1) / 2, steps=4)
    page.mouse.move(x1, y1, steps=4)
    page.mouse.up()


def second_page(browser: Browser, base_url: str, username: str) -> Page:
    context = browser.new_context(base_url=base_url, viewport=VIEWPORT)  # type: ignore[arg-type]
    page = context.new_page()
    log_in(page, username)
    return page
