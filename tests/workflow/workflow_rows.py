"""Rows for service-level workflow tests, written straight into the database (no scans are decoded): a sheet with
a calibration and one trace by a given technician, and its task. Invented data."""

from __future__ import annotations

import itertools
import secrets

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.audit.service import SYSTEM
from tracedesk.models import Calibration, Collection, Sheet, SourceFile, Task, Trace, User
from tracedesk.workflow.schemas import TaskBulkCreate
from tracedesk.workflow.tasks import create_tasks

_SERIAL = itertools.count(1)


def user_named(session: Session, username: str) -> User:
    user = session.scalar(select(User).where(User.username == username))
    assert user is not None, username
    return user


def digitized_sheet(session: Session, *, technician: User) -> Sheet:
    """A ready sheet in a collection of its own, calibrated and traced by ``technician``."""
    serial = next(_SERIAL)
    collection = Collection(name=f"Machine {serial} {secrets.token_hex(4)}")
    source = SourceFile(sha256=secrets.token_hex(32), size_bytes=1, media_type="image/png", page_count=1)
    session.add_all([collection, source])
    session.flush()
    sheet = Sheet(
        collection_id=collection.id,
        source_file_id=source.id,
        filename=f"sheet-{serial}.png",
        width=640,
        height=400,
        derived_key=f"derived-{secrets.token_hex(8)}",
        status="ready",
    )
    session.add(sheet)
    session.flush()
    session.add(Calibration(sheet_id=sheet.id, kind="cartesian", spec="{}", report="{}", updated_by_id=technician.id))
    session.add(Trace(sheet_id=sheet.id, name="level", vertices="[[40.5, 360.5]]", created_by_id=technician.id))
    session.flush()
    return sheet


def task_for(session: Session, sheet: Sheet, *, technician: User, reviewer: User | None) -> Task:
    body = TaskBulkCreate(
        sheet_ids=[sheet.id], technician_id=technician.id, reviewer_id=reviewer.id if reviewer else None
    )
    created, _ = create_tasks(session, sheet.collection_id, body, actor=SYSTEM)
    return created[0]
