"""A technician's day on one strip chart, through the browser: sign in, upload, calibrate by clicking control points,
find the pen line in a drawn box, fit, and download the CSV.

Truth: y = 3 + 2 sin(2 pi x / 24) m over x = 0..48 h, drawn by matplotlib into a box whose pixel corners are known
exactly (tests/science/chart_render.py). Target (issue 4): CSV values within 0.5 % of full scale (10 m) of the truth.
"""

from __future__ import annotations

import csv
import io

import numpy as np
from playwright.sync_api import Page, expect

from tests.browser.charts import PEN, STRIP, STRIP_FULL_SCALE, STRIP_SIZE, strip_chart_png, strip_truth
from tests.browser.conftest import ConsoleWatch, api, click_image, drag_image, log_in, shoot, show_whole

CONTROL_VALUES = [(0.0, 0.0), (48.0, 0.0), (48.0, 10.0), (0.0, 10.0), (24.0, 5.0)]


def _upload_through_the_page(page: Page) -> None:
    collection_id = api(page, "POST", "/api/v1/collections", data={"name": "Reservoir levels 1987"}).json()["id"]
    page.goto(f"/collections/{collection_id}")
    page.set_input_files(
        "[data-upload-input]", files=[{"name": "level.png", "mimeType": "image/png", "buffer": strip_chart_png()}]
    )
    expect(page.locator(".upload-list .result.ok")).to_contain_text("added as sheet")
    shoot(page, "02-upload")


def _open_sheet_then_workbench(page: Page) -> None:
    page.reload()
    page.locator(".sheet-card").first.click()
    page.get_by_role("link", name="Open in the workbench").click()
    page.wait_for_selector("[data-workbench][data-ready='true']")
    show_whole(page, *STRIP_SIZE)
    shoot(page, "03-workbench")


def _calibrate(page: Page) -> None:
    page.get_by_label("y unit").fill("m")
    page.get_by_role("button", name="Place points").click()
    rows = page.locator("[data-points-table] tbody tr")
    targets = []
    for index, (x, y) in enumerate(CONTROL_VALUES):
        u, v = STRIP.data_to_pixel(np.array([x]), np.array([y]))[0]
        targets.append((u, v))
        click_image(page, u, v)
        rows.nth(index).get_by_label(f"x value of point {index + 1}").fill(f"{x:g}")
        rows.nth(index).get_by_label(f"y value of point {index + 1}").fill(f"{y:g}")
    report = page.locator("[data-cal-report]")
    expect(report).to_contain_text("Points off by")
    # The clicks land where the image pixels are: the overlay and the scan are in register (ARCHITECTURE.md).
    for index, (u, v) in enumerate(targets):
        placed_u = float(rows.nth(index).locator('input[name="u"]').input_value())
        placed_v = float(rows.nth(index).locator('input[name="v"]').input_value())
        assert abs(placed_u - u) < 1.0 and abs(placed_v - v) < 1.0, (index, placed_u, placed_v, u, v)
    shoot(page, "04-calibrate")
    page.get_by_role("button", name="Save calibration").click()
    expect(page.locator("[data-cal-summary]")).to_contain_text("Saved as version 1")
    page.keyboard.press("Escape")


def _auto_trace(page: Page) -> None:
    page.get_by_role("tab", name="Trace").click()
    form = page.locator("[data-auto-form]")
    form.get_by_label("Name").fill("level")
    form.get_by_label("Unit").fill("m")
    form.get_by_label("Pen colour").fill("#000000")
    page.get_by_role("button", name="Pick from the scan").click()
    u, v = STRIP.data_to_pixel(np.array([6.0]), np.array([strip_truth(np.array([6.0]))[0]]))[0]
    click_image(page, u, v)
    expect(page.locator("[data-colour-note]")).to_contain_text("Ink")
    picked = form.get_by_label("Pen colour").input_value()
    assert all(abs(int(picked[k : k + 2], 16) - int(PEN[k : k + 2], 16)) <= 16 for k in (1, 3, 5)), picked
    page.get_by_role("button", name="Draw the region").click()
    drag_image(page, (62.0, 42.0), (1138.0, 538.0))
    expect(page.locator("[data-region-note]")).to_contain_text("Box from")
    page.get_by_role("button", name="Find the line").click()
    review = page.locator("[data-review]")
    expect(review).to_be_visible(timeout=30_000)
    expect(review).to_contain_text("vertices")
    shoot(page, "05-auto-trace-review")
    page.get_by_role("button", name="Keep this trace").click()
    expect(review).to_be_hidden()


def _fit(page: Page) -> None:
    page.get_by_role("tab", name="Fit").click()
    form = page.locator("[data-fit-form]")
    form.get_by_label("Model").select_option("fourier")
    form.get_by_label("Degree").fill("1")
    form.get_by_label("Period h").fill("24")
    form.get_by_role("button", name="Fit", exact=True).click()
    coefficients = page.locator("[data-coefficients] tbody tr")
    expect(coefficients.first).to_contain_text("a0")
    a0 = float(coefficients.first.locator("td").nth(1).inner_text())
    assert abs(a0 - 3.0) < 0.005 * STRIP_FULL_SCALE  # the sine's offset, truth above
    expect(page.locator("[data-equation-math] math")).to_be_attached()
    expect(page.locator("[data-residual-plot] svg")).to_be_attached()
    shoot(page, "06-fit")


def _download_csv(page: Page) -> list[list[str]]:
    page.get_by_role("tab", name="Data").click()
    form = page.locator("[data-resample]")
    form.get_by_label("Step").fill("0.5")
    form.get_by_label("Between samples").select_option("pchip")
    form.get_by_role("button", name="Preview").click()
    expect(page.locator("[data-resample-state]")).to_contain_text("rows")
    shoot(page, "07-data")
    with page.expect_download() as download:
        page.get_by_role("link", name="Download CSV").click()
    path = download.value.path()
    with open(path, encoding="utf-8") as handle:
        return list(csv.reader(io.StringIO(handle.read())))


def test_upload_calibrate_trace_fit_and_download_match_the_truth(page: Page, console: ConsoleWatch) -> None:
    log_in(page)
    shoot(page, "01-signed-in")
    _upload_through_the_page(page)
    _open_sheet_then_workbench(page)
    _calibrate(page)
    _auto_trace(page)
    _fit(page)
    rows = _download_csv(page)
    assert rows[0][:3] == ["x [h]", "level [m]", "flag"]
    assert {row[3] for row in rows[1:]} == {"auto"}  # the trace's origin, last columns
    values = np.array([[float(row[0]), float(row[1])] for row in rows[1:] if row[1]])
    assert len(values) > 80  # 0.5 h steps over the traced 47.9 h
    error = np.abs(values[:, 1] - strip_truth(values[:, 0]))
    assert error.max() < 0.005 * STRIP_FULL_SCALE, f"worst CSV error {error.max():.4f} m"
