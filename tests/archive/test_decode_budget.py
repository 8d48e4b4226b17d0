"""The decoding settings of an upload: ``decode_file_seconds`` (all the pages of one file together) and
``decode_parallel`` (decodes at once per process), from the settings model to a refused upload.

A file past its budget is refused like any refused file (tests/archive/test_upload.py is the reference): the
reason names the page it reached and the budget, and nothing of it is kept, neither rows (sheets, originals,
audit events) nor files. The budget is measured with a stepping clock (tests/archive/decode_clock.py: one second
per request), so the page the budget runs out on does not depend on the machine's speed; the limits themselves
are the real ones (tests/imaging/test_imaging_decode_budget.py).
"""

from __future__ import annotations

import math
from typing import Any

import pytest
from fastapi.testclient import TestClient
from pydantic import ValidationError
from sqlalchemy import func, select

from tests.archive.decode_clock import use_stepping_clocks
from tests.archive.scans import multipage_tiff_bytes, pdf_bytes, png_bytes
from tests.archive.test_upload import _collection, _counts, _stored_files, _upload
from tests.jobs.waiting import wait_for_job
from tracedesk.archive.ingest import ReceivedFile, decode_limits, examine_received
from tracedesk.config import Settings
from tracedesk.db import transaction
from tracedesk.digitizing import sheet_image
from tracedesk.imaging.limits import DecodeLimits
from tracedesk.models import AuditEvent, Sheet, SourceFile
from tracedesk.web.state import AppState

BUDGET = 2.5  # stepping-clock seconds: two pages fit, the third goes past


@pytest.fixture
def settings(settings: Settings) -> Settings:
    return settings.model_copy(update={"decode_file_seconds": BUDGET, "decode_parallel": 1})


def _audit_events(state: AppState) -> int:
    with transaction(state.reader) as session:
        return int(session.scalar(select(func.count()).select_from(AuditEvent)) or 0)


def _sheet_keys(state: AppState) -> tuple[set[str], set[str]]:
    """The derived folders and originals the sheet rows refer to."""
    with transaction(state.reader) as session:
        rows = session.execute(
            select(Sheet.derived_key, SourceFile.sha256).join(SourceFile, SourceFile.id == Sheet.source_file_id)
        ).all()
    return {derived for derived, _ in rows}, {sha256 for _, sha256 in rows}


def test_a_file_past_the_budget_is_refused_at_the_page_reached_and_one_within_it_is_kept(
    signed_in: dict[str, TestClient], state: AppState, monkeypatch: pytest.MonkeyPatch
) -> None:
    use_stepping_clocks(monkeypatch)
    tech = signed_in["technician"]
    collection_id = _collection(tech)
    events_before = _audit_events(state)
    response = _upload(
        tech,
        collection_id,
        ("two-pages.pdf", pdf_bytes(2), "application/pdf"),
        ("three-pages.tif", multipage_tiff_bytes(3), "image/tiff"),
    )
    assert response.status_code == 201, response.text
    body = response.json()
    assert [(sheet["filename"], sheet["page_index"]) for sheet in body["sheets"]] == [
        ("two-pages.pdf", 0),
        ("two-pages.pdf", 1),
    ]
    (refused,) = body["refused"]
    assert refused["filename"] == "three-pages.tif" and refused["status"] == 422
    # Stepping clock arithmetic: pages 1 and 2 spend 2 s of 2.5 s, page 3 brings it to 3 s.
    assert refused["reason"].startswith("decoding page 3 of the TIFF file went past 2.5 s, the decoding time")
    # Nothing of the refused file: only the PDF's two sheets, its original, its folders and its audit events.
    assert _counts(state) == (2, 1)
    assert _audit_events(state) == events_before + 2
    derived, originals = _sheet_keys(state)
    assert {entry.name for entry in state.store.iter_derived()} == derived
    assert set(state.store.iter_keys()) == originals


def test_a_file_refused_for_its_budget_alone_leaves_no_row_and_no_file(
    signed_in: dict[str, TestClient], state: AppState, monkeypatch: pytest.MonkeyPatch
) -> None:
    use_stepping_clocks(monkeypatch)
    tech = signed_in["technician"]
    collection_id = _collection(tech)
    events_before = _audit_events(state)
    files_before = _stored_files(state)
    response = _upload(tech, collection_id, ("lab-plots.pdf", pdf_bytes(4), "application/pdf"))
    assert response.status_code == 422, response.text
    assert response.json()["refused"][0]["reason"].startswith("rendering page 3 of the PDF file went past 2.5 s")
    assert _counts(state) == (0, 0)
    assert _audit_events(state) == events_before
    assert _stored_files(state) == files_before  # no original, no derived folder, no staging left over


def test_a_background_ingest_past_the_budget_fails_with_the_reason_and_leaves_no_sheet(
    signed_in: dict[str, TestClient], state: AppState, monkeypatch: pytest.MonkeyPatch
) -> None:
    """The job path undoes a refused file as the request path does (its original is left to the orphan sweep,
    tests/archive/test_background_ingest.py)."""
    use_stepping_clocks(monkeypatch)
    tech = signed_in["technician"]
    collection_id = _collection(tech)
    events_before = _audit_events(state)
    answer = tech.post(
        f"/api/v1/collections/{collection_id}/sheets",
        params={"background": "true"},
        files=[("files", ("three-pages.tif", multipage_tiff_bytes(3), "image/tiff"))],
    )
    assert answer.status_code == 202, answer.text
    job = wait_for_job(tech, answer.json()["queued"][0]["job_id"])
    assert job["status"] == "failed"
    assert str(job["error"]).startswith("decoding page 3 of the TIFF file went past 2.5 s"), job["error"]
    assert _counts(state) == (0, 0)
    assert [entry.name for entry in state.store.iter_derived()] == []
    assert _audit_events(state) == events_before


def test_the_settings_reach_the_limits_every_decode_of_the_upload_runs_under(state: AppState) -> None:
    path = state.settings.data_dir / "chart.png"
    path.write_bytes(png_bytes(seed=21))
    received = ReceivedFile(path, "chart.png", "image/png", "0" * 64, path.stat().st_size)
    limits = examine_received(state, received).limits
    assert (limits.max_file_decode_seconds, limits.max_parallel_decodes) == (BUDGET, 1)


def test_the_defaults_are_ten_pages_worth_of_time_and_two_decodes_at_once() -> None:
    defaults = Settings()
    assert defaults.decode_file_seconds == 10 * defaults.decode_timeout_seconds == 600.0
    assert defaults.decode_parallel == 2


def test_the_settings_are_read_from_the_environment(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("TRACEDESK_DECODE_FILE_SECONDS", "90.5")
    monkeypatch.setenv("TRACEDESK_DECODE_PARALLEL", "1")
    configured = Settings()
    assert (configured.decode_file_seconds, configured.decode_parallel) == (90.5, 1)


@pytest.mark.parametrize(
    ("field", "value"),
    [
        ("decode_file_seconds", 0),
        ("decode_file_seconds", -60),
        ("decode_file_seconds", math.inf),
        ("decode_file_seconds", math.nan),
        ("decode_file_seconds", "ten minutes"),
        ("decode_parallel", 0),
        ("decode_parallel", -2),
        ("decode_parallel", 65),
        ("decode_parallel", 1.5),
    ],
)
def test_the_settings_model_refuses_values_no_decoder_could_work_with(field: str, value: object) -> None:
    # Field constraints gt / ge / le and allow_inf_nan=False as the pydantic documentation defines them.
    with pytest.raises(ValidationError, match=field):
        Settings(**{field: value})  # type: ignore[arg-type]


def test_stored_originals_are_decoded_again_under_the_configured_limits(
    signed_in: dict[str, TestClient], state: AppState, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A raster sheet's pixels are re-decoded from its original under this process's limits, not the defaults."""
    tech = signed_in["technician"]
    response = _upload(tech, _collection(tech), ("chart.png", png_bytes(seed=22), "image/png"))
    assert response.status_code == 201, response.text
    with transaction(state.reader) as session:
        derived_key = session.scalars(select(Sheet.derived_key)).one()
    seen: list[DecodeLimits] = []
    real = sheet_image.examine_upload

    def recording(*args: Any, **kwargs: Any) -> Any:
        seen.append(kwargs["limits"])
        return real(*args, **kwargs)

    monkeypatch.setattr(sheet_image, "examine_upload", recording)
    assert sheet_image.load_sheet_image(state.store, derived_key).shape[2] == 3
    assert seen == [decode_limits(state.settings)]
    assert seen[0].max_parallel_decodes == 1 and seen[0].max_file_decode_seconds == BUDGET
