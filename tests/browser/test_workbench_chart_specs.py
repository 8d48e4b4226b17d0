"""Chart specs in the workbench: a calibration saved as a chart spec sets up the next sheet of the same chart, and
a spec holding the printed grid finds the control points on a scan, shown for review before they enter the draft.

Truth (tests/browser/charts.py): the strip chart drawn by matplotlib, y = 3 + 2 sin(2 pi x / 24) m over
x = 0..48 h in a box with known pixel corners; its grid has a line every 45 px (2 h) and every 50 px (1 m).
Target (issue 4): values within 0.5 % of full scale (10 m) of the truth.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from playwright.sync_api import Page, expect

from tests.browser.charts import STRIP, STRIP_FULL_SCALE, STRIP_SIZE, strip_chart_png, strip_truth
from tests.browser.conftest import ConsoleWatch, api, log_in, open_workbench, shoot, show_whole
from tests.browser.test_workbench_flow import CONTROL_VALUES, _calibrate

# The printed grid of the strip chart above (science/grid_spec.py shape): frame lines at 0 and 48 h, 0 and 10 m.
GRID = {
    "kind": "cartesian",
    "x_axis": {"scale": "time", "frame": [0, 48], "minor_step": 2, "major_step": 12},
    "y_axis": {"scale": "linear", "frame": [0, 10], "minor_step": 1, "major_step": 5},
    "grid_colour": "#e8a48c",
}
# A circular chart's paper (green rings), which the strip chart is not.
RINGS = {
    "kind": "circular",
    "value_axis": {"scale": "linear", "frame": [0, 100], "minor_step": 10},
    "ring_radii_mm": [15, 90],
    "period_hours": 24,
    "grid_colour": "#9cc59a",
}
HOURS = [3.0, 17.5, 30.0, 44.0]


def _sheets(page: Page, collection: str, count: int) -> tuple[int, list[int]]:
    """A collection with ``count`` copies of the strip chart (each a different file)."""
    collection_id = int(api(page, "POST", "/api/v1/collections", data={"name": collection}).json()["id"])
    ids = []
    for variant in range(count):
        files = {
            "files": {"name": f"week-{variant + 1}.png", "mimeType": "image/png", "buffer": strip_chart_png(variant)}
        }
        sheets = api(page, "POST", f"/api/v1/collections/{collection_id}/sheets", multipart=files).json()["sheets"]
        ids.append(int(sheets[0]["id"]))
    return collection_id, ids


def _assert_reads_the_pen(page: Page, sheet_id: int) -> None:
    """The saved calibration of a sheet reads pen points (truth above) within 0.5 % of full scale."""
    hours = np.array(HOURS)
    pixels = STRIP.data_to_pixel(hours, strip_truth(hours)).tolist()
    answer = api(page, "POST", f"/api/v1/sheets/{sheet_id}/calibration/map", data={"pixels": pixels}).json()
    values = np.array(answer["values"], dtype=float)
    assert answer["y_unit"] == "m"
    np.testing.assert_allclose(values[:, 0], hours, atol=0.005 * 48.0)
    np.testing.assert_allclose(values[:, 1], strip_truth(hours), atol=0.005 * STRIP_FULL_SCALE)


def _focus_is_visible(page: Page) -> bool:
    style = page.evaluate(
        "(() => { const s = getComputedStyle(document.activeElement); return [s.outlineStyle, s.outlineWidth]; })()"
    )
    return bool(style[0] != "none" and float(style[1].removesuffix("px")) >= 2)


def _specs(page: Page, collection_id: int) -> list[dict[str, Any]]:
    return list(api(page, "GET", f"/api/v1/chart-specs?collection_id={collection_id}").json())


def test_a_calibration_saved_as_a_chart_spec_sets_up_the_next_sheet(page: Page, console: ConsoleWatch) -> None:
    log_in(page)
    collection_id, (first, second) = _sheets(page, "Level recorder, spring", 2)
    open_workbench(page, first)
    show_whole(page, *STRIP_SIZE)
    _calibrate(page)

    page.get_by_text("Save this calibration as a chart spec").click()
    save_form = page.locator("[data-spec-save]")
    save_form.get_by_role("button", name="Save as chart spec").click()
    expect(page.locator("[data-spec-save-state]")).to_have_text("Give the chart spec a name first.")
    save_form.get_by_label("Name of the chart spec").fill("Level recorder strip, 48 h")
    save_form.get_by_role("button", name="Save as chart spec").click()
    expect(page.locator("[data-spec-save-state]")).to_contain_text("Saved as chart spec “Level recorder strip, 48 h”")
    page.locator("[data-spec-save-state]").scroll_into_view_if_needed()
    shoot(page, "workbench-chart-spec-saved")
    (spec,) = _specs(page, collection_id)
    template = spec["calibration_template"]
    assert spec["kind"] == "cartesian" and spec["collection_id"] == collection_id and spec["geometry"] is None
    assert [point["value"] for point in template["control_points"]] == [list(v) for v in CONTROL_VALUES]
    assert template["y_axis"] == {"scale": "linear", "unit": "m"} and "start" not in template["x_axis"]

    open_workbench(page, second)
    show_whole(page, *STRIP_SIZE)
    rows = page.locator("[data-points-table] tbody tr")
    expect(rows).to_have_count(0)
    choice = page.get_by_label("Saved chart spec")
    choice.focus()
    choice.select_option(str(spec["id"]))
    expect(page.locator("[data-spec-note]")).to_contain_text("holding a saved calibration")
    page.keyboard.press("Tab")  # from the list to its button, and apply it with the keyboard
    apply_button = page.get_by_role("button", name="Apply to this sheet")
    expect(apply_button).to_be_focused()
    assert _focus_is_visible(page)
    page.keyboard.press("Enter")
    expect(rows).to_have_count(len(CONTROL_VALUES))
    expect(page.get_by_label("y unit")).to_have_value("m")
    expect(page.locator("[data-spec-note]")).to_contain_text("Filled from “Level recorder strip, 48 h”")
    expect(page.locator("[data-cal-report]")).to_contain_text("Points off by")
    shoot(page, "workbench-chart-spec-applied")
    page.get_by_role("button", name="Save calibration").click()
    expect(page.locator("[data-cal-summary]")).to_contain_text("Saved as version 1")
    _assert_reads_the_pen(page, second)


def test_a_printed_grid_spec_finds_points_shown_for_review(page: Page, console: ConsoleWatch) -> None:
    log_in(page)
    collection_id, (sheet_id,) = _sheets(page, "Level recorder, grid", 1)
    body = {"name": "Level recorder paper", "collection_id": collection_id, "geometry": GRID}
    spec_id = api(page, "POST", "/api/v1/chart-specs", data=body).json()["id"]
    body = {"name": "Boiler chart paper", "collection_id": collection_id, "geometry": RINGS}
    wrong_id = api(page, "POST", "/api/v1/chart-specs", data=body).json()["id"]
    open_workbench(page, sheet_id)
    show_whole(page, *STRIP_SIZE)
    find = page.get_by_role("button", name="Find its printed grid")
    expect(find).to_be_disabled()
    proposal = page.locator("[data-spec-proposal]")

    # The paper of another chart is refused with the reason, and nothing is offered to use.
    console.allow(r"status of 422")
    page.get_by_label("Saved chart spec").select_option(str(wrong_id))
    find.click()
    expect(proposal).to_contain_text("Not found: no printed rings of colour #9cc59a found")
    expect(proposal.get_by_role("button", name="Use these points")).to_be_hidden()
    proposal.get_by_role("button", name="Close").click()
    expect(proposal).to_be_hidden()

    page.get_by_label("Saved chart spec").select_option(str(spec_id))
    expect(find).to_be_enabled()
    page.get_by_label("x scale").select_option("linear")
    page.get_by_role("button", name="Apply to this sheet").click()
    expect(page.get_by_label("x scale")).to_have_value("time")  # the printed grid says the x axis is time
    page.get_by_label("y unit").fill("m")

    rows = page.locator("[data-points-table] tbody tr")
    find.click()
    expect(proposal).to_contain_text("grid crossings found")
    expect(rows).to_have_count(0)  # nothing enters the draft before review
    expect(page.get_by_role("button", name="Use these points")).to_be_focused()
    page.get_by_role("button", name="Discard").click()
    expect(proposal).to_be_hidden()
    expect(find).to_be_focused()
    expect(rows).to_have_count(0)

    find.click()
    expect(proposal).to_contain_text("grid crossings found")
    crossings = int(proposal.locator("[data-proposal-text]").inner_text().split()[0])
    assert crossings >= 4
    shoot(page, "workbench-chart-spec-proposal")
    page.get_by_role("button", name="Use these points").click()
    expect(proposal).to_be_hidden()
    expect(rows).to_have_count(crossings)
    expect(page.get_by_label("y unit")).to_have_value("m")
    expect(page.locator("[data-cal-report]")).to_contain_text("Points off by")
    expect(page.get_by_role("button", name="Save calibration")).to_be_focused()
    page.keyboard.press("Enter")
    expect(page.locator("[data-cal-summary]")).to_contain_text("Saved as version 1")
    _assert_reads_the_pen(page, sheet_id)
