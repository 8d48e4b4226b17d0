"""Batch runs: a collection digitizing itself, sheet by sheet, as a background job that can be resumed.

Each sheet is analysed without locks (:mod:`~tracedesk.digitizing.batch_analysis`: register, trace each
expected pen, score) and then written in one transaction of its own (:mod:`~tracedesk.digitizing.batch_verdicts`:
calibration, traces, fits, the sheet's task and the verdict together), so a run stopped half-way keeps what
it finished and, resumed, goes on with the sheets still pending: no sheet is done twice and no task is made
twice. Sheets whose figures pass the thresholds become tasks submitted for review; the others wait for a
person in an open, unassigned task with the reason shown (on the task and on the run's items). The thresholds
and the fitted model are the collection's batch settings unless the request sends its own; the run records
which (``settings_from``).
"""

from __future__ import annotations

import json
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from tracedesk.archive.service import get_collection, get_sheet
from tracedesk.audit.service import Actor, record_event
from tracedesk.db import transaction
from tracedesk.digitizing.batch_analysis import NEEDS_PERSON, READY, SKIPPED, SheetOutcome, analyse_sheet
from tracedesk.digitizing.batch_schemas import (
    BatchItemRead,
    BatchRunCreate,
    BatchRunRead,
    BatchRunSettings,
    BatchRunSummary,
)
from tracedesk.digitizing.batch_verdicts import (
    FINISHED_SHEET_STATUSES,
    batch_actor,
    finish_item,
    held_reason,
    store_outcome,
)
from tracedesk.digitizing.chart_specs import get_chart_spec
from tracedesk.digitizing.detection import missing_time_zero_fields
from tracedesk.digitizing.sheet_image import load_sheet_image
from tracedesk.errors import AppError, Conflict, NotFound, Unprocessable
from tracedesk.jobs.context import JobContext
from tracedesk.jobs.registry import job_handler
from tracedesk.jobs.service import submit_job
from tracedesk.models import BatchRun, BatchRunItem, ChartSpec, Job, Sheet, Task, User
from tracedesk.models.base import utcnow
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.grid_spec import CircularChartSpec, grid_spec_from_dict
from tracedesk.web.state import AppState
from tracedesk.workflow.collection_settings import run_settings, settings_of

ITEM_STATUSES = ("pending", READY, NEEDS_PERSON, SKIPPED)
# A run whose job stopped in one of these states before the run finished can be resumed.
STOPPED_JOB_STATUSES = ("failed", "succeeded")


def _check_spec(spec: ChartSpec) -> None:
    """The spec must describe the printed chart fully enough to register a sheet without a click (422)."""
    if not spec.geometry:
        raise Unprocessable(f"chart spec {spec.id} has no printed geometry; batch runs register sheets from it")
    geometry = grid_spec_from_dict(json.loads(spec.geometry))
    if isinstance(geometry, CircularChartSpec):
        missing = missing_time_zero_fields(geometry)
        if missing:
            raise Unprocessable(
                f"chart spec {spec.id} is circular but does not give {', '.join(missing)}: "
                "without them time zero cannot be found on a sheet without a click"
            )


def _sheet_ids(session: Session, collection_id: int, selection: list[int] | None) -> list[int]:
    query = select(Sheet.id).where(Sheet.collection_id == collection_id, Sheet.status.not_in(FINISHED_SHEET_STATUSES))
    if selection is not None:
        query = query.where(Sheet.id.in_(selection))
    sheet_ids = list(session.scalars(query.order_by(Sheet.id)))
    if not sheet_ids:
        raise Unprocessable("no sheets to process in that collection or selection")
    return sheet_ids


def start_batch_run(state: AppState, collection_id: int, body: BatchRunCreate, *, actor: Actor) -> BatchRun:
    """Record the run and one pending item per sheet, then queue the job that works through them."""
    with transaction(state.writer) as session:
        get_collection(session, collection_id)
        spec = get_chart_spec(session, body.chart_spec_id)
        _check_spec(spec)
        workflow = settings_of(session, collection_id)
        if workflow.double_digitization:
            raise Unprocessable(
                "this collection uses double digitization (two technicians per sheet); a batch run cannot stand "
                "in for them"
            )
        sheet_ids = _sheet_ids(session, collection_id, body.sheet_ids)
        settings = run_settings(workflow, body)
        run = BatchRun(
            collection_id=collection_id,
            chart_spec_id=spec.id,
            created_by_id=actor.id,
            settings=settings.model_dump_json(),
        )
        session.add(run)
        session.flush()
        session.add_all(BatchRunItem(run_id=run.id, sheet_id=sheet_id) for sheet_id in sheet_ids)
        record_event(
            session,
            actor=actor,
            action="start_batch",
            entity_type="batch_run",
            entity_id=run.id,
            changes={
                "sheets": {"old": None, "new": len(sheet_ids)},
                "chart_spec": {"old": None, "new": spec.id},
                "settings_from": {"old": None, "new": settings.settings_from},
            },
        )
    _queue(state, run.id, actor=actor)
    return run


def _queue(state: AppState, run_id: int, *, actor: Actor) -> None:
    job = submit_job(state, "batch_run", {"run_id": run_id}, actor=actor)
    with transaction(state.writer) as session:
        stored = session.get(BatchRun, run_id)
        assert stored is not None
        stored.job_id = job.id


def resume_batch_run(state: AppState, run_id: int, *, actor: Actor) -> BatchRun:
    """Queue a new job for a run whose job stopped before the run finished (409 when there is nothing to do)."""
    with transaction(state.writer) as session:
        run = session.get(BatchRun, run_id, with_for_update=True)
        if run is None:
            raise NotFound(f"no batch run with id {run_id}")
        if run.status == "finished":
            raise Conflict(f"batch run {run_id} has finished; there is nothing to resume")
        job = session.get(Job, run.job_id) if run.job_id is not None else None
        if job is not None and job.status not in STOPPED_JOB_STATUSES:
            raise Conflict(f"batch run {run_id} is still {job.status} (job {job.id})")
        run.status = "queued"
        pending = item_counts(session, run_id)["pending"]
        record_event(
            session,
            actor=actor,
            action="resume_batch",
            entity_type="batch_run",
            entity_id=run.id,
            changes={"pending": {"old": None, "new": pending}},
        )
    _queue(state, run_id, actor=actor)
    return run


def _pending(session: Session, run_id: int) -> list[tuple[int, int]]:
    items = session.scalars(
        select(BatchRunItem)
        .where(BatchRunItem.run_id == run_id, BatchRunItem.status == "pending")
        .order_by(BatchRunItem.id)
    )
    return [(item.id, item.sheet_id) for item in items]


def _process(
    state: AppState, run_id: int, item_id: int, sheet_id: int, body: BatchRunCreate, spec: dict[str, Any]
) -> None:
    """One sheet: skip it if people hold it, else analyse it without locks and store the outcome."""
    with transaction(state.reader) as session:
        sheet = get_sheet(session, sheet_id).sheet
        derived_key, held = sheet.derived_key, held_reason(session, sheet)
    if held:
        outcome = SheetOutcome(SKIPPED, {}, held)
    else:
        outcome = analyse_sheet(load_sheet_image(state.store, derived_key), spec, body)
    try:
        _store(state, run_id, item_id, outcome, body)
    except (AppError, ScienceInputError) as error:  # e.g. a calibration the service refuses: a person decides
        reason = f"the automatic result could not be stored: {getattr(error, 'message', error)}"
        _store(state, run_id, item_id, SheetOutcome(NEEDS_PERSON, outcome.score, reason), body)


def _store(state: AppState, run_id: int, item_id: int, outcome: SheetOutcome, body: BatchRunCreate) -> None:
    with transaction(state.writer) as session:
        run = session.get(BatchRun, run_id)
        item = session.get(BatchRunItem, item_id)
        assert run is not None and item is not None
        if item.status != "pending":  # another worker finished it meanwhile
            return
        if outcome.status == SKIPPED:
            finish_item(session, item, outcome, actor=batch_actor(run_id), cause=f"batch run {run_id}, automatic")
        else:
            store_outcome(session, run, item, outcome, body)


@job_handler("batch_run")
def batch_run_job(context: JobContext) -> dict[str, Any]:
    """Work through the run's pending sheets (resumable: finished ones are skipped)."""
    state, run_id = context.state, int(context.params["run_id"])
    with transaction(state.writer) as session:
        run = session.get(BatchRun, run_id)
        if run is None:
            raise NotFound(f"no batch run with id {run_id}")
        run.status = "running"
        body = BatchRunSettings.model_validate_json(run.settings)
        spec = json.loads(get_chart_spec(session, run.chart_spec_id).geometry or "{}")
        pending = _pending(session, run_id)
    for done, (item_id, sheet_id) in enumerate(pending):
        context.progress(done / max(len(pending), 1), f"sheet {done + 1} of {len(pending)}")
        _process(state, run_id, item_id, sheet_id, body, spec)

    def finish(session: Session) -> dict[str, Any]:
        run = session.get(BatchRun, run_id)
        assert run is not None
        run.status, run.finished_at = "finished", utcnow()
        return {"run_id": run_id, "counts": item_counts(session, run_id)}

    return context.finish(finish)


def item_counts(session: Session, run_id: int) -> dict[str, int]:
    rows = session.execute(
        select(BatchRunItem.status, func.count()).where(BatchRunItem.run_id == run_id).group_by(BatchRunItem.status)
    )
    counts = dict.fromkeys(ITEM_STATUSES, 0)
    counts.update({status: int(count) for status, count in rows})
    return counts


def _run_status(session: Session, run: BatchRun) -> str:
    """The stored status, or ``"interrupted"`` when the run's job stopped before the run finished."""
    if run.status == "finished" or run.job_id is None:
        return run.status
    job = session.get(Job, run.job_id)
    return "interrupted" if job is not None and job.status in STOPPED_JOB_STATUSES else run.status


def _starter(session: Session, run: BatchRun) -> str | None:
    user = session.get(User, run.created_by_id) if run.created_by_id is not None else None
    return user.display_name if user is not None else None


def batch_runs_of_collection(session: Session, collection_id: int, *, limit: int = 200) -> list[BatchRunSummary]:
    """The collection's runs, newest first, with their counts (not their items)."""
    runs = session.scalars(
        select(BatchRun).where(BatchRun.collection_id == collection_id).order_by(BatchRun.id.desc()).limit(limit)
    )
    return [
        BatchRunSummary(
            id=run.id,
            status=_run_status(session, run),
            counts=item_counts(session, run.id),
            started_by=_starter(session, run),
            created_at=run.created_at,
            finished_at=run.finished_at,
        )
        for run in runs
    ]


def batch_run_read(session: Session, run_id: int) -> BatchRunRead:
    run = session.get(BatchRun, run_id)
    if run is None:
        raise NotFound(f"no batch run with id {run_id}")
    rows = session.execute(
        select(BatchRunItem, Task)
        .outerjoin(Task, Task.sheet_id == BatchRunItem.sheet_id)
        .where(BatchRunItem.run_id == run_id)
        .order_by(BatchRunItem.id)
    ).all()
    return BatchRunRead(
        id=run.id,
        collection_id=run.collection_id,
        chart_spec_id=run.chart_spec_id,
        status=_run_status(session, run),
        job_id=run.job_id,
        counts=item_counts(session, run_id),
        settings=json.loads(run.settings),
        started_by=_starter(session, run),
        items=[
            BatchItemRead(
                sheet_id=item.sheet_id,
                status=item.status,
                score=json.loads(item.score),
                reason=item.reason,
                finished_at=item.finished_at,
                task_id=task.id if task is not None else None,
                task_state=task.state if task is not None else None,
            )
            for item, task in rows
        ],
        created_at=run.created_at,
        finished_at=run.finished_at,
    )
