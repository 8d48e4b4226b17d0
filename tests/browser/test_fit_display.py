"""What the Fit step shows for a stored fit: statistics in honest units, outlier rings, the "outside the traced range"
label only where that stretch is on screen, and the form set to the shown fit's model.

Truth: the strip chart of tests/browser/charts.py (y = 3 + 2 sin(2 pi x / 24) m, pixel box known exactly), traced
through the API at its exact pixels over 4..44 h with one vertex moved 1.5 m up (a known outlier). The residual SD
is checked against sqrt(SSR / (n - p)) of the residuals the curve endpoint serves (textbook definition).

The overlay is a canvas, so the test records what the fit layer draws on it (label texts and ring centres) by
wrapping two CanvasRenderingContext2D methods before the page loads.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from playwright.sync_api import Page, expect

from tests.browser.charts import STRIP, STRIP_SIZE, strip_chart_png, strip_truth
from tests.browser.conftest import (
    HOOK,
    ConsoleWatch,
    api,
    calibrate_strip_through_the_api,
    log_in,
    open_workbench,
    shoot,
    show_whole,
    upload_sheet,
)

OUTSIDE_TEXT = "outside the traced range"
OUTLIER_INDEX = 20  # x = 24 h
OUTLIER_M = 1.5

RECORDER = """
(() => {
  const drawn = { texts: [], rings: [] };
  window.fitDisplayDrawn = drawn;
  const proto = CanvasRenderingContext2D.prototype;
  const onOverlay = (context) => context.canvas.classList.contains("wb-overlay");
  const clearRect = proto.clearRect;
  proto.clearRect = function (...args) {  // every overlay redraw starts here: keep only the latest frame
    if (onOverlay(this)) { drawn.texts.length = 0; drawn.rings.length = 0; }
    return clearRect.apply(this, args);
  };
  const fillText = proto.fillText;
  proto.fillText = function (text, x, y, ...rest) {
    if (onOverlay(this)) drawn.texts.push({ text, x, y });
    return fillText.call(this, text, x, y, ...rest);
  };
  const arc = proto.arc;
  proto.arc = function (x, y, radius, ...rest) {
    if (onOverlay(this) && this.strokeStyle === "#c92a2a") drawn.rings.push({ x, y });
    return arc.call(this, x, y, radius, ...rest);
  };
})();
"""


def _sheet_with_fits(page: Page) -> tuple[int, int, list[dict[str, Any]]]:
    """A calibrated strip chart, a trace over 4..44 h with one outlier, a quadratic and then a Fourier fit."""
    sheet_id = upload_sheet(page, strip_chart_png(), name="level-week-9.png", collection="Fit display")
    calibrate_strip_through_the_api(page, sheet_id)
    x = np.linspace(4.0, 44.0, 41)
    y = strip_truth(x)
    y[OUTLIER_INDEX] += OUTLIER_M
    body = {"name": "level", "unit": "m", "vertices": STRIP.data_to_pixel(x, y).tolist()}
    trace_id = int(api(page, "POST", f"/api/v1/sheets/{sheet_id}/traces", data=body).json()["id"])
    requests = [{"family": "polynomial", "degree": 2}, {"family": "fourier", "degree": 1, "period": 24}]
    fits = [api(page, "POST", f"/api/v1/traces/{trace_id}/fits", data=request).json() for request in requests]
    return sheet_id, trace_id, fits


def _drawn_after_showing(page: Page, u0: float, v0: float, u1: float, v1: float) -> dict[str, Any]:
    """Show an image rectangle, redraw the overlay and return what the last redraw drew."""
    page.evaluate(f"{HOOK}.showImageRect({u0}, {v0}, {u1}, {v1})")
    page.evaluate("new Promise((done) => requestAnimationFrame(() => requestAnimationFrame(done)))")
    page.evaluate(f"{HOOK}.timeRedraw(1)")  # redraws the overlay synchronously; the recorder keeps the last frame
    drawn: dict[str, Any] = page.evaluate("window.fitDisplayDrawn")
    return drawn


def _element_point(page: Page, hours: float, metres: float) -> tuple[float, float]:
    """Element (overlay canvas) coordinates of a chart point, from the page's own image -> page transform."""
    u, v = STRIP.data_to_pixel(np.array([hours]), np.array([metres]))[0]
    point = page.evaluate(f"{HOOK}.imageToPage({u}, {v})")
    box = page.locator("canvas.wb-overlay").bounding_box()
    assert box is not None
    return float(point["x"]) - box["x"], float(point["y"]) - box["y"]


def _labels(drawn: dict[str, Any]) -> list[dict[str, float]]:
    return [entry for entry in drawn["texts"] if entry["text"] == OUTSIDE_TEXT]


def test_stored_fit_shows_value_unit_sd_rings_form_and_onscreen_labels(page: Page, console: ConsoleWatch) -> None:
    page.add_init_script(RECORDER)
    log_in(page)
    sheet_id, _, (quadratic, fourier) = _sheet_with_fits(page)
    open_workbench(page, sheet_id)
    show_whole(page, *STRIP_SIZE)
    page.keyboard.press("3")
    panel = page.locator("[data-fit-result]")
    expect(page.locator("[data-residual-plot] svg")).to_be_attached()
    form = page.locator("[data-fit-form]")

    # The last stored fit (Fourier, degree 1, period 24 h) is shown, and the form says so.
    expect(form.locator("select[name=family]")).to_have_value("fourier")
    expect(form.locator("input[name=degree]")).to_have_value("1")
    expect(form.locator("input[name=period]")).to_have_value("24")

    # The residual SD is in metres: sqrt(SSR / (n - p)) of the residuals the curve endpoint serves, p = 3.
    curve = api(page, "GET", f"/api/v1/fits/{fourier['id']}/curve?count=400").json()
    residuals = np.array([r["residual"] for r in curve["residuals"]])
    expected_sd = float(np.sqrt(residuals @ residuals / (residuals.size - 3)))
    assert abs(curve["residual_sd"] - expected_sd) < 1e-9 * expected_sd
    label = panel.locator("dt", has_text="residual std. deviation (value units)")
    expect(label).to_have_count(1)
    shown_sd = float(label.locator("xpath=following-sibling::dd[1]").inner_text())
    assert abs(shown_sd - expected_sd) < 1e-5 * expected_sd  # six significant digits on screen
    assert 0.1 < shown_sd < 0.5  # the 1.5 m outlier over 41 samples, not a figure in units of the uncertainty
    shoot(page, "fit-display-stored-fourier")

    # Whole sheet: both stretches beyond 4..44 h are on screen, each labelled inside the canvas; the outlier
    # (about 6 residual SDs off) is ringed where it was drawn.
    drawn = _drawn_after_showing(page, 0, 0, *STRIP_SIZE)
    box = page.locator("canvas.wb-overlay").bounding_box()
    assert box is not None
    labels = _labels(drawn)
    assert len(labels) == 2, labels
    assert all(0 <= entry["x"] <= box["width"] and 0 <= entry["y"] <= box["height"] for entry in labels)
    outlier = _element_point(page, 24.0, float(strip_truth(np.array([24.0]))[0]) + OUTLIER_M)
    assert any(abs(ring["x"] - outlier[0]) < 1.0 and abs(ring["y"] - outlier[1]) < 1.0 for ring in drawn["rings"])

    # Zoomed on the middle of the trace: neither stretch is on screen, so no label.
    drawn = _drawn_after_showing(
        page,
        *STRIP.data_to_pixel(np.array([20.0]), np.array([8.0]))[0],
        *STRIP.data_to_pixel(np.array([28.0]), np.array([0.0]))[0],
    )
    left_edge, right_edge = _element_point(page, 4.0, 3.0)[0], _element_point(page, 44.0, 3.0)[0]
    assert left_edge < 0 and right_edge > box["width"]  # the test's premise: both stretches are off screen
    assert _labels(drawn) == []

    # Zoomed on the late end: only the stretch after 44 h is on screen, and its label sits by it.
    drawn = _drawn_after_showing(
        page,
        *STRIP.data_to_pixel(np.array([38.0]), np.array([8.0]))[0],
        *STRIP.data_to_pixel(np.array([48.0]), np.array([0.0]))[0],
    )
    (late,) = _labels(drawn)
    assert late["x"] >= _element_point(page, 44.0, 3.0)[0] - 1.0
    shoot(page, "fit-display-late-end")

    # Choosing the stored quadratic sets the form to polynomial, degree 2.
    page.locator("[data-fit-list] button", has_text=f"#{quadratic['id']} polynomial").click()
    expect(form.locator("select[name=family]")).to_have_value("polynomial")
    expect(form.locator("input[name=degree]")).to_have_value("2")
    expect(form.locator("label[data-fit-option=period]")).to_be_hidden()
