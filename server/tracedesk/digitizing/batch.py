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

from sqlalchemy import ColumnElement, and_, func, not_, or_, select
from sqlalchemy.orm import Session

from tracedesk.archive.service import decode_cursor, encode_cursor, get_collection, get_sheet
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
    return _counts_of_runs(session, [run_id])[run_id]


def _shown_status(run_status: str, job_status: str | None) -> str:
    """The stored status, or ``"interrupted"`` when the run's job stopped before the run finished."""
    if run_status != "finished" and job_status in STOPPED_JOB_STATUSES:
        return "interrupted"
    return run_status


def _run_status(session: Session, run: BatchRun) -> str:
    job = session.get(Job, run.job_id) if run.job_id is not None else None
    return _shown_status(run.status, job.status if job is not None else None)


def _status_condition(status: str) -> ColumnElement[bool]:
    """SQL for "the run shows ``status``" (as :func:`_shown_status` decides), on runs outer-joined to their job."""
    stopped = Job.status.in_(STOPPED_JOB_STATUSES)
    if status == "interrupted":
        return and_(BatchRun.status != "finished", stopped)
    if status == "finished":
        return BatchRun.status == "finished"
    return and_(BatchRun.status == status, or_(Job.id.is_(None), not_(stopped)))


def _starter(session: Session, run: BatchRun) -> str | None:
    user = session.get(User, run.created_by_id) if run.created_by_id is not None else None
    return user.display_name if user is not None else None


def _counts_of_runs(session: Session, run_ids: list[int]) -> dict[int, dict[str, int]]:
    """:func:`item_counts` of many runs in one query (a page of runs)."""
    counts = {run_id: dict.fromkeys(ITEM_STATUSES, 0) for run_id in run_ids}
    rows = session.execute(
        select(BatchRunItem.run_id, BatchRunItem.status, func.count())
        .where(BatchRunItem.run_id.in_(run_ids))
        .group_by(BatchRunItem.run_id, BatchRunItem.status)
    )
    for run_id, status, count in rows:
        counts[run_id][status] = int(count)
    return counts


def list_batch_runs(
    session: Session, collection_id: int, *, status: str | None = None, limit: int = 50, cursor: str | None = None
) -> tuple[list[BatchRunSummary], str | None]:
    """A page of the collection's runs, newest first, with their counts (not their items), using keyset
    pagination (``cursor``: the last run seen; the next page holds older runs). ``status`` keeps the runs
    showing that status, ``"interrupted"`` included."""
    query = (
        select(BatchRun, Job.status)
        .outerjoin(Job, Job.id == BatchRun.job_id)
        .where(BatchRun.collection_id == collection_id)
    )
    if status:
        query = query.where(_status_condition(status))
    if cursor:
        query = query.where(BatchRun.id < decode_cursor(cursor))
    rows = session.execute(query.order_by(BatchRun.id.desc()).limit(limit + 1)).all()
    next_cursor = encode_cursor(rows[limit - 1][0].id) if len(rows) > limit else None
    rows = rows[:limit]
    counts = _counts_of_runs(session, [run.id for run, _ in rows])
    summaries = [
        BatchRunSummary(
            id=run.id,
            chart_spec_id=run.chart_spec_id,
            status=_shown_status(run.status, job_status),
            job_id=run.job_id,
            counts=counts[run.id],
            started_by=_starter(session, run),
            created_at=run.created_at,
            finished_at=run.finished_at,
        )
        for run, job_status in rows
    ]
    return summaries, next_cursor


def batch_runs_of_collection(session: Session, collection_id: int, *, limit: int = 200) -> list[BatchRunSummary]:
    """The collection's latest runs, newest first, with their counts (not their items)."""
    return list_batch_runs(session, collection_id, limit=limit)[0]


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
