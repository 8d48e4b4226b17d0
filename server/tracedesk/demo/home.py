"""What the home page shows: the first-run checklist, and (when loaded) a tour of the demo archive with its
digitized values beside the known truth."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from tracedesk.demo.comparison import truth_comparisons
from tracedesk.demo.first_run import first_run_checklist
from tracedesk.demo.people import DEMO_PEOPLE
from tracedesk.demo.scenarios import demo_sheet_by_filename
from tracedesk.models import Collection, Sheet

# Tour stops, in reading order: which demo sheet shows what.
TOUR = (
    ("approved", "A weekly circular chart, traced automatically through its pen arcs, fitted and signed"),
    ("returned", "The next week, traced by hand and returned by the reviewer with a comment pinned on the scan"),
    ("submitted", "Daily strip charts with two crossing pens, traced and waiting for review"),
    ("open", "An untouched chart: calibrate and trace it yourself, then compare with the truth below"),
)


@dataclass(frozen=True)
class TourStop:
    label: str
    sheet_id: int
    filename: str


def _demo_collections(session: Session) -> list[tuple[int, str, int]]:
    rows = session.execute(
        select(Collection.id, Collection.name, func.count(Sheet.id))
        .outerjoin(Sheet, Sheet.collection_id == Collection.id)
        .where(Collection.is_demo.is_(True))
        .group_by(Collection.id, Collection.name)
        .order_by(Collection.name)
    ).all()
    return [(int(row[0]), str(row[1]), int(row[2])) for row in rows]


def _tour(session: Session) -> list[TourStop]:
    sheets = session.execute(
        select(Sheet.id, Sheet.filename)
        .join(Collection, Collection.id == Sheet.collection_id)
        .where(Collection.is_demo.is_(True))
        .order_by(Sheet.id)
    ).all()
    first_by_state: dict[str, tuple[int, str]] = {}
    for sheet_id, filename in sheets:
        plan = demo_sheet_by_filename(filename)
        if plan is not None:
            first_by_state.setdefault(plan.workflow, (int(sheet_id), str(filename)))
    return [TourStop(label, *first_by_state[state]) for state, label in TOUR if state in first_by_state]


def home_context(session: Session, *, is_admin: bool) -> dict[str, Any]:
    """Template values of the home page."""
    steps = first_run_checklist(session, is_admin=is_admin)
    collections = _demo_collections(session)
    return {
        "steps": steps,
        "steps_done": sum(step.done for step in steps),
        "next_step": next((step for step in steps if not step.done), None),
        "demo_collections": collections,
        "tour": _tour(session) if collections else [],
        "comparisons": truth_comparisons(session) if collections else [],
        "demo_people": DEMO_PEOPLE,
    }
