"""Loading the demo archive: accounts, demo collections, digitizing and review work, audited as their people's;
loading twice changes nothing; the automatic traces agree with the known truth; removal leaves no demo rows or
files while the audit trail keeps its events and still verifies.

The sheets are drawn at 50 dpi here (the product draws them at 200 dpi) to keep the tests quick.
"""

from __future__ import annotations

import numpy as np
import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from tracedesk.audit.service import count_events, verify_chain
from tracedesk.db import transaction
from tracedesk.demo.loader import first_run_wants_demo, load_demo
from tracedesk.demo.people import DEMO_USERNAMES
from tracedesk.demo.removal import remove_demo
from tracedesk.demo.scenarios import demo_sheet_by_filename
from tracedesk.digitizing.traces import samples_of
from tracedesk.errors import Conflict
from tracedesk.models import (
    AuditEvent,
    Calibration,
    Collection,
    Fit,
    ReviewComment,
    Sheet,
    Signature,
    SourceFile,
    Task,
    Trace,
    User,
)
from tracedesk.web.state import AppState

TEST_DPI = 50.0
# Automatic traces against the truth, RMS as a fraction of the chart's full scale (in decades on the log plot).
# Measured at 50 dpi: circular chart 0.11 %, strip chart pens 0.13 % and 0.09 %, decay plot 0.11 % (0.8 % of the
# value); at the product's 200 dpi: 0.04 %, 0.02 %, 0.02 % and 0.01 %.
AUTO_TRACE_RMS = 0.003


def _count(session: Session, model: type) -> int:
    return int(session.scalar(select(func.count()).select_from(model)) or 0)


def _rms_against_truth(session: Session, trace: Trace, sheet: Sheet) -> float:
    plan = demo_sheet_by_filename(sheet.filename)
    assert plan is not None
    pen = plan.pen(trace.name)
    values, _, _ = samples_of(session, trace)
    x, y = values[:, 0], values[:, 1]
    keep = np.isfinite(y) & (x >= pen.span[0]) & (x <= pen.span[1])
    truth = pen.signal(x[keep])
    if plan.log_scale:
        decades = np.log10(y[keep]) - np.log10(truth)
        return float(np.sqrt(np.mean(decades**2))) / plan.full_scale  # full scale in decades
    return float(np.sqrt(np.mean((y[keep] - truth) ** 2))) / plan.full_scale


def test_demo_loads_every_capability_once_and_its_auto_traces_match_the_truth(state: AppState) -> None:
    assert first_run_wants_demo(state)
    summary = load_demo(state, dpi=TEST_DPI)
    assert summary.notes == []
    assert {account.username for account in summary.accounts} == DEMO_USERNAMES
    assert all(account.password for account in summary.accounts)
    assert {account.role for account in summary.accounts} == {"admin", "technician", "reviewer"}
    with transaction(state.reader) as session:
        collections = list(session.scalars(select(Collection)))
        assert len(collections) == 3 and all(collection.is_demo for collection in collections)
        assert _count(session, Sheet) == 8
        assert {task.state for task in session.scalars(select(Task))} == {
            "open",
            "in_progress",
            "submitted",
            "returned",
            "approved",
            "withdrawn",
        }
        comment = session.scalars(select(ReviewComment)).one()
        assert comment.u is not None and comment.v is not None  # pinned to the scan
        returned = session.scalars(select(Task).where(Task.state == "returned")).one()
        assert comment.task_id == returned.id
        signature = session.scalars(select(Signature)).one()
        approved = session.get(Task, signature.task_id)
        assert approved is not None and approved.state == "approved"
        assert session.get(Sheet, approved.sheet_id).status == "approved"  # type: ignore[union-attr]
        assert _count(session, Calibration) == 6 and _count(session, Fit) == 5
        # Work is audited as its people's own, never as the system.
        demo_ids = set(session.scalars(select(User.id).where(User.username.in_(DEMO_USERNAMES))))
        actors = set(
            session.scalars(
                select(AuditEvent.actor_id).where(
                    AuditEvent.entity_type.in_(["calibration", "trace", "fit", "task", "signature", "review_comment"])
                )
            )
        )
        assert actors and actors <= demo_ids
        # End to end: every automatic trace agrees with the function its pen wrote.
        auto = list(session.scalars(select(Trace).where(Trace.origin == "auto")))
        assert len(auto) == 5
        for trace in auto:
            sheet = session.get(Sheet, trace.sheet_id)
            assert sheet is not None
            assert _rms_against_truth(session, trace, sheet) < AUTO_TRACE_RMS, (sheet.filename, trace.name)
        events = count_events(session)
    again = load_demo(state, dpi=TEST_DPI)
    assert not again.changed
    assert all(account.password is None for account in again.accounts)
    with transaction(state.reader) as session:
        assert count_events(session) == events
        assert _count(session, Sheet) == 8 and _count(session, Trace) == 6 and _count(session, Task) == 8
        assert verify_chain(session).ok
    assert not first_run_wants_demo(state)


def test_removal_leaves_no_demo_rows_or_files_and_keeps_real_data(state: AppState) -> None:
    from tracedesk.archive.schemas import CollectionCreate
    from tracedesk.archive.service import create_collection
    from tracedesk.audit.service import SYSTEM

    with transaction(state.writer) as session:
        create_collection(session, CollectionCreate(name="Real charts, box 1"), actor=SYSTEM)
    load_demo(state, dpi=TEST_DPI, only={"level-w10", "level-w11", "pressure-d16"})
    with transaction(state.reader) as session:
        before = count_events(session)
        assert _count(session, Sheet) == 3 and _count(session, Signature) == 1
    assert list(state.store.iter_keys()) and list(state.store.iter_derived())

    removed = remove_demo(state)

    assert removed.removed["sheet"] == 3 and removed.removed["collection"] == 3
    assert removed.files_removed == 6  # three originals, three derived folders
    assert sorted(removed.accounts_disabled) == sorted(DEMO_USERNAMES)
    with transaction(state.reader) as session:
        for model in (Sheet, SourceFile, Calibration, Trace, Fit, Task, ReviewComment, Signature):
            assert _count(session, model) == 0, model.__name__
        assert [c.name for c in session.scalars(select(Collection))] == ["Real charts, box 1"]
        assert not any(
            user.is_active for user in session.scalars(select(User).where(User.username.in_(DEMO_USERNAMES)))
        )
        assert count_events(session) > before  # the trail keeps the demo's events and adds the removals
        assert verify_chain(session).ok
        removal_events = session.scalars(select(AuditEvent).where(AuditEvent.action == "delete")).all()
        assert {event.entity_type for event in removal_events} >= {"sheet", "trace", "fit", "calibration", "task"}
    assert list(state.store.iter_keys()) == []
    assert [entry.name for entry in state.store.iter_derived()] == []
    assert not first_run_wants_demo(state)  # removed once: `serve --demo` does not bring it back


def test_a_real_collection_with_a_demo_name_stops_the_demo(state: AppState) -> None:
    from tracedesk.archive.schemas import CollectionCreate
    from tracedesk.archive.service import create_collection
    from tracedesk.audit.service import SYSTEM
    from tracedesk.demo.scenarios import COLLECTIONS

    with transaction(state.writer) as session:
        create_collection(session, CollectionCreate(name=COLLECTIONS[0].name), actor=SYSTEM)
    with pytest.raises(Conflict, match="real collection"):
        load_demo(state, dpi=TEST_DPI, only=set())
