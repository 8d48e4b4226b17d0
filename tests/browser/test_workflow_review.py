"""Review with a signature across three accounts, through the real pages: Ada (admin) assigns a sheet to Tom
(technician) with Rita (reviewer); Tom digitizes it in the workbench and submits; Rita returns it with a reason;
Tom sees the notice, fixes the slipped vertex and resubmits; Tom cannot approve his own work; Rita approves by
re-entering her password and the signature shows. Then Rita exports the approved sheet as a bundle whose progress
bar follows the background job.

Truth: y = 3 + 2 sin(2 pi x / 24) m over x = 0..48 h drawn by matplotlib into a box whose pixel corners are known
exactly (tests/science/chart_render.py, tests/browser/charts.py).
"""

from __future__ import annotations

import hashlib
import io
import json
import threading
import time
import zipfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from playwright.sync_api import Browser, Page, expect

from tests.browser.charts import STRIP, STRIP_SIZE, strip_chart_png, strip_truth
from tests.browser.conftest import (
    ConsoleWatch,
    api,
    calibrate_strip_through_the_api,
    click_image,
    csrf,
    drag_image,
    log_in,
    second_page,
    shoot,
    show_whole,
    upload_sheet,
)
from tests.browser.live_server import PASSWORD
from tracedesk.exports import bundle

HOURS = np.array([4.0, 12.0, 20.0, 28.0, 36.0, 44.0])
SLIP_INDEX, SLIP_PX = 2, -45.0  # Tom's click at 20 h lands 45 px above the pen line
RETURN_REASON = "the point at 20 h is off the pen line; move it onto the line"


def _truth_pixels() -> list[list[float]]:
    return [[float(u), float(v)] for u, v in STRIP.data_to_pixel(HOURS, strip_truth(HOURS))]


def _watched(page: Page) -> ConsoleWatch:
    watch = ConsoleWatch()
    watch.watch(page)
    return watch


def _traces(page: Page, sheet_id: int) -> list[dict[str, Any]]:
    return list(api(page, "GET", f"/api/v1/sheets/{sheet_id}/traces").json())


def _wait_for_vertices(page: Page, sheet_id: int, check: Any, *, timeout_s: float = 15.0) -> dict[str, Any]:
    """The sheet's one trace once ``check(vertices)`` holds on the server (autosave is debounced)."""
    deadline = time.monotonic() + timeout_s
    while True:
        traces = _traces(page, sheet_id)
        if len(traces) == 1 and check(traces[0]["vertices"]):
            return traces[0]
        assert time.monotonic() < deadline, f"the server never held the expected vertices: {traces}"
        page.wait_for_timeout(100)


def _open_task_from_queue(page: Page, heading: str, task_id: int) -> None:
    page.goto("/work")
    expect(page).to_have_title("My work · Tracedesk")
    queue = page.get_by_role("heading", name=heading)
    expect(queue).to_be_visible()
    page.get_by_role("link", name=f"#{task_id}", exact=True).first.click()
    page.wait_for_url(f"**/tasks/{task_id}")


def _state_badge(page: Page) -> Any:
    return page.locator("h1 .badge").first


def _assign(admin: Page, collection_id: int) -> int:
    admin.goto(f"/collections/{collection_id}/tasks")
    form = admin.locator("form", has=admin.get_by_role("button", name="Create tasks"))
    form.locator('select[name="technician_id"]').select_option(label="Tom (technician)")
    form.locator('select[name="reviewer_id"]').select_option(label="Rita (reviewer)")
    form.locator('select[name="priority"]').select_option("high")
    form.locator('input[name="due_date"]').fill("2031-03-31")
    form.get_by_role("button", name="Create tasks").click()
    row = admin.locator("table.tasks tbody tr").last
    expect(row).to_contain_text("open")
    expect(row).to_contain_text("Tom")
    expect(row).to_contain_text("Rita")
    shoot(admin, "workflow-01-assigned")
    return int(row.locator("a").first.inner_text().lstrip("#"))


def _open_workbench_from_task(page: Page) -> None:
    page.get_by_role("link", name="workbench").click()
    page.wait_for_selector("[data-workbench][data-ready='true']")
    show_whole(page, *STRIP_SIZE)
    page.get_by_role("tab", name="Trace").click()


def _digitize(tom: Page, sheet_id: int) -> list[list[float]]:
    """A trace by hand: six clicks on the pen line, the third one slipping above it. Returns the saved vertices."""
    calibrate_strip_through_the_api(tom, sheet_id)
    _open_workbench_from_task(tom)
    tom.locator("[data-new-trace-fold] summary").click()
    new_trace = tom.locator("[data-new-trace]")
    new_trace.get_by_label("Name").fill("level")
    new_trace.get_by_label("Unit").fill("m")
    new_trace.get_by_role("button", name="Create and start adding vertices").click()
    expect(tom.get_by_role("button", name="Add at end")).to_have_attribute("aria-pressed", "true")
    clicked = _truth_pixels()
    clicked[SLIP_INDEX][1] += SLIP_PX
    for u, v in clicked:
        click_image(tom, u, v)
    saved = _wait_for_vertices(tom, sheet_id, lambda vertices: len(vertices) == len(clicked))["vertices"]
    np.testing.assert_allclose(saved, clicked, atol=1.0)  # each click lands within a screen pixel of its target
    expect(tom.locator("[data-save-state]")).to_contain_text("All changes saved")
    shoot(tom, "workflow-03-digitized")
    return [[float(u), float(v)] for u, v in saved]


def _act(page: Page, button: str, state: str, *, reason: str = "") -> None:
    form = page.locator("form.action-form", has=page.get_by_role("button", name=button))
    if reason:
        form.get_by_label("Reason (required)").fill(reason)
    form.get_by_role("button", name=button).click()
    expect(_state_badge(page)).to_have_text(state)


def _fix(tom: Page, sheet_id: int, saved: list[list[float]]) -> None:
    """Drag the slipped vertex onto the pen line; the other vertices stay exactly where they were."""
    _open_workbench_from_task(tom)
    tom.locator("[data-trace-list] .wb-trace-button", has_text="level").click()
    tom.keyboard.press("v")
    expect(tom.get_by_role("button", name="Select & move")).to_have_attribute("aria-pressed", "true")
    truth = _truth_pixels()
    drag_image(tom, (saved[SLIP_INDEX][0], saved[SLIP_INDEX][1]), (truth[SLIP_INDEX][0], truth[SLIP_INDEX][1]))
    fixed = _wait_for_vertices(tom, sheet_id, lambda vertices: abs(vertices[SLIP_INDEX][1] - truth[SLIP_INDEX][1]) < 2)
    # Dragged onto the line within a screen pixel (the sheet is shown at about one screen pixel per sheet pixel).
    np.testing.assert_allclose(fixed["vertices"][SLIP_INDEX], truth[SLIP_INDEX], atol=1.5)
    assert np.delete(fixed["vertices"], SLIP_INDEX, axis=0).tolist() == np.delete(saved, SLIP_INDEX, axis=0).tolist()
    expect(tom.locator("[data-save-state]")).to_contain_text("All changes saved")
    shoot(tom, "workflow-07-fixed")


def _author_cannot_sign(tom: Page, task_id: int) -> None:
    """No signature form for the author, and posting one anyway (with his right password) is refused."""
    expect(tom.get_by_role("button", name="Sign", exact=True)).to_have_count(0)
    task = api(tom, "GET", f"/api/v1/tasks/{task_id}").json()
    form = {"csrf_token": csrf(tom), "version": str(task["version"]), "password": PASSWORD, "meaning": "approved"}
    refused = tom.request.post(f"/tasks/{task_id}/sign", form=form)
    assert refused.status == 403, refused.status
    assert api(tom, "GET", f"/api/v1/tasks/{task_id}/signatures").json() == []
    assert api(tom, "GET", f"/api/v1/tasks/{task_id}").json()["state"] == "submitted"
    shoot(tom, "workflow-09-author-cannot-sign")


def _approve(rita: Page, task_id: int) -> None:
    _open_task_from_queue(rita, "To review (1)", task_id)
    sign = rita.locator("form.sign-form")
    expect(sign).to_contain_text("Signing as Rita")
    sign.get_by_label("Your password").fill(PASSWORD)
    sign.get_by_role("button", name="Sign", exact=True).click()
    expect(_state_badge(rita)).to_have_text("approved")
    approval = rita.locator(".notice.ok", has_text="Approved: signed by")
    expect(approval).to_contain_text("Rita")
    expect(approval).to_contain_text("(approved)")
    expect(rita.locator("ul.signatures li.valid")).to_contain_text("Rita")
    expect(rita.locator("ul.signatures li.valid .badge")).to_have_text("holds")
    shoot(rita, "workflow-10-approved")


def test_assign_digitize_submit_return_fix_and_approve_with_a_signature(
    page: Page, console: ConsoleWatch, browser: Browser, base_url: str
) -> None:
    ada = second_page(browser, base_url, "ada")
    rita = second_page(browser, base_url, "rita")
    others = [_watched(ada), _watched(rita)]
    sheet_id = upload_sheet(ada, strip_chart_png(3), name="level.png", collection="Reservoir levels 1991")
    collection_id = int(api(ada, "GET", f"/api/v1/sheets/{sheet_id}").json()["collection_id"])
    task_id = _assign(ada, collection_id)

    tom = page
    log_in(tom, "tom")
    _open_task_from_queue(tom, "To digitize (1)", task_id)
    shoot(tom, "workflow-02-task-of-the-technician")
    _act(tom, "Start work", "in progress")
    saved = _digitize(tom, sheet_id)
    tom.goto(f"/tasks/{task_id}")
    _act(tom, "Submit for review", "submitted")
    shoot(tom, "workflow-04-submitted")

    _open_task_from_queue(rita, "To review (1)", task_id)
    expect(rita.locator("tr", has_text="level").first).to_contain_text("Tom")  # the trace and who drew it
    _act(rita, "Return to the technician", "returned", reason=RETURN_REASON)
    shoot(rita, "workflow-05-returned")

    tom.goto("/work")
    notice = tom.locator("ul.notices li.unread", has_text="returned")
    expect(notice).to_contain_text(f"Rita returned sheet {sheet_id} (task {task_id}): {RETURN_REASON}")
    shoot(tom, "workflow-06-technician-sees-the-return")
    notice.get_by_role("link").click()
    expect(_state_badge(tom)).to_have_text("returned")
    expect(tom.locator("aside dl")).to_contain_text(RETURN_REASON)
    _act(tom, "Start work", "in progress")
    _fix(tom, sheet_id, saved)
    tom.goto(f"/tasks/{task_id}")
    _act(tom, "Submit for review", "submitted")
    shoot(tom, "workflow-08-resubmitted")
    _author_cannot_sign(tom, task_id)

    _approve(rita, task_id)
    tom.reload()
    expect(tom.locator(".notice.ok", has_text="Approved: signed by")).to_contain_text("Rita")
    assert [s["printed_name"] for s in api(tom, "GET", f"/api/v1/tasks/{task_id}/signatures").json()] == ["Rita"]
    assert all(watch.unexpected() == [] for watch in others), [watch.unexpected() for watch in others]
    ada.context.close()
    rita.context.close()


@pytest.fixture
def held_bundle(monkeypatch: pytest.MonkeyPatch) -> Iterator[threading.Event]:
    """Bundle jobs of the live server (a thread of this process) wait before drawing their first picture until
    the test sets the event, so the page is seen while its job runs (bounded, so a failed test never hangs it)."""
    release = threading.Event()
    real = bundle.render_sheet_overlay

    def held(*args: Any, **kwargs: Any) -> Any:
        release.wait(timeout=30)
        return real(*args, **kwargs)

    monkeypatch.setattr(bundle, "render_sheet_overlay", held)
    yield release
    release.set()


def test_a_bundle_job_shows_a_progress_bar_and_then_the_download(
    page: Page, console: ConsoleWatch, held_bundle: threading.Event
) -> None:
    log_in(page, "rita")
    sheet_id = upload_sheet(page, strip_chart_png(4), name="level.png", collection="Reservoir levels 1992")
    calibrate_strip_through_the_api(page, sheet_id)
    api(
        page,
        "POST",
        f"/api/v1/sheets/{sheet_id}/traces",
        data={"name": "level", "unit": "m", "vertices": _truth_pixels()},
    )
    collection_id = int(api(page, "GET", f"/api/v1/sheets/{sheet_id}").json()["collection_id"])

    page.goto(f"/collections/{collection_id}/tasks")
    page.get_by_role("link", name="Export a bundle (ZIP)…").click()
    page.get_by_label("Picture size (longer side, px)").fill("600")
    shoot(page, "workflow-11-bundle-page")
    page.get_by_role("button", name="Build the bundle").click()
    page.wait_for_url("**/bundles/*")
    state = page.locator("[data-bundle-state]")
    expect(state).to_contain_text(f"Building: sheet {sheet_id} (1 of 1)")
    assert float(page.locator("[data-bundle-progress]").evaluate("bar => bar.value")) < 1.0
    expect(page.locator("[data-bundle-done]")).to_be_hidden()
    shoot(page, "workflow-12-bundle-progress")

    held_bundle.set()
    expect(state).to_have_text("Ready.")
    assert page.locator("[data-bundle-progress]").evaluate("bar => bar.value") == 1
    link = page.get_by_role("link", name="Download the bundle (ZIP)")
    expect(link).to_be_visible()
    shoot(page, "workflow-13-bundle-ready")
    with page.expect_download() as download:
        link.click()
    content = Path(download.value.path()).read_bytes()
    assert hashlib.sha256(content).hexdigest() == page.locator("[data-bundle-sha]").inner_text()
    archive = zipfile.ZipFile(io.BytesIO(content))
    provenance = json.loads(archive.read("provenance.json"))
    assert [sheet["id"] for sheet in provenance["sheets"]] == [sheet_id]
    assert provenance["generated_by"] == "Rita" and provenance["job"]["attempt"] == 1
    trace_id = provenance["sheets"][0]["traces"][0]["id"]
    vertices = archive.read(f"sheet-{sheet_id}/trace-{trace_id}-vertices.csv")
    assert vertices == api(page, "GET", f"/api/v1/traces/{trace_id}/vertices.csv").body()
