"""The chart-spec page's printed-grid form: describe the strip chart's paper, try it on a scan, save it, see it
listed, edit it (If-Match on the version read), and get the server's reason, beside the form and with nothing
saved, for a grid that cannot be printed.

Truth (tests/browser/charts.py): the strip chart drawn by matplotlib over x = 0..48 h and y = 0..10 m, with a grid
line every 2 h and every 1 m in the grid colour of tests/science/chart_render.py (#e8a48c, as in
test_workbench_chart_specs.py). Confidence threshold 0.5: DetectRequest.min_confidence's default.
"""

from __future__ import annotations

from typing import Any

from playwright.sync_api import Locator, Page, expect

from tests.browser.charts import CircularChart, strip_chart_png
from tests.browser.conftest import ConsoleWatch, api, log_in, open_workbench, shoot

EXPECTED_GRID = {
    "kind": "cartesian",
    "x_axis": {"scale": "time", "frame": [0, 48], "minor_step": 2, "major_step": 12},
    "y_axis": {"scale": "linear", "frame": [0, 10], "minor_step": 1, "major_step": 5},
    "grid_colour": "#e8a48c",
    "pen_colours": ["#1f3cc8"],
    "colour_tolerance": 30,
}
NAME = "Level recorder paper, 48 h"
# The daily circular chart of tests/browser/charts.py: rings every 10 units from 0 (60 px) to 100 (360 px), so
# 15 and 90 mm at 4 px/mm; a straight time line every hour (15 degrees), time zero at 12 o'clock (-90 degrees
# clockwise from 3 o'clock), later times clockwise; grid colour CircleGrid's default in chart_render.py.
EXPECTED_RINGS = {
    "kind": "circular",
    "value_axis": {"scale": "linear", "frame": [0, 100], "minor_step": 10, "major_step": 50},
    "ring_radii_mm": [15, 90],
    "period_hours": 24,
    "time_line_hours": 1,
    "time_lines": "radial",
    "time_zero_angle_deg": -90,
    "time_direction": "clockwise",
    "grid_colour": "#9cc59a",
}  # empty pen colours and tolerance are left out: the server's defaults apply (science/grid_spec.py)


def _collection_with_sheet(page: Page, name: str, png: bytes | None = None) -> tuple[int, int]:
    collection_id = int(api(page, "POST", "/api/v1/collections", data={"name": name}).json()["id"])
    files = {"files": {"name": "week-1.png", "mimeType": "image/png", "buffer": png or strip_chart_png()}}
    sheets = api(page, "POST", f"/api/v1/collections/{collection_id}/sheets", multipart=files).json()["sheets"]
    return collection_id, int(sheets[0]["id"])


def _specs(page: Page, collection_id: int) -> list[dict[str, Any]]:
    return list(api(page, "GET", f"/api/v1/chart-specs?collection_id={collection_id}").json())


def _open_page(page: Page, collection_id: int) -> Locator:
    page.goto(f"/collections/{collection_id}/chart-specs")
    page.wait_for_selector("[data-grid-form][data-ready='true']")
    return page.locator("[data-grid-form]")


def _fill_axis(form: Locator, legend: str, scale: str, values: tuple[str, str, str, str]) -> None:
    axis = form.get_by_role("group", name=legend)
    axis.get_by_label("Scale").select_option(scale)
    for label, value in zip(
        ("First printed line", "Last printed line", "Line every", "Bold line every"), values, strict=True
    ):
        axis.get_by_label(label, exact=True).fill(value)


def test_describe_try_save_and_edit_a_grid_chart(page: Page, console: ConsoleWatch) -> None:
    log_in(page)
    collection_id, sheet_id = _collection_with_sheet(page, "Level recorder, grid form")
    page.goto(f"/collections/{collection_id}")
    page.get_by_role("link", name="chart specs and printed grids").click()
    form = page.locator("[data-grid-form]")
    page.wait_for_selector("[data-grid-form][data-ready='true']")

    form.get_by_label("Name", exact=True).fill(NAME)
    form.get_by_label("Kind of chart").select_option("cartesian")
    _fill_axis(form, "x axis (across the sheet)", "time", ("0", "48", "2", "12"))
    _fill_axis(form, "y axis (up the sheet)", "linear", ("0", "10", "1", "5"))
    form.get_by_label("Grid colour").fill("#e8a48c")
    form.get_by_label("Pen colours").fill("#1f3cc8")
    form.get_by_label("Colour tolerance").fill("30")

    # Try the unsaved description on the scan: the strip chart's grid is found, and nothing is stored.
    form.get_by_label("Sheet").select_option(str(sheet_id))
    form.get_by_role("button", name="Look for this grid").click()
    result = form.locator("[data-try-result]")
    expect(result).to_contain_text("the grid was found")
    expect(result).to_contain_text("Grid lines measured:")
    confidence = float(result.locator(".notice").inner_text().split(":")[0].removeprefix("Confidence "))
    assert confidence >= 0.5
    shoot(page, "chart-spec-grid-tried")
    calibration = page.request.get(f"/api/v1/sheets/{sheet_id}/calibration")
    # calibrations.require_calibration: a sheet without a calibration answers 422 "has no calibration yet".
    assert calibration.status == 422 and "has no calibration yet" in calibration.text(), "trying must not calibrate"
    assert _specs(page, collection_id) == []

    form.get_by_role("button", name="Save chart spec").click()
    expect(form.locator("[data-save-state]")).to_have_text("Saved as version 1.")
    (spec,) = _specs(page, collection_id)
    row = page.locator(f'[data-spec-row="{spec["id"]}"]')
    expect(row).to_contain_text(NAME)
    expect(row).to_contain_text("this collection")
    assert spec["collection_id"] == collection_id and spec["version"] == 1
    assert spec["geometry"] == EXPECTED_GRID
    shoot(page, "chart-spec-grid-saved")

    # Edit the open spec: the form sends If-Match with the version it read, and the list shows version 2.
    form.get_by_role("group", name="y axis (up the sheet)").get_by_label("Bold line every").fill("2")
    form.get_by_role("button", name="Save chart spec").click()
    expect(form.locator("[data-save-state]")).to_have_text("Saved as version 2.")
    expect(row.locator("td.num")).to_have_text("2")
    (spec,) = _specs(page, collection_id)
    assert spec["geometry"]["y_axis"]["major_step"] == 2

    # A frame off the line spacing is refused by name (both frame fields marked) and the spec stays at version 2.
    console.allow(r"status of 4(12|22)")
    x_axis = form.get_by_role("group", name="x axis (across the sheet)")
    x_axis.get_by_label("First printed line").fill("1")
    form.get_by_role("button", name="Save chart spec").click()
    errors = form.locator("[data-grid-errors]")
    expect(errors).to_contain_text("Not saved: x_axis.frame: the frame spans 23.5 minor steps")
    expect(x_axis.get_by_label("First printed line")).to_have_attribute("aria-invalid", "true")
    expect(x_axis.get_by_label("Last printed line")).to_have_attribute("aria-invalid", "true")
    assert _specs(page, collection_id)[0]["version"] == 2

    # Someone else saves the spec meanwhile: the form's If-Match is stale and it says so instead of overwriting.
    x_axis.get_by_label("First printed line").fill("0")
    etag = api(page, "GET", f"/api/v1/chart-specs/{spec['id']}").headers["etag"]
    api(page, "PATCH", f"/api/v1/chart-specs/{spec['id']}", data={"notes": "checked"}, headers={"If-Match": etag})
    form.get_by_role("button", name="Save chart spec").click()
    expect(errors).to_contain_text("someone saved this chart spec after you opened it")
    expect(x_axis.get_by_label("First printed line")).not_to_have_attribute("aria-invalid", "true")
    (spec,) = _specs(page, collection_id)
    assert spec["version"] == 3 and spec["notes"] == "checked" and spec["geometry"]["y_axis"]["major_step"] == 2


def test_a_bad_frame_is_explained_beside_the_form_and_nothing_is_saved(page: Page, console: ConsoleWatch) -> None:
    console.allow(r"status of 422")
    log_in(page)
    collection_id, _ = _collection_with_sheet(page, "Level recorder, bad frame")
    form = _open_page(page, collection_id)
    form.get_by_label("Name", exact=True).fill("Flow paper, log scale")
    _fill_axis(form, "x axis (across the sheet)", "time", ("0", "48", "2", "12"))
    y_axis = form.get_by_role("group", name="y axis (up the sheet)")
    y_axis.get_by_label("Scale").select_option("log10")
    y_axis.get_by_label("First printed line").fill("0")  # no decade reaches 0 on a log10 axis
    y_axis.get_by_label("Last printed line").fill("100")
    form.get_by_label("Grid colour").fill("#e8a48c")

    form.get_by_role("button", name="Save chart spec").click()
    errors = form.locator("[data-grid-errors]")
    expect(errors).to_be_visible()
    # The message of science/grid_spec.py's frame check, which names the field.
    expect(errors).to_contain_text("Not saved: y_axis.frame[0]: a log10 axis needs values > 0, got 0")
    first = y_axis.get_by_label("First printed line")
    expect(first).to_have_attribute("aria-invalid", "true")
    expect(first).to_be_focused()
    shoot(page, "chart-spec-grid-bad-frame")
    assert _specs(page, collection_id) == []

    # Corrected to the first printed decade, it saves.
    first.fill("1")
    form.get_by_role("button", name="Save chart spec").click()
    expect(form.locator("[data-save-state]")).to_have_text("Saved as version 1.")
    (spec,) = _specs(page, collection_id)
    assert spec["geometry"]["y_axis"] == {
        "scale": "log10",
        "frame": [1, 100],
    }, "empty decade fields leave the defaults (1..9, bold 1) to the server"


def test_a_viewer_sees_the_grid_but_cannot_change_it(page: Page, console: ConsoleWatch) -> None:
    log_in(page)
    collection_id, _ = _collection_with_sheet(page, "Level recorder, viewer")
    body = {"name": NAME, "collection_id": collection_id, "geometry": EXPECTED_GRID}
    spec_id = api(page, "POST", "/api/v1/chart-specs", data=body).json()["id"]
    page.context.clear_cookies()
    log_in(page, "vic")
    form = _open_page(page, collection_id)
    page.get_by_role("link", name="Show grid").click()
    x_axis = form.get_by_role("group", name="x axis (across the sheet)")
    expect(x_axis.get_by_label("Last printed line")).to_have_value("48")
    expect(x_axis.get_by_label("Last printed line")).to_be_disabled()
    expect(form.get_by_role("button", name="Save chart spec")).to_be_disabled()
    expect(form.get_by_role("button", name="Look for this grid")).to_be_disabled()
    expect(page.locator(f'[data-spec-row="{spec_id}"]')).to_have_attribute("aria-current", "true")


def test_describe_try_and_save_a_circular_chart(page: Page, console: ConsoleWatch) -> None:
    log_in(page)
    collection_id, sheet_id = _collection_with_sheet(page, "Boiler pressure, daily", CircularChart().png())
    form = _open_page(page, collection_id)
    form.get_by_label("Name", exact=True).fill("Daily pressure chart 0-100")
    form.get_by_label("Kind of chart").select_option("circular")
    expect(form.get_by_role("group", name="x axis (across the sheet)")).to_be_hidden()
    rings = form.get_by_role("group", name="Value rings")
    rings.get_by_label("Scale").select_option("linear")
    for label, value in (
        ("First printed line", "0"),
        ("Last printed line", "100"),
        ("Line every", "10"),
        ("Bold line every", "50"),
    ):
        rings.get_by_label(label, exact=True).fill(value)
    time = form.get_by_role("group", name="Ring sizes and time")
    time.get_by_label("Radius of the first ring").fill("15")
    time.get_by_label("Radius of the last ring").fill("90")
    time.get_by_label("Hours per turn").fill("24")
    time.get_by_label("Time line every", exact=True).fill("1")
    time.get_by_label("Time lines are").select_option("arcs")
    expect(time.get_by_label("Pen arm length")).to_be_visible()
    time.get_by_label("Time lines are").select_option("radial")
    expect(time.get_by_label("Pen arm length")).to_be_hidden()
    time.get_by_label("Time-zero line at").fill("-90")
    time.get_by_label("Later times run").select_option("clockwise")
    form.get_by_label("Grid colour", exact=True).fill("#9cc59a")

    form.get_by_role("button", name="Look for this grid").click()
    result = form.locator("[data-try-result]")
    expect(result).to_contain_text("the grid was found")
    expect(result).to_contain_text("Printed rings found: 11 of 11")
    expect(result).to_contain_text("time zero found from the time lines")
    shoot(page, "chart-spec-rings-tried")

    form.get_by_role("button", name="Save chart spec").click()
    expect(form.locator("[data-save-state]")).to_have_text("Saved as version 1.")
    (spec,) = _specs(page, collection_id)
    expect(page.locator(f'[data-spec-row="{spec["id"]}"]')).to_contain_text("circular chart")
    assert spec["geometry"] == EXPECTED_RINGS
    assert page.request.get(f"/api/v1/sheets/{sheet_id}/calibration").status == 422  # still not calibrated


def test_the_workbench_picker_opens_the_chosen_spec_here(page: Page, console: ConsoleWatch) -> None:
    log_in(page)
    collection_id, sheet_id = _collection_with_sheet(page, "Level recorder, from the workbench")
    body = {"name": NAME, "collection_id": collection_id, "geometry": EXPECTED_GRID}
    spec_id = api(page, "POST", "/api/v1/chart-specs", data=body).json()["id"]
    open_workbench(page, sheet_id)
    page.get_by_label("Saved chart spec").select_option(str(spec_id))
    page.get_by_role("link", name="Describe a printed grid").click()
    page.wait_for_selector("[data-grid-form][data-ready='true']")
    assert page.url.endswith(f"/collections/{collection_id}/chart-specs?spec={spec_id}#grid-form")
    expect(page.locator("[data-form-title]")).to_have_text(f"Printed grid of “{NAME}”")
    expect(page.get_by_label("Name", exact=True)).to_have_value(NAME)
    expect(page.get_by_role("group", name="y axis (up the sheet)").get_by_label("Bold line every")).to_have_value("5")
