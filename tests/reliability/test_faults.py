"""A failure injected at each step of the upload and edit pipelines leaves all or nothing; a full disk gives 507.

The way SQLite tests itself (fault injection at every step, then an integrity check) applied to our pipelines:
after each injected failure there is no new row, every file left over is removed by the orphan sweep (the
original of a failed upload may wait for it: another upload of the same bytes could be using it), no file a row
references is missing, and the audit chain verifies. For edits, the record reads exactly as before.
"""

from __future__ import annotations

import errno
import hashlib
import os
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner
from sqlalchemy import event
from sqlalchemy.exc import OperationalError

from tests.archive.scans import chart_image, encoded, png_bytes
from tests.reliability.campaign import (
    Campaign,
    audit_head,
    chain_verifies,
    missing_files,
    new_collection,
    row_counts,
    stored_files,
    sweep_now,
    upload,
)
from tests.reliability.conftest import Figures
from tests.reliability.records import CALIBRATION, VERTICES, Records, make_records
from tracedesk.archive import ingest
from tracedesk.cli import main as cli_main
from tracedesk.storage import DerivedStaging, LocalFileStore
from tracedesk.storage import durable as durable_module
from tracedesk.storage import local as local_module


class InjectedFailure(RuntimeError):
    """A crash-like failure the code under test does not expect."""


def _raise(error: BaseException) -> Callable[..., Any]:
    def raiser(*_args: Any, **_kwargs: Any) -> Any:
        raise error

    return raiser


def _os_error(code: int) -> OSError:
    return OSError(code, "injected: " + errno.errorcode[code])


class _FailingHandle:
    """A temp file whose writes fail with ``code`` after writing half of what they were given."""

    def __init__(self, handle: Any, code: int) -> None:
        self._handle = handle
        self.name = handle.name
        self._code = code

    def write(self, data: bytes) -> int:
        self._handle.write(data[: len(data) // 2])
        raise _os_error(self._code)

    def __enter__(self) -> _FailingHandle:
        return self

    def __exit__(self, *exc: object) -> None:
        self._handle.close()


class _FailingTempfile:
    """Stands in for the ``tempfile`` module inside ingest, handing out failing temp files."""

    def __init__(self, code: int) -> None:
        self.code = code

    def NamedTemporaryFile(self, **options: Any) -> _FailingHandle:
        return _FailingHandle(tempfile.NamedTemporaryFile(**options), self.code)


@dataclass(frozen=True)
class Step:
    name: str
    inject: Callable[[pytest.MonkeyPatch, Campaign], Any]
    statuses: frozenset[int]
    pages: int = 1


def _fail_second_publish(monkeypatch: pytest.MonkeyPatch, campaign: Campaign) -> None:
    original = DerivedStaging.publish
    calls = {"n": 0}

    def publish(self: DerivedStaging) -> None:
        calls["n"] += 1
        if calls["n"] == 2:
            self.discard()
            raise local_module.StorageError("injected: publishing the second page failed")
        original(self)

    monkeypatch.setattr(DerivedStaging, "publish", publish)


def _rows_then_fail(monkeypatch: pytest.MonkeyPatch, campaign: Campaign) -> None:
    original = ingest.insert_rows

    def insert_then_fail(*args: Any, **kwargs: Any) -> Any:
        original(*args, **kwargs)  # rows and audit events flushed, then the process "crashes"
        raise InjectedFailure("after the rows were written")

    monkeypatch.setattr(ingest, "insert_rows", insert_then_fail)


SERVER_ERROR = frozenset({500})
UPLOAD_STEPS = [
    Step("temp write (EIO)", lambda mp, c: mp.setattr(ingest, "tempfile", _FailingTempfile(errno.EIO)), SERVER_ERROR),
    Step("decode", lambda mp, c: mp.setattr(ingest, "iter_sheets", _raise(InjectedFailure("decoder"))), SERVER_ERROR),
    Step(
        "derived write (EIO)",
        lambda mp, c: mp.setattr(ingest, "_write_derived", _raise(_os_error(errno.EIO))),
        SERVER_ERROR,
    ),
    Step(
        "store put_file (EIO)",
        lambda mp, c: mp.setattr(durable_module, "_write_all", _raise(_os_error(errno.EIO))),
        SERVER_ERROR,
    ),
    Step(
        "store install rename",
        lambda mp, c: mp.setattr(
            LocalFileStore, "_install", _raise(local_module.StorageError("injected: rename failed"))
        ),
        SERVER_ERROR,
    ),
    Step(
        "derived publish (EIO)",
        lambda mp, c: mp.setattr(local_module, "fsync_tree", _raise(_os_error(errno.EIO))),
        SERVER_ERROR,
    ),
    Step("second page's publish", _fail_second_publish, SERVER_ERROR, pages=3),
    Step("row insert", _rows_then_fail, SERVER_ERROR, pages=3),
    Step(
        "audit record", lambda mp, c: mp.setattr(ingest, "record_event", _raise(InjectedFailure("audit"))), SERVER_ERROR
    ),
]
DISK_FULL_STEPS = [
    Step("receive", lambda mp, c: mp.setattr(ingest, "tempfile", _FailingTempfile(errno.ENOSPC)), frozenset({507})),
    Step(
        "derived write",
        lambda mp, c: mp.setattr(ingest, "_write_derived", _raise(_os_error(errno.ENOSPC))),
        frozenset({507}),
    ),
    Step(
        "store put_file",
        lambda mp, c: mp.setattr(durable_module, "_write_all", _raise(_os_error(errno.ENOSPC))),
        frozenset({507}),
    ),
    Step(
        "derived publish",
        lambda mp, c: mp.setattr(local_module, "fsync_tree", _raise(_os_error(errno.ENOSPC))),
        frozenset({507}),
    ),
]


@pytest.fixture(scope="module")
def box(campaign: Campaign) -> int:
    client = campaign.client("technician")
    collection_id = new_collection(client, "Fault injection")
    assert upload(client, collection_id, "before.png", png_bytes(seed=1000)).status_code == 201
    return collection_id


def _tiff(pages: int, seed: int) -> bytes:
    frames = [chart_image(seed=seed + index) for index in range(pages)]
    return encoded(frames[0], "TIFF", save_all=True, append_images=frames[1:], compression="tiff_lzw")


def _after_failure(campaign: Campaign, rows_before: dict[str, int], files_before: set[str]) -> list[str]:
    problems = []
    if row_counts(campaign.state) != rows_before:
        problems.append("rows were left behind")
    lost = missing_files(campaign.state)
    sweep_now(campaign.state)
    left = stored_files(campaign.state) - files_before
    if left:
        problems.append(f"files left after the orphan sweep: {sorted(left)[:3]}")
    if lost:
        problems.append(f"referenced files missing: {lost}")
    if not chain_verifies(campaign.state):
        problems.append("the audit chain does not verify")
    return problems


@pytest.mark.parametrize(
    "step",
    UPLOAD_STEPS + DISK_FULL_STEPS,
    ids=[s.name for s in UPLOAD_STEPS] + [f"disk full at {s.name}" for s in DISK_FULL_STEPS],
)
def test_upload_fails_at_one_step_and_leaves_nothing(
    campaign: Campaign, box: int, figures: Figures, monkeypatch: pytest.MonkeyPatch, step: Step
) -> None:
    client = campaign.client("technician", raise_errors=False)
    seed = 2000 + (UPLOAD_STEPS + DISK_FULL_STEPS).index(step) * 10
    name, data = ("week.tif", _tiff(step.pages, seed)) if step.pages > 1 else ("scan.png", png_bytes(seed=seed))
    rows_before, files_before = row_counts(campaign.state), stored_files(campaign.state)
    step.inject(monkeypatch, campaign)
    response = upload(client, box, name, data, "")
    monkeypatch.undo()
    problems = [] if response.status_code in step.statuses else [f"status {response.status_code}"]
    if step.statuses != SERVER_ERROR:  # an expected condition: a JSON answer that says what happened
        body = response.json()
        if "space" not in str(body.get("detail", "")):
            problems.append(f"unclear message {body.get('detail')!r}")
        original = str(
            campaign.state.store.path_for(hashlib.sha256(data).hexdigest()).relative_to(campaign.settings.data_dir)
        )
        if stored_files(campaign.state) - files_before - {original}:
            problems.append("a full disk left files other than the original (kept for the sweep) behind")
    problems += _after_failure(campaign, rows_before, files_before)
    retried = upload(client, box, name, data, "")  # the same file goes through once the fault is gone
    if retried.status_code != 201:
        problems.append(f"retry after the fault: {retried.status_code}")
    figures.add(cases=1, failures=int(bool(problems)), data_lost=len(missing_files(campaign.state)))
    assert not problems, f"{step.name}: {problems}; {response.text[:300]}"


@pytest.fixture(scope="module")
def records(campaign: Campaign) -> Records:
    return make_records(campaign.client("technician"), name="Fault injection edits", seed=1100)


@dataclass(frozen=True)
class Edit:
    name: str
    method: str
    url: Callable[[Records], str]
    body: dict[str, Any] | None
    role: str
    etag_url: Callable[[Records], str] | None
    inject: Callable[[pytest.MonkeyPatch, Campaign], Any]


def _commit_fails(monkeypatch: pytest.MonkeyPatch, campaign: Campaign) -> Callable[[], None]:
    """Every commit of a writer session fails like a lost disk, until the returned cleanup runs."""
    raiser = _raise(OperationalError("COMMIT", {}, Exception("injected: disk I/O error")))
    event.listen(campaign.state.writer, "before_commit", raiser)
    return lambda: event.remove(campaign.state.writer, "before_commit", raiser)


TRACE_BODY = {"name": "edited", "vertices": [[x + 1.0, y] for x, y in VERTICES]}
EDITS = [
    Edit(
        "trace: audit record",
        "PATCH",
        lambda r: f"/api/v1/traces/{r.trace_id}",
        TRACE_BODY,
        "technician",
        lambda r: f"/api/v1/traces/{r.trace_id}",
        lambda mp, c: mp.setattr("tracedesk.digitizing.traces.record_event", _raise(InjectedFailure("audit"))),
    ),
    Edit(
        "trace: refitting its fits",
        "PATCH",
        lambda r: f"/api/v1/traces/{r.trace_id}",
        TRACE_BODY,
        "technician",
        lambda r: f"/api/v1/traces/{r.trace_id}",
        lambda mp, c: mp.setattr("tracedesk.digitizing.fits.rederive_fits", _raise(InjectedFailure("refit"))),
    ),
    Edit(
        "trace: commit",
        "PATCH",
        lambda r: f"/api/v1/traces/{r.trace_id}",
        TRACE_BODY,
        "technician",
        lambda r: f"/api/v1/traces/{r.trace_id}",
        _commit_fails,
    ),
    Edit(
        "trace withdrawal: audit record",
        "DELETE",
        lambda r: f"/api/v1/traces/{r.trace_id}?reason=mistake",
        None,
        "technician",
        lambda r: f"/api/v1/traces/{r.trace_id}",
        lambda mp, c: mp.setattr("tracedesk.digitizing.traces.record_event", _raise(InjectedFailure("audit"))),
    ),
    Edit(
        "calibration: re-deriving fits",
        "PUT",
        lambda r: f"/api/v1/sheets/{r.sheet_id}/calibration",
        {**CALIBRATION, "reason": "fault"},
        "technician",
        lambda r: f"/api/v1/sheets/{r.sheet_id}/calibration",
        lambda mp, c: mp.setattr("tracedesk.digitizing.api.rederive_sheet", _raise(InjectedFailure("rederive"))),
    ),
    Edit(
        "sheet metadata: audit record",
        "PATCH",
        lambda r: f"/api/v1/sheets/{r.sheet_id}",
        {"notes": "changed", "reason": "fault"},
        "technician",
        lambda r: f"/api/v1/sheets/{r.sheet_id}",
        lambda mp, c: mp.setattr("tracedesk.archive.service.record_event", _raise(InjectedFailure("audit"))),
    ),
    Edit(
        "collection: commit",
        "PATCH",
        lambda r: f"/api/v1/collections/{r.collection_id}",
        {"notes": "changed"},
        "reviewer",
        lambda r: f"/api/v1/collections/{r.collection_id}",
        _commit_fails,
    ),
    Edit(
        "new trace: commit",
        "POST",
        lambda r: f"/api/v1/sheets/{r.sheet_id}/traces",
        {"name": "new", "vertices": VERTICES},
        "technician",
        None,
        _commit_fails,
    ),
    Edit(
        "new fit: audit record",
        "POST",
        lambda r: f"/api/v1/traces/{r.trace_id}/fits",
        {"family": "polynomial", "degree": 2},
        "technician",
        None,
        lambda mp, c: mp.setattr("tracedesk.digitizing.fits.record_event", _raise(InjectedFailure("audit"))),
    ),
]


def _readback(campaign: Campaign, records: Records) -> dict[str, Any]:
    client = campaign.client("admin")
    read = {
        "sheet": client.get(f"/api/v1/sheets/{records.sheet_id}").json(),
        "calibration": client.get(f"/api/v1/sheets/{records.sheet_id}/calibration").json(),
        "traces": client.get(f"/api/v1/sheets/{records.sheet_id}/traces").json(),
        "fits": client.get(f"/api/v1/traces/{records.trace_id}/fits").json(),
        "collection": client.get(f"/api/v1/collections/{records.collection_id}").json(),
    }
    read["collection"].pop("sheet_count", None)
    return read


@pytest.mark.parametrize("edit", EDITS, ids=[e.name for e in EDITS])
def test_edit_fails_at_one_step_and_changes_nothing(
    campaign: Campaign, records: Records, figures: Figures, monkeypatch: pytest.MonkeyPatch, edit: Edit
) -> None:
    client = campaign.client(edit.role, raise_errors=False)
    headers = {"If-Match": client.get(edit.etag_url(records)).headers["etag"]} if edit.etag_url else {}
    before, rows_before, head_before = (
        _readback(campaign, records),
        row_counts(campaign.state),
        audit_head(campaign.state),
    )
    cleanup = edit.inject(monkeypatch, campaign)
    response = client.request(edit.method, edit.url(records), json=edit.body, headers=headers)
    monkeypatch.undo()
    if cleanup is not None:
        cleanup()
    after = _readback(campaign, records)
    problems = [] if response.status_code == 500 else [f"status {response.status_code}"]
    changed = [part for part in before if before[part] != after[part]]
    if changed:
        problems.append(f"changed: {changed}")
    if row_counts(campaign.state) != rows_before or audit_head(campaign.state) != head_before:
        problems.append("rows or audit events were added")
    if not chain_verifies(campaign.state):
        problems.append("the audit chain does not verify")
    figures.add(cases=1, failures=int(bool(problems)), data_lost=int(bool(changed)))
    assert not problems, f"{edit.name}: {problems}; {response.text[:200]}"


def _sweep_command(campaign: Campaign, monkeypatch: pytest.MonkeyPatch, *options: str) -> tuple[int, str]:
    monkeypatch.setenv("TRACEDESK_DATABASE_URL", campaign.settings.resolved_database_url)
    monkeypatch.setenv("TRACEDESK_DATA_DIR", str(campaign.settings.data_dir))
    monkeypatch.setenv("TRACEDESK_ENVIRONMENT", "test")
    result = CliRunner().invoke(cli_main, ["sweep", *options])
    return result.exit_code, result.output


def test_sweep_command_keeps_young_orphans_and_removes_old_ones(
    campaign: Campaign, box: int, figures: Figures, monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    """`tracedesk sweep`: a dry run removes nothing; the grace period protects files younger than it."""
    orphan = tmp_path / "orphan.bin"
    orphan.write_bytes(b"no row references these bytes")
    key = campaign.state.store.put_file(orphan).key
    path = campaign.state.store.path_for(key)
    incoming = campaign.settings.data_dir / "incoming" / "upload-left-by-a-crash"
    incoming.parent.mkdir(parents=True, exist_ok=True)
    incoming.write_bytes(b"half an upload")
    outcomes = {}
    outcomes["dry run exits 0"] = _sweep_command(campaign, monkeypatch, "--grace-hours", "0", "--dry-run")[0] == 0
    outcomes["dry run keeps the orphan"] = path.exists()
    outcomes["young orphan kept"] = _sweep_command(campaign, monkeypatch)[0] == 0 and path.exists()
    two_days_ago = time.time() - 48 * 3600
    for old in (path, incoming):
        os.utime(old, (two_days_ago, two_days_ago))
    code, output = _sweep_command(campaign, monkeypatch)
    outcomes["old orphan removed"] = code == 0 and not path.exists() and "removed 1 original" in output
    outcomes["stale incoming upload removed"] = not incoming.exists()
    outcomes["referenced files kept"] = missing_files(campaign.state) == []
    figures.add(cases=len(outcomes), failures=sum(not ok for ok in outcomes.values()))
    assert all(outcomes.values()), outcomes
