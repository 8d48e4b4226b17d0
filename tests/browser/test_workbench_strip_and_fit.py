"""A strip chart written by a pen on an arm (time lines are arcs) calibrated by pointing at it, and a fitted model
chosen with "Suggest a model" used to resample the trace, previewed and downloaded as CSV.

Truth, both drawn by matplotlib (tests/science/chart_render.py) from known functions:
- the arc chart below: 0..24 h and 0..100 %, a pen arm of 560 px pivoting at v = 330 px on the later-time side,
  so a point sits dx(v) = L - sqrt(L^2 - (v - v_p)^2) px later than on a straight time line (REFERENCES.md,
  drum and curvilinear strip charts); the pen draws 50 + 25 sin(2 pi t / 12) %;
- the strip chart of tests/browser/charts.py: y = 3 + 2 sin(2 pi x / 24) m over x = 0..48 h.
Target (issue 4): within 0.5 % of full scale of the truth.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from playwright.sync_api import Page, expect

from tests.browser.charts import PEN, STRIP_FULL_SCALE, STRIP_SIZE, png_bytes, strip_chart_png, strip_truth
from tests.browser.conftest import (
    ConsoleWatch,
    api,
    calibrate_strip_through_the_api,
    click_image,
    log_in,
    open_workbench,
    shoot,
    show_whole,
    upload_sheet,
)
from tests.science.chart_render import GridLines, PenStroke, render_sheet

GRID_COLOUR = "#e8a48c"


@dataclass(frozen=True)
class ArcStripChart:
    """0..24 h between u = 100 and 1100 px (on a straight time line at the pivot's height), 0..100 % between
    v = 580 and 80 px; time lines are arcs of the pen arm (560 px) pivoting at v = 330 px on the later side."""

    width: int = 1200
    height: int = 660
    u_left: float = 100.0
    u_right: float = 1100.0
    v_top: float = 80.0
    v_bottom: float = 580.0
    pivot_v: float = 330.0
    arm_px: float = 560.0
    full_scale: float = 100.0
    hours: float = 24.0

    def pixels_of(self, hours: np.ndarray, values: np.ndarray) -> np.ndarray:
        """(u, v) px of chart points: the straight position moved later by the arc shift dx(v)."""
        v = self.v_bottom - np.asarray(values, float) / self.full_scale * (self.v_bottom - self.v_top)
        straight_u = self.u_left + np.asarray(hours, float) / self.hours * (self.u_right - self.u_left)
        shift = self.arm_px - np.sqrt(self.arm_px**2 - (v - self.pivot_v) ** 2)
        return np.column_stack([straight_u + shift, v])

    @staticmethod
    def pen_value(hours: np.ndarray) -> np.ndarray:
        return 50.0 + 25.0 * np.sin(2 * np.pi * np.asarray(hours, float) / 12.0)

    def png(self) -> bytes:
        return _arc_chart_png(self)

    def _render(self) -> bytes:
        values = np.linspace(0.0, self.full_scale, 400)
        arcs = [
            PenStroke(self.pixels_of(np.full(values.size, hour), values), GRID_COLOUR, width_px=1.0)
            for hour in np.arange(0.0, self.hours + 0.1, 2.0)
        ]
        hours = np.linspace(0.0, self.hours, 4000)
        pen = PenStroke(self.pixels_of(hours, self.pen_value(hours)), PEN, width_px=2.5)
        value_lines = GridLines(u_positions=[], v_positions=list(np.linspace(self.v_top, self.v_bottom, 11)))
        pixels = render_sheet(width_px=self.width, height_px=self.height, strokes=[*arcs, pen], grid=value_lines)
        return png_bytes(pixels)


@lru_cache(maxsize=1)
def _arc_chart_png(chart: ArcStripChart) -> bytes:
    return chart._render()


ARC = ArcStripChart()
ARC_POINTS = [(0.0, 0.0), (0.0, 100.0), (12.0, 0.0), (12.0, 100.0), (24.0, 0.0), (24.0, 100.0), (6.0, 50.0)]


def _click_one_time_line(page: Page, hour: float) -> None:
    page.get_by_role("button", name="Click points on one time line").click()
    for value in (0.0, 30.0, 50.0, 75.0, 100.0):
        click_image(page, *ARC.pixels_of(np.array([hour]), np.array([value]))[0])
    page.keyboard.press("Enter")


def _place_control_points(page: Page) -> None:
    page.get_by_role("button", name="Place points").click()
    rows = page.locator("[data-points-table] tbody tr")
    for index, (hour, value) in enumerate(ARC_POINTS):
        click_image(page, *ARC.pixels_of(np.array([hour]), np.array([value]))[0])
        rows.nth(index).get_by_label(f"x value of point {index + 1}").fill(f"{hour:g}")
        rows.nth(index).get_by_label(f"y value of point {index + 1}").fill(f"{value:g}")
    page.keyboard.press("Escape")


def test_pen_arc_strip_chart_calibrated_by_pointing(page: Page, console: ConsoleWatch) -> None:
    log_in(page)
    sheet_id = upload_sheet(page, ARC.png(), name="drum-week-31.png", collection="Pump house drum charts")
    open_workbench(page, sheet_id)
    show_whole(page, ARC.width, ARC.height)
    form = page.locator("[data-cal-form]")
    form.get_by_label("Chart kind").select_option("curvilinear")
    form.get_by_label("y unit").fill("%")

    _click_one_time_line(page, 12.0)
    expect(form.get_by_label("Arm length px")).not_to_have_value("")
    arm = float(form.get_by_label("Arm length px").input_value())
    pivot = (float(form.get_by_label("Pivot u px").input_value()), float(form.get_by_label("Pivot v px").input_value()))
    assert abs(arm - ARC.arm_px) < 0.01 * ARC.arm_px, arm  # the arm from five clicks, within 1 %
    np.testing.assert_allclose(
        pivot, [ARC.pixels_of(np.array([12.0]), np.array([50.0]))[0][0] + ARC.arm_px, 330.0], atol=6.0
    )
    form.get_by_label("The pivot sits on the side of").select_option("later")

    _place_control_points(page)
    expect(page.locator("[data-cal-report]")).to_contain_text("Points off by")
    shoot(page, "workbench-curvilinear-calibration")
    page.get_by_role("button", name="Save calibration").click()
    expect(page.locator("[data-cal-summary]")).to_contain_text("Saved as version 1: curvilinear")

    spec = api(page, "GET", f"/api/v1/sheets/{sheet_id}/calibration").json()["spec"]
    assert spec["kind"] == "curvilinear" and spec["pen_arc"]["pivot_side"] == "later"
    hours = np.linspace(0.5, 23.5, 24)
    pen = ARC.pixels_of(hours, ARC.pen_value(hours)).tolist()
    answer = api(page, "POST", f"/api/v1/sheets/{sheet_id}/calibration/map", data={"pixels": pen}).json()
    values = np.array(answer["values"], dtype=float)
    np.testing.assert_allclose(values[:, 0], hours, atol=0.005 * ARC.hours)
    np.testing.assert_allclose(values[:, 1], ARC.pen_value(hours), atol=0.005 * ARC.full_scale)
    # The arc matters: read as if time lines were straight, these pen points would be up to 0.34 h late (more
    # than twice the tolerance above), so the checks above could fail without the pen arm.
    straight_u = ARC.u_left + hours / ARC.hours * (ARC.u_right - ARC.u_left)
    late_hours = (np.array(pen)[:, 0] - straight_u) / (ARC.u_right - ARC.u_left) * ARC.hours
    assert late_hours.max() > 2 * 0.005 * ARC.hours


def _calibrated_strip_with_a_found_trace(page: Page) -> tuple[int, int]:
    sheet_id = upload_sheet(page, strip_chart_png(), name="level-week-7.png", collection="Models and grids")
    calibrate_strip_through_the_api(page, sheet_id)
    body = {"name": "level", "unit": "m", "pen_color": PEN, "region": {"box": [62.0, 42.0, 1138.0, 538.0]}}
    trace = api(page, "POST", f"/api/v1/sheets/{sheet_id}/traces/auto", data=body).json()
    return sheet_id, int(trace["id"])


def test_suggested_model_resamples_the_trace_to_the_truth(page: Page, console: ConsoleWatch) -> None:
    log_in(page)
    sheet_id, trace_id = _calibrated_strip_with_a_found_trace(page)
    open_workbench(page, sheet_id)
    show_whole(page, *STRIP_SIZE)

    page.keyboard.press("3")
    page.get_by_role("button", name="Suggest a model").click()
    suggestions = page.locator("[data-suggestions] table")
    expect(suggestions).to_contain_text("Fourier series")
    recommended = suggestions.locator("tr.wb-recommended")
    expect(recommended).to_have_count(1)
    expect(recommended).to_contain_text("Fourier series, degree 1")  # one sine, as drawn
    expect(page.locator("[data-fit-state]")).to_contain_text("Suggested: Fourier series, degree 1")
    shoot(page, "workbench-fit-suggestions")
    recommended.get_by_role("button").click()
    coefficients = page.locator("[data-coefficients] tbody tr")
    expect(coefficients.first).to_contain_text("a0")
    expect(page.locator("[data-fit-state]")).to_contain_text("stored")
    (fit,) = api(page, "GET", f"/api/v1/traces/{trace_id}/fits").json()
    assert fit["family"] == "fourier" and fit["options"]["degree"] == 1

    page.keyboard.press("4")
    data = page.locator("[data-resample]")
    data.get_by_label("Between samples").select_option("fit")
    expect(data.locator("select[name=fit_id]")).to_have_value(str(fit["id"]))
    data.get_by_label("Step").fill("0.25")
    data.get_by_role("button", name="Preview").click()
    expect(page.locator("[data-resample-state]")).to_contain_text("rows")
    expect(page.locator("[data-resample-plot] svg")).to_be_attached()
    shoot(page, "workbench-resample-by-fit")
    with page.expect_download() as download:
        page.get_by_role("link", name="Download CSV").click()
    with open(download.value.path(), encoding="utf-8", newline="") as handle:
        rows = list(csv.reader(handle))
    assert rows[0][:3] == ["x [h]", "level [m]", "flag"]
    assert {row[3] for row in rows[1:]} == {"auto"}  # the trace's origin, last columns
    values = np.array([[float(row[0]), float(row[1])] for row in rows[1:] if row[1]])
    assert len(values) > 180  # 0.25 h steps over the traced 47.9 h
    np.testing.assert_allclose(np.diff(values[:, 0]), 0.25, atol=1e-9)
    error = np.abs(values[:, 1] - strip_truth(values[:, 0]))
    assert error.max() < 0.005 * STRIP_FULL_SCALE, f"worst error of the resampled fit {error.max():.4f} m"
