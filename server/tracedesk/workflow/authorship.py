"""Who authored a sheet's digitization (the four-eyes rule: an author can never approve it).

An author is anyone who created or changed the sheet's calibration, traces or fits, as the audit trail and the
rows' own ``created_by``/``updated_by`` columns say. One kind of change is not authorship: a reviewer's decision,
in double digitization, to keep one technician's traces withdraws the other's (see ``double.py``); those
withdrawals carry ``KEEP_DECISION_PREFIX`` in their reason. Reading is not authorship either: an export of a
trace or fit is audited on that entity (``exports.recording``) but changes nothing.

Automatic work is written by a batch run (an audit actor with no user id, named by :func:`batch_actor_name`).
The person who started that run chose to have it written, so they count as an author too: the link is the run's
item for the sheet (``batch_run_items``) confirmed by the run's own events in the sheet's record, so a run that
wrote nothing on the sheet (a refused registration, a sheet people held) makes nobody an author.
"""

from __future__ import annotations

from dataclasses import dataclass

from sqlalchemy import and_, not_, select
from sqlalchemy.orm import Session

from tracedesk.models import AuditEvent, BatchRun, BatchRunItem, Calibration, Fit, Trace, User
from tracedesk.workflow.record_events import record_entity_condition

KEEP_DECISION_PREFIX = "double digitization: reviewer kept "
# Audited actions on the record's entities that change nothing.
READING_ACTIONS = ("export",)


def batch_actor_name(run_id: int) -> str:
    """The audit actor name under which batch run ``run_id`` writes its automatic results."""
    return f"batch run {run_id} (automatic)"


@dataclass(frozen=True)
class BatchAuthorship:
    """A batch run that wrote part of a sheet's digitization, and who started it (``None``: a deleted account)."""

    run_id: int
    started_by_id: int | None
    started_by: str | None

    @property
    def actor_name(self) -> str:
        return batch_actor_name(self.run_id)


def _row_authors(session: Session, sheet_id: int) -> set[int]:
    ids: set[int | None] = set(session.scalars(select(Trace.created_by_id).where(Trace.sheet_id == sheet_id)))
    ids |= set(
        session.scalars(
            select(Fit.created_by_id).join(Trace, Trace.id == Fit.trace_id).where(Trace.sheet_id == sheet_id)
        )
    )
    ids |= set(session.scalars(select(Calibration.updated_by_id).where(Calibration.sheet_id == sheet_id)))
    return {i for i in ids if i is not None}


def _record_actors(session: Session, sheet_id: int, *, people: bool) -> list[tuple[int | None, str]]:
    """Distinct (actor id, name) of the sheet's record events: people's, or (``people=False``) machines'."""
    keep_decision = and_(AuditEvent.action == "withdraw", AuditEvent.reason.like(KEEP_DECISION_PREFIX + "%"))
    who = AuditEvent.actor_id.is_not(None) if people else AuditEvent.actor_id.is_(None)
    rows = session.execute(
        select(AuditEvent.actor_id, AuditEvent.actor_name)
        .where(
            record_entity_condition(session, sheet_id),
            who,
            not_(keep_decision),
            AuditEvent.action.not_in(READING_ACTIONS),
        )
        .distinct()
    ).all()
    return [(actor_id, str(name)) for actor_id, name in rows]


def human_authors(session: Session, sheet_id: int) -> dict[int, str]:
    """User ids of the people who wrote the sheet's digitization themselves, with their audit-trail name."""
    authors = {int(actor_id): name for actor_id, name in _record_actors(session, sheet_id, people=True) if actor_id}
    for user_id in _row_authors(session, sheet_id):
        authors.setdefault(user_id, f"user {user_id}")
    return authors


def batch_authorships(session: Session, sheet_id: int) -> list[BatchAuthorship]:
    """The batch runs that wrote part of the sheet's digitization, oldest first."""
    machine_names = {name for _, name in _record_actors(session, sheet_id, people=False)}
    rows = session.execute(
        select(BatchRun.id, BatchRun.created_by_id, User.display_name)
        .join(BatchRunItem, BatchRunItem.run_id == BatchRun.id)
        .outerjoin(User, User.id == BatchRun.created_by_id)
        .where(BatchRunItem.sheet_id == sheet_id)
        .order_by(BatchRun.id)
    ).all()
    return [
        BatchAuthorship(int(run_id), starter_id, name)
        for run_id, starter_id, name in rows
        if batch_actor_name(int(run_id)) in machine_names
    ]


def digitization_authors(session: Session, sheet_id: int) -> dict[int, str]:
    """User ids of the sheet's digitization authors, with the name the audit trail knows them by: the people who
    wrote it and the people who started a batch run that wrote part of it."""
    authors = human_authors(session, sheet_id)
    for run in batch_authorships(session, sheet_id):
        if run.started_by_id is not None:
            authors.setdefault(run.started_by_id, run.started_by or f"user {run.started_by_id}")
    return authors
