"""Calibrating a circular chart by pointing at it, with the view turned: centre from clicks on one ring, the
value rings, time zero; then the saved calibration reads a known pen point correctly.

Truth (tests/browser/charts.py): centre (400, 400) px, value 0 on the ring of radius 60 px and 100 on radius
360 px, time zero at 12 o'clock, 24 h a turn clockwise; the pen draws 50 + 30 sin(2 pi t / 24).
"""

from __future__ import annotations

import io

import numpy as np
from PIL import Image
from playwright.sync_api import Page, expect

from tests.browser.charts import PEN, CircularChart
from tests.browser.conftest import (
    ConsoleWatch,
    api,
    click_image,
    image_to_page,
    log_in,
    open_workbench,
    shoot,
    show_whole,
    upload_sheet,
)

CHART = CircularChart()


def _ring_point(radius: float, angle_deg: float) -> tuple[float, float]:
    angle = np.radians(angle_deg)
    return CHART.centre[0] + radius * float(np.cos(angle)), CHART.centre[1] + radius * float(np.sin(angle))


def _screen_distance_to_pen(page: Page, u: float, v: float) -> float:
    """Smallest RGB distance to the pen colour among the rendered screen pixels within 2 px of image point (u, v)."""
    x, y = image_to_page(page, u, v)
    shot = page.screenshot(clip={"x": x - 2, "y": y - 2, "width": 5, "height": 5})
    pixels = np.asarray(Image.open(io.BytesIO(shot)).convert("RGB"), dtype=float).reshape(-1, 3)
    pen = np.array([int(PEN[k : k + 2], 16) for k in (1, 3, 5)], dtype=float)
    return float(np.min(np.linalg.norm(pixels - pen, axis=1)))


def test_circular_chart_calibrated_by_clicking_with_the_view_turned(page: Page, console: ConsoleWatch) -> None:
    log_in(page)
    sheet_id = upload_sheet(page, CHART.png(), name="daily-chart.png", collection="Boiler house 1979")
    open_workbench(page, sheet_id)
    show_whole(page, CHART.size, CHART.size)
    form = page.locator("[data-cal-form]")
    form.get_by_label("Chart kind").select_option("circular")

    page.get_by_role("button", name="Click 3+ points on one ring").click()
    for angle in (10.0, 100.0, 200.0, 300.0):
        click_image(page, *_ring_point(float(CHART.radius_of(50.0)), angle))
    page.keyboard.press("Enter")
    expect(form.get_by_label("Centre u px")).not_to_have_value("")
    centre = (
        float(form.get_by_label("Centre u px").input_value()),
        float(form.get_by_label("Centre v px").input_value()),
    )
    np.testing.assert_allclose(centre, CHART.centre, atol=1.0)

    page.keyboard.press("]")
    page.keyboard.press("]")
    expect(page.locator("[data-rotation]")).to_have_text("30°")
    page.wait_for_timeout(600)  # let the turn animation settle before pointing at the scan
    # In register while turned: the tiles drawn at the overlay's position of a pen point show the pen's ink ...
    pen_uv = CHART.pixel_of(3.0, float(CircularChart.pen_value(np.array([3.0]))[0]))
    assert _screen_distance_to_pen(page, *pen_uv) < 90
    # ... and a point 12 px beside it shows paper, so the check above could fail.
    assert _screen_distance_to_pen(page, pen_uv[0] + 12, pen_uv[1]) > 150

    form.get_by_label("Lowest value").fill("0")
    page.get_by_role("button", name="Click that ring").first.click()
    click_image(page, *_ring_point(CHART.radius_min, 45.0))
    form.get_by_label("Highest value").fill("100")
    page.get_by_role("button", name="Click that ring").nth(1).click()
    click_image(page, *_ring_point(CHART.radius_max, 160.0))
    form.get_by_label("Unit", exact=True).fill("°C")
    page.get_by_role("button", name="Click where time zero meets the highest-value ring").click()
    click_image(page, *CHART.pixel_of(0.0, CHART.value_max))
    expect(page.locator("[data-cal-report]")).to_contain_text("circular chart geometry")
    shoot(page, "08-circular-calibration")
    page.get_by_role("button", name="Save calibration").click()
    expect(page.locator("[data-cal-summary]")).to_contain_text("Saved as version 1")

    spec = api(page, "GET", f"/api/v1/sheets/{sheet_id}/calibration").json()["spec"]
    axis = spec["value_axis"]
    np.testing.assert_allclose(axis["radius_min_px"], CHART.radius_min, atol=1.0)
    np.testing.assert_allclose(axis["radius_max_px"], CHART.radius_max, atol=1.0)
    np.testing.assert_allclose(spec["time_zero_pixel"], CHART.pixel_of(0.0, CHART.value_max), atol=1.0)
    hours = 6.0
    value = float(CircularChart.pen_value(np.array([hours]))[0])
    mapped = api(
        page, "POST", f"/api/v1/sheets/{sheet_id}/calibration/map", data={"pixels": [CHART.pixel_of(hours, value)]}
    )
    read_hours, read_value = mapped.json()["values"][0]
    assert abs(read_value - value) < 0.005 * (CHART.value_max - CHART.value_min)  # 0.5 % of full scale
    assert abs(read_hours - hours) < 0.005 * CHART.period_hours


def _arc_through_time_zero(swings_deg: tuple[float, ...], *, arm: float = 500.0) -> list[list[float]]:
    """Pixels on the arc a pen arm of L = D = arm px would draw through time zero (12 o'clock on the 360 px ring),
    swung inwards by each angle: the pivot sits at phi(r) = arccos(r / 2L) from the time-zero radius
    (Walter et al. 1999), and every point is L from it."""
    zero = np.array(CHART.pixel_of(0.0, CHART.value_max))
    pivot_angle = np.radians(-90.0) + np.arccos(CHART.radius_max / (2.0 * arm))
    pivot = np.array(CHART.centre) + arm * np.array([np.cos(pivot_angle), np.sin(pivot_angle)])
    start = np.arctan2(*(zero - pivot)[::-1])
    swing = start - np.radians(swings_deg)
    return (pivot + arm * np.column_stack([np.cos(swing), np.sin(swing)])).tolist()


def _geometry_spec(pen_arc: dict[str, object]) -> dict[str, object]:
    return {
        "kind": "circular",
        "centre": list(CHART.centre),
        "value_axis": {"scale": "linear", "min": 0.0, "max": 100.0, "radius_min_px": 60.0, "radius_max_px": 360.0},
        "period_hours": 24.0,
        "time_zero_pixel": list(CHART.pixel_of(0.0, CHART.value_max)),
        "time_direction": "clockwise",
        "pen_arc": pen_arc,
    }


def test_pen_arm_clicked_on_a_time_line_is_saved_as_the_clicks(page: Page, console: ConsoleWatch) -> None:
    """A stored arm given as time-line clicks shows the pivot and length of the circle through them (the
    /geometry/circle answer); new clicks are saved as clicks, and a typed length turns the arm into a typed one."""
    log_in(page)
    sheet_id = upload_sheet(page, CHART.png(), name="daily-chart-arcs.png", collection="Boiler house 1980")
    stored = _arc_through_time_zero((0.0, 12.0, 24.0))
    api(page, "PUT", f"/api/v1/sheets/{sheet_id}/calibration", data=_geometry_spec({"time_line_points": stored}))
    circle = api(page, "POST", "/api/v1/geometry/circle", data={"points": stored}).json()
    open_workbench(page, sheet_id)
    show_whole(page, CHART.size, CHART.size)
    form = page.locator("[data-cal-form]")
    expect(form.get_by_label("Time lines are arcs drawn by a pen on an arm")).to_be_checked()
    expect(form.get_by_label("Arm length px")).not_to_have_value("")
    shown = [float(form.get_by_label(label).input_value()) for label in ("Pivot u px", "Pivot v px", "Arm length px")]
    np.testing.assert_allclose(shown, [*circle["centre"], circle["radius_px"]], atol=0.005)  # shown to 0.01 px
    assert abs(circle["radius_px"] - 500.0) < 1e-6  # the arm the points were placed with

    clicks = _arc_through_time_zero((2.0, 10.0, 18.0, 26.0))
    page.get_by_role("button", name="Click points on one time line").click()
    for u, v in clicks:
        click_image(page, u, v)
    page.keyboard.press("Enter")
    expect(page.locator("[data-cal-report]")).to_contain_text("4 clicks are saved as the arm")
    expect(page.locator("[data-cal-report]")).to_contain_text("circular chart geometry")
    page.get_by_role("button", name="Save calibration").click()
    expect(page.locator("[data-cal-summary]")).to_contain_text("Saved as version 2")
    arc = api(page, "GET", f"/api/v1/sheets/{sheet_id}/calibration").json()["spec"]["pen_arc"]
    assert set(arc) == {"time_line_points"}
    np.testing.assert_allclose(arc["time_line_points"], clicks, atol=1.0)  # a click lands within a screen pixel

    form.get_by_label("Arm length px").fill("500")
    expect(form.get_by_label("Pivot u px")).not_to_have_value("")
    page.get_by_role("button", name="Save calibration").click()
    expect(page.locator("[data-cal-summary]")).to_contain_text("Saved as version 3")
    arc = api(page, "GET", f"/api/v1/sheets/{sheet_id}/calibration").json()["spec"]["pen_arc"]
    assert set(arc) == {"pivot_pixel", "length_px"} and arc["length_px"] == 500.0
