"""Editing a trace by hand in the browser (move, undo, redo, add, delete, erase a stretch), the conflict message
when two pages edit the same trace, and the redraw time of a 20,000-vertex trace (reported, not asserted)."""

from __future__ import annotations

import json

import numpy as np
from playwright.sync_api import Browser, Page, expect

from tests.browser.charts import STRIP, STRIP_SIZE, strip_chart_png, strip_truth
from tests.browser.conftest import (
    ARTIFACTS,
    HOOK,
    ConsoleWatch,
    api,
    calibrate_strip_through_the_api,
    click_image,
    drag_image,
    log_in,
    open_workbench,
    second_page,
    shoot,
    show_whole,
    upload_sheet,
)

HOURS = np.array([4.0, 12.0, 20.0, 28.0, 36.0, 44.0])


def _calibrated_sheet_with_trace(page: Page, collection: str) -> tuple[int, int, list[list[float]]]:
    sheet_id = upload_sheet(page, strip_chart_png(), name="level.png", collection=collection)
    calibrate_strip_through_the_api(page, sheet_id)
    vertices = STRIP.data_to_pixel(HOURS, strip_truth(HOURS)).tolist()
    trace = api(
        page, "POST", f"/api/v1/sheets/{sheet_id}/traces", data={"name": "level", "unit": "m", "vertices": vertices}
    )
    return sheet_id, int(trace.json()["id"]), vertices


def _server_trace(page: Page, trace_id: int) -> dict[str, object]:
    return dict(api(page, "GET", f"/api/v1/traces/{trace_id}").json())


def _saved(page: Page, version: int) -> None:
    expect(page.locator("[data-save-state]")).to_have_text(f"All changes saved (trace version {version})")


def _start_editing(page: Page, sheet_id: int) -> None:
    open_workbench(page, sheet_id)
    show_whole(page, *STRIP_SIZE)
    page.keyboard.press("2")
    page.keyboard.press("v")
    expect(page.get_by_role("button", name="Select & move")).to_have_attribute("aria-pressed", "true")


def test_vertices_move_undo_redo_add_delete_and_erase(page: Page, console: ConsoleWatch) -> None:
    log_in(page)
    sheet_id, trace_id, original = _calibrated_sheet_with_trace(page, "Hand edits")
    _start_editing(page, sheet_id)
    u, v = original[2]
    drag_image(page, (u, v), (u, v + 40.0))
    _saved(page, 2)
    moved = _server_trace(page, trace_id)["vertices"]
    np.testing.assert_allclose(moved[2], [u, v + 40.0], atol=1.0)  # dragged 40 px down, within a screen pixel
    np.testing.assert_allclose(np.delete(moved, 2, axis=0), np.delete(original, 2, axis=0), atol=1e-9)

    page.keyboard.press("Control+z")
    _saved(page, 3)
    np.testing.assert_allclose(_server_trace(page, trace_id)["vertices"], original, atol=1e-9)
    page.keyboard.press("Control+Shift+z")
    _saved(page, 4)
    np.testing.assert_allclose(_server_trace(page, trace_id)["vertices"], moved, atol=1e-9)

    page.keyboard.press("a")
    click_image(page, 1120.0, 300.0)
    _saved(page, 5)
    added = _server_trace(page, trace_id)["vertices"]
    assert len(added) == 7
    np.testing.assert_allclose(added[-1], [1120.0, 300.0], atol=1.0)

    page.keyboard.press("v")
    click_image(page, *original[0])
    expect(page.locator("[data-vertex-info]")).to_contain_text("vertex 1 of 7")
    page.keyboard.press("Delete")
    _saved(page, 6)
    assert _server_trace(page, trace_id)["vertices"][0] == original[1]

    page.keyboard.press("x")
    (u1, v1), (u2, v2) = original[2:4]
    drag_image(page, (min(u1, u2) - 10, min(v1, v2, v1 + 40) - 10), (max(u1, u2) + 10, max(v1, v2, v1 + 40) + 10))
    _saved(page, 7)
    erased = _server_trace(page, trace_id)["vertices"]
    assert len(erased) == 4 and original[1] in erased and original[4] in erased
    shoot(page, "09-edit-by-hand")
    page.keyboard.press("Control+z")
    _saved(page, 8)
    assert len(_server_trace(page, trace_id)["vertices"]) == 6


def test_two_pages_editing_one_trace_get_a_plain_conflict_message(
    page: Page, console: ConsoleWatch, browser: Browser, base_url: str
) -> None:
    log_in(page)
    sheet_id, trace_id, original = _calibrated_sheet_with_trace(page, "Two people")
    other = second_page(browser, base_url, "tess")
    other_console = ConsoleWatch()
    other_console.watch(other)
    other_console.allow(r"status of 412")  # the refused save is the point of this test
    _start_editing(page, sheet_id)
    _start_editing(other, sheet_id)

    drag_image(page, tuple(original[1]), (original[1][0], original[1][1] - 30.0))
    _saved(page, 2)
    drag_image(other, tuple(original[3]), (original[3][0], original[3][1] + 30.0))
    dialog = other.locator("[data-conflict-dialog]")
    expect(dialog).to_be_visible()
    expect(dialog).to_contain_text("was changed by someone else")
    expect(other.locator("[data-save-state]")).to_contain_text("Not saved")
    shoot(other, "10-conflict")
    other.get_by_role("button", name="Keep my edits as a new trace").click()
    expect(other.locator("[data-trace-list]")).to_contain_text("level (my copy)")

    theirs = _server_trace(page, trace_id)
    assert theirs["version"] == 2  # the first page's save stands; nothing was overwritten
    np.testing.assert_allclose(theirs["vertices"][1], [original[1][0], original[1][1] - 30.0], atol=1.0)
    np.testing.assert_allclose(theirs["vertices"][3], original[3], atol=1e-9)
    copies = [t for t in api(page, "GET", f"/api/v1/sheets/{sheet_id}/traces").json() if t["name"] == "level (my copy)"]
    assert len(copies) == 1
    np.testing.assert_allclose(copies[0]["vertices"][3], [original[3][0], original[3][1] + 30.0], atol=1.0)
    np.testing.assert_allclose(copies[0]["vertices"][1], original[1], atol=1e-9)
    assert other_console.unexpected() == []
    other.context.close()


def _wiggle(count: int) -> list[list[float]]:
    u = np.linspace(61.0, 1139.0, count)
    v = 290.0 + 200.0 * np.sin(u / 37.0) * np.cos(u / 211.0)
    return np.column_stack([u, v]).round(3).tolist()


def test_redraw_of_a_20000_vertex_trace_is_measured(page: Page, console: ConsoleWatch) -> None:
    log_in(page)
    sheet_id, _, _ = _calibrated_sheet_with_trace(page, "Redraw")
    ids = {}
    for count in (2_000, 20_000):
        body = {"name": f"wiggle {count}", "vertices": _wiggle(count)}
        ids[count] = api(page, "POST", f"/api/v1/sheets/{sheet_id}/traces", data=body).json()["id"]
    _start_editing(page, sheet_id)  # the worst case: selected, with the move tool showing its vertices
    timings = {count: page.evaluate(f"{HOOK}.timeRedraw(31, {trace_id})") for count, trace_id in ids.items()}
    assert timings[20_000]["vertices"] == 20_000 and timings[2_000]["vertices"] == 2_000
    report = {
        "what": "one full overlay redraw, rasterised, of the selected trace with its vertex handles, at 1280 x 800",
        "browser": page.context.browser.version if page.context.browser else "",
        "redraw_ms": {str(count): timing["median_ms"] for count, timing in timings.items()},
        "max_ms": {str(count): timing["max_ms"] for count, timing in timings.items()},
        "target_ms": 50,
    }
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    (ARTIFACTS / "workbench-redraw.json").write_text(json.dumps(report, indent=2), encoding="utf-8")
    shoot(page, "11-twenty-thousand-vertices")
