"""A circular chart spec in the workbench: "Find its printed grid" finds the centre and the value rings on a scan
(and time zero, when the spec gives its time lines), shows them for review, and accepting ("Use the centre and
rings", or "Use these points" with time zero found) fills the circular calibration form, which then reads a
pen point correctly once saved.

Truth (tests/browser/charts.py, drawn by matplotlib): centre (400, 400) px, value 0 on the ring of radius 60 px
and 100 on radius 360 px with a ring every 10 (30 px), a radial time line every hour, time zero at 12 o'clock,
24 h a turn clockwise; the pen draws 50 + 30 sin(2 pi t / 24). Tolerances: 0.25 px on the found geometry (the
page shows it to 0.1 px; half a pixel would be the slip ARCHITECTURE.md warns of; measured 0.05 px), and the
calibration target of issue 3, 0.5 % of full scale.
"""

from __future__ import annotations

import re

import numpy as np
from playwright.sync_api import Locator, Page, expect

from tests.browser.charts import CircularChart
from tests.browser.conftest import ConsoleWatch, api, click_image, log_in, open_workbench, shoot, show_whole
from tests.browser.test_workbench_chart_specs import RINGS
from tests.browser.test_workbench_circular import CHART

GEOMETRY_PX = 0.25
# The chart's paper is RINGS (tests/browser/test_workbench_chart_specs.py): only the ratio of the ring radii
# matters to detection (grid_spec.py), 60 : 360 px here.
# The same paper with its time lines: one an hour, time zero where the 12 o'clock line meets the outer ring.
TIMED = {**RINGS, "time_line_hours": 1, "time_zero_angle_deg": -90.0, "time_direction": "clockwise"}
NUMBER = r"(-?\d+(?:\.\d+)?)"
FOUND = re.compile(
    rf"Centre at \({NUMBER}, {NUMBER}\) px; (\d+) of (\d+) printed rings found; values 0 to 100 between radii "
    rf"{NUMBER} and {NUMBER} px; "
)


def _spec_on_a_sheet(page: Page, name: str, geometry: dict[str, object]) -> tuple[int, int]:
    """A collection holding the circular chart and a chart spec of its paper: (sheet, spec)."""
    collection_id = int(api(page, "POST", "/api/v1/collections", data={"name": name}).json()["id"])
    files = {"files": {"name": "daily-chart.png", "mimeType": "image/png", "buffer": CHART.png()}}
    answer = api(page, "POST", f"/api/v1/collections/{collection_id}/sheets", multipart=files).json()
    body = {"name": f"{name} paper", "collection_id": collection_id, "geometry": geometry}
    spec_id = int(api(page, "POST", "/api/v1/chart-specs", data=body).json()["id"])
    return int(answer["sheets"][0]["id"]), spec_id


def _check_proposal_text(proposal: Locator) -> None:
    """The centre and ring radii the page shows match the truth."""
    text = proposal.locator("[data-proposal-text]").inner_text()
    match = FOUND.search(text)
    assert match, text
    centre_u, centre_v, rings, printed, radius_min, radius_max = (float(group) for group in match.groups())
    np.testing.assert_allclose([centre_u, centre_v], CHART.centre, atol=GEOMETRY_PX)
    assert rings == printed == 11  # 0, 10, ..., 100: every printed ring found
    np.testing.assert_allclose([radius_min, radius_max], [CHART.radius_min, CHART.radius_max], atol=GEOMETRY_PX)


def _field(page: Page, label: str) -> float:
    return float(page.locator("[data-cal-form]").get_by_label(label, exact=True).input_value())


def _check_form_geometry(page: Page) -> None:
    """The accepted proposal is in the circular form: centre, scale and the two value rings."""
    form = page.locator("[data-cal-form]")
    expect(form.get_by_label("Chart kind")).to_have_value("circular")
    expect(form.get_by_label("Centre u px")).to_be_visible()
    np.testing.assert_allclose(
        [_field(page, "Centre u px"), _field(page, "Centre v px")], CHART.centre, atol=GEOMETRY_PX
    )
    expect(form.get_by_label("Value scale")).to_have_value("linear")
    assert (_field(page, "Lowest value"), _field(page, "Highest value")) == (CHART.value_min, CHART.value_max)
    radii = [float(form.get_by_label("its ring, radius px").nth(i).input_value()) for i in (0, 1)]
    np.testing.assert_allclose(radii, [CHART.radius_min, CHART.radius_max], atol=GEOMETRY_PX)


def _save_and_read_the_pen(page: Page, sheet_id: int) -> None:
    """Saved, the calibration maps a pen point to its time and value within 0.5 % of full scale (issue 3)."""
    page.get_by_role("button", name="Save calibration").click()
    expect(page.locator("[data-cal-summary]")).to_contain_text("Saved as version 1")
    hours = 9.0
    value = float(CircularChart.pen_value(np.array([hours]))[0])
    mapped = api(
        page, "POST", f"/api/v1/sheets/{sheet_id}/calibration/map", data={"pixels": [CHART.pixel_of(hours, value)]}
    )
    read_hours, read_value = mapped.json()["values"][0]
    assert abs(read_value - value) < 0.005 * (CHART.value_max - CHART.value_min)
    assert abs(read_hours - hours) < 0.005 * CHART.period_hours


def test_rings_found_from_a_circular_spec_fill_the_form(page: Page, console: ConsoleWatch) -> None:
    """A spec without its time lines gives the centre and the rings; time zero is then clicked by hand."""
    log_in(page)
    sheet_id, spec_id = _spec_on_a_sheet(page, "Boiler house 1981", RINGS)
    open_workbench(page, sheet_id)
    show_whole(page, CHART.size, CHART.size)
    form = page.locator("[data-cal-form]")
    expect(form.get_by_label("Chart kind")).to_have_value("cartesian")  # nothing applied: the page's default

    page.get_by_label("Saved chart spec").select_option(str(spec_id))
    find = page.get_by_role("button", name="Find its printed grid")
    find.click()
    proposal = page.locator("[data-spec-proposal]")
    expect(proposal).to_contain_text("printed rings found")
    expect(proposal).to_contain_text("time zero still has to be clicked")
    expect(proposal.locator("[data-proposal-warnings]")).to_contain_text("time zero has to be placed by hand")
    _check_proposal_text(proposal)
    expect(form.get_by_label("Chart kind")).to_have_value("cartesian")  # nothing enters the draft before review
    use = proposal.get_by_role("button", name="Use the centre and rings")  # no time zero: no points to use
    expect(use).to_be_focused()
    shoot(page, "workbench-circular-proposal")

    use.click()
    expect(proposal).to_be_hidden()
    _check_form_geometry(page)
    expect(page.locator("[data-cal-report]")).to_contain_text("click where time zero meets the highest-value ring")
    expect(page.get_by_role("button", name="Save calibration")).to_be_focused()

    form.get_by_label("Unit", exact=True).fill("°C")
    page.get_by_role("button", name="Click where time zero meets the highest-value ring").click()
    click_image(page, *CHART.pixel_of(0.0, CHART.value_max))
    expect(page.locator("[data-cal-report]")).to_contain_text("circular chart geometry")
    _save_and_read_the_pen(page, sheet_id)


def test_a_timed_circular_spec_registers_the_whole_chart(page: Page, console: ConsoleWatch) -> None:
    """A spec with its time lines gives time zero too: a complete calibration with checked crossings."""
    log_in(page)
    sheet_id, spec_id = _spec_on_a_sheet(page, "Boiler house 1982", TIMED)
    open_workbench(page, sheet_id)
    show_whole(page, CHART.size, CHART.size)
    form = page.locator("[data-cal-form]")
    page.get_by_label("Saved chart spec").select_option(str(spec_id))
    page.get_by_role("button", name="Apply to this sheet").click()
    expect(form.get_by_label("Chart kind")).to_have_value("circular")
    expect(form.get_by_label("Hours per turn")).to_have_value("24")
    form.get_by_label("Unit", exact=True).fill("°C")

    page.get_by_role("button", name="Find its printed grid").click()
    proposal = page.locator("[data-spec-proposal]")
    expect(proposal).to_contain_text("time zero found")
    _check_proposal_text(proposal)
    checked = re.search(r"time zero found, (\d+) crossings checked", proposal.inner_text())
    assert checked, proposal.inner_text()
    crossings = int(checked.group(1))
    assert crossings >= 4
    rows = page.locator("[data-points-table] tbody tr")
    expect(rows).to_have_count(0)  # nothing enters the draft before review

    proposal.get_by_role("button", name="Use these points").click()
    expect(proposal).to_be_hidden()
    _check_form_geometry(page)
    zero = [_field(page, "Time zero u px"), _field(page, "Time zero v px")]
    np.testing.assert_allclose(zero, CHART.pixel_of(0.0, CHART.value_max), atol=GEOMETRY_PX)
    expect(form.get_by_label("Later times run")).to_have_value("clockwise")
    expect(form.get_by_label("Unit", exact=True)).to_have_value("°C")  # the unit typed before is kept
    expect(rows).to_have_count(crossings)
    expect(page.locator("[data-cal-report]")).to_contain_text("circular chart geometry")
    shoot(page, "workbench-circular-registered")
    _save_and_read_the_pen(page, sheet_id)
