"""A batch run's verdict on one sheet, stored in one transaction: the automatic work and the sheet's task.

The work is written by the run itself (:func:`batch_actor`: no user id, named after the run), so the audit
trail marks it automatic. The person who started the run counts as its author for the four-eyes rule
(``workflow.authorship``): another reviewer signs it. Sheets whose figures pass the thresholds become tasks
submitted for review; the others get an open, unassigned task whose reason says why a person must look.

A sheet people already hold (a task someone created, or a calibration or traces made without a task) is
left exactly as it was, and the verdict says so. An open, unassigned task of an earlier batch run on a
sheet without work is taken over, so running a collection again does not pile up tasks. The sheet row is
locked first, so two runs over one sheet take turns.
"""

from __future__ import annotations

import json
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor, record_event
from tracedesk.digitizing import calibrations, fits, traces
from tracedesk.digitizing.batch_analysis import NEEDS_PERSON, READY, SKIPPED, SheetOutcome
from tracedesk.digitizing.batch_schemas import BatchRunCreate
from tracedesk.digitizing.service import mark_work_started
from tracedesk.errors import AppError, NotFound, Unprocessable
from tracedesk.models import BatchRun, BatchRunItem, Sheet, Task, Trace, User
from tracedesk.models.base import utcnow
from tracedesk.science.errors import ScienceInputError
from tracedesk.workflow.authorship import batch_actor_name
from tracedesk.workflow.schemas import TaskBulkCreate
from tracedesk.workflow.tasks import create_tasks, flag_for_attention, sheet_has_work, submit_automatic

# Approved and withdrawn sheets are finished: a batch never touches them.
FINISHED_SHEET_STATUSES = ("approved", "withdrawn")


def batch_actor(run_id: int) -> Actor:
    """Who writes a run's automatic results: the run itself, not a person."""
    return Actor(id=None, name=batch_actor_name(run_id))


def task_of_sheet(session: Session, sheet_id: int) -> Task | None:
    return session.scalar(select(Task).where(Task.sheet_id == sheet_id))


def _is_automatic_waiting(task: Task) -> bool:
    """A task made by a batch (no human creator) that nobody has taken up: open and unassigned."""
    return (
        task.created_by_id is None
        and task.state == "open"
        and task.technician_id is None
        and task.second_technician_id is None
    )


def _task_words(session: Session, task: Task) -> str:
    words = task.state.replace("_", " ")
    person = session.get(User, task.technician_id) if task.technician_id is not None else None
    return f"{words}, assigned to {person.display_name}" if person else words


def held_reason(session: Session, sheet: Sheet) -> str:
    """Why a batch must leave the sheet alone (empty when it may digitize it)."""
    if sheet.status in FINISHED_SHEET_STATUSES:
        return f"the sheet is {sheet.status}; the batch left it as it was"
    task = task_of_sheet(session, sheet.id)
    if task is not None and not _is_automatic_waiting(task):
        return f"the sheet already has task {task.id} ({_task_words(session, task)}); the batch left it as it was"
    if sheet_has_work(session, sheet.id):
        return "the sheet already has a calibration or traces; the batch left them as they were"
    return ""


def _fit(session: Session, trace: Trace, body: BatchRunCreate, outcome: SheetOutcome, actor: Actor, cause: str) -> None:
    options = {key: value for key, value in (body.fit or {}).items() if key != "family"}
    session.flush()
    try:
        fit = fits.create_fit(session, trace, str((body.fit or {}).get("family")), options, actor=actor, reason=cause)
    except (ScienceInputError, Unprocessable) as error:
        outcome.status, outcome.reason = NEEDS_PERSON, f"fit of {trace.name} failed: {error}"
        return
    r_squared = json.loads(fit.result)["stats"].get("r_squared")
    outcome.score.setdefault("fits", []).append({"trace": trace.name, "r_squared": r_squared})
    floor = body.thresholds.min_r_squared
    if floor is not None and (r_squared is None or r_squared < floor) and outcome.status == READY:
        outcome.status, outcome.reason = NEEDS_PERSON, f"fit of {trace.name}: R² {r_squared} is below {floor}"


def _store_work(
    session: Session, sheet: Sheet, outcome: SheetOutcome, body: BatchRunCreate, actor: Actor, cause: str
) -> None:
    """Calibration, traces and fits of a registered sheet, each audited as the run's automatic work."""
    if outcome.detection is None:
        return
    calibrations.put_calibration(
        session,
        sheet,
        outcome.detection["calibration"],
        actor=actor,
        reason=f"{cause} (confidence {outcome.detection['confidence']:.2f})",
        origin="automatic",
    )
    for request, result in outcome.traces:
        trace = traces.store_auto_trace(session, sheet, request, result, actor=actor, reason=cause)
        if body.fit is not None:
            _fit(session, trace, body, outcome, actor, cause)
    mark_work_started(session, sheet, actor=actor)


def _settle_task(session: Session, sheet: Sheet, outcome: SheetOutcome, actor: Actor, cause: str) -> Task:
    """The sheet's task: submitted for review when the figures passed, else open with the reason."""
    task = task_of_sheet(session, sheet.id)
    if task is None:
        created, skipped = create_tasks(session, sheet.collection_id, TaskBulkCreate(sheet_ids=[sheet.id]), actor=actor)
        if not created:
            raise Unprocessable(f"no task could be made for sheet {sheet.id}: {skipped[0][1]}")
        task = created[0]
    if outcome.status == READY:
        try:
            return submit_automatic(session, task, actor=actor, reason=f"{cause}: every figure passed the thresholds")
        except AppError as error:
            outcome.status, outcome.reason = NEEDS_PERSON, f"not submitted for review: {error.message}"
    return flag_for_attention(session, task, actor=actor, reason=f"{cause}: {outcome.reason}")


def store_outcome(
    session: Session, run: BatchRun, item: BatchRunItem, outcome: SheetOutcome, body: BatchRunCreate
) -> None:
    """Write one sheet's outcome, its task and the item's verdict (the caller's transaction)."""
    actor, cause = batch_actor(run.id), f"batch run {run.id}, automatic"
    sheet = session.get(Sheet, item.sheet_id, with_for_update=True)
    if sheet is None:
        raise NotFound(f"sheet {item.sheet_id} is gone")
    held = held_reason(session, sheet)
    if held:
        outcome = SheetOutcome(SKIPPED, outcome.score, held)
    else:
        _store_work(session, sheet, outcome, body, actor, cause)
        _settle_task(session, sheet, outcome, actor, cause)
    finish_item(session, item, outcome, actor=actor, cause=cause)


def finish_item(session: Session, item: BatchRunItem, outcome: SheetOutcome, *, actor: Actor, cause: str) -> None:
    """Record the verdict on the run's item and in the sheet's audit trail."""
    item.status, item.reason, item.finished_at = outcome.status, outcome.reason, utcnow()
    item.score = json.dumps(outcome.score)
    changes: dict[str, Any] = {"verdict": {"old": None, "new": outcome.status}}
    record_event(
        session,
        actor=actor,
        action="batch_verdict",
        entity_type="sheet",
        entity_id=item.sheet_id,
        changes=changes,
        reason=outcome.reason or cause,
    )
