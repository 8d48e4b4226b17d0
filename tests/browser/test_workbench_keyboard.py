"""The workbench from the keyboard and for a read-only role: the shortcut list, the loupe, a polygon drawn with
keys and clicks, a found line discarded at review, a calibration reused from another sheet of the collection."""

from __future__ import annotations

from playwright.sync_api import Browser, Page, expect

from tests.browser.charts import STRIP_SIZE, strip_chart_png
from tests.browser.conftest import (
    ConsoleWatch,
    api,
    calibrate_strip_through_the_api,
    click_image,
    image_to_page,
    log_in,
    open_workbench,
    second_page,
    show_whole,
)


def _two_sheets_one_calibrated(page: Page, collection: str) -> tuple[int, int]:
    collection_id = api(page, "POST", "/api/v1/collections", data={"name": collection}).json()["id"]
    ids = []
    for variant, name in enumerate(("first.png", "second.png")):
        files = {"files": {"name": name, "mimeType": "image/png", "buffer": strip_chart_png(variant)}}
        ids.append(
            api(page, "POST", f"/api/v1/collections/{collection_id}/sheets", multipart=files).json()["sheets"][0]["id"]
        )
    calibrate_strip_through_the_api(page, int(ids[0]))
    return int(ids[0]), int(ids[1])


def test_shortcuts_loupe_polygon_review_and_reuse(page: Page, console: ConsoleWatch) -> None:
    log_in(page)
    first, second = _two_sheets_one_calibrated(page, "Keyboard")
    open_workbench(page, second)
    show_whole(page, *STRIP_SIZE)

    page.keyboard.press("?")
    help_dialog = page.locator("[data-help-dialog]")
    expect(help_dialog).to_be_visible()
    expect(help_dialog).to_contain_text("erase a stretch")
    page.keyboard.press("Escape")
    expect(help_dialog).to_be_hidden()

    page.get_by_label("Start from").select_option(str(first))
    expect(page.locator("[data-points-table] tbody tr")).to_have_count(4)
    expect(page.locator("[data-cal-report]")).to_contain_text("Points off by")
    page.get_by_role("button", name="Save calibration").click()
    expect(page.locator("[data-cal-summary]")).to_contain_text("Saved as version 1")

    page.keyboard.press("l")
    page.mouse.move(*image_to_page(page, 300.0, 300.0))
    expect(page.locator("[data-loupe]")).to_be_visible()
    page.keyboard.press("l")
    expect(page.locator("[data-loupe]")).to_be_hidden()

    page.keyboard.press("g")
    expect(page.locator("[data-tool-hint]")).to_contain_text("polygon")
    for corner in ((62.0, 42.0), (1138.0, 42.0), (1138.0, 538.0), (62.0, 538.0)):
        click_image(page, *corner)
    page.keyboard.press("Enter")
    expect(page.locator("[data-region-note]")).to_have_text("Polygon with 4 corners.")
    page.get_by_role("button", name="Find the line").click()
    expect(page.locator("[data-review]")).to_be_visible(timeout=30_000)
    page.get_by_role("button", name="Discard it").click()
    expect(page.locator("[data-trace-list]")).to_contain_text("No traces yet")
    traces = api(page, "GET", f"/api/v1/sheets/{second}/traces").json()
    assert traces == []  # discarded means withdrawn (kept in the history, gone from the sheet)


def test_a_viewer_sees_the_workbench_but_cannot_change_anything(
    page: Page, console: ConsoleWatch, browser: Browser, base_url: str
) -> None:
    log_in(page)
    first, _ = _two_sheets_one_calibrated(page, "Read only")
    viewer = second_page(browser, base_url, "vic")
    watch = ConsoleWatch()
    watch.watch(viewer)
    open_workbench(viewer, first)
    expect(viewer.locator("[data-save-state]")).to_contain_text("Read only")
    expect(viewer.get_by_role("button", name="Save calibration")).to_be_disabled()
    expect(viewer.get_by_role("button", name="Place points")).to_be_disabled()
    viewer.keyboard.press("2")
    expect(viewer.get_by_role("button", name="Find the line")).to_be_disabled()
    assert watch.unexpected() == []
    viewer.context.close()
