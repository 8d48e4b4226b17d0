"""The guided first run: a short checklist on the home page, each step ticked from what the archive holds.

Only the team's own work counts (demo collections are left out), so the list keeps guiding after the demo is
loaded; the demo itself is offered beside it as a tour.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from sqlalchemy import ColumnElement, Select, func, select
from sqlalchemy.orm import Session

from tracedesk.demo.people import DEMO_USERNAMES
from tracedesk.models import Calibration, Collection, Fit, Sheet, Signature, Task, Trace, User


@dataclass(frozen=True)
class ChecklistStep:
    """One step: what to do, why, whether it is done (and how many), and where to go next."""

    key: str
    title: str
    detail: str
    done: bool
    count: int
    link: str
    link_label: str


def _real_sheets() -> Select[Any]:
    """Ids of the sheets of collections that are not demo collections."""
    return select(Sheet.id).join(Collection, Collection.id == Sheet.collection_id).where(Collection.is_demo.is_(False))


def _count(session: Session, query: Select[Any]) -> int:
    return int(session.scalar(query) or 0)


def _first_sheet(session: Session, *conditions: ColumnElement[bool]) -> int | None:
    found = session.scalar(_real_sheets().where(*conditions).order_by(Sheet.id).limit(1))
    return int(found) if found is not None else None


def _counts(session: Session) -> dict[str, int]:
    real = _real_sheets()
    return {
        "collection": _count(
            session, select(func.count()).select_from(Collection).where(Collection.is_demo.is_(False))
        ),
        "sheet": _count(session, select(func.count()).where(Sheet.id.in_(real))),
        "calibration": _count(session, select(func.count()).where(Calibration.sheet_id.in_(real))),
        "trace": _count(
            session, select(func.count()).where(Trace.sheet_id.in_(real), Trace.withdrawn_reason.is_(None))
        ),
        "fit": _count(
            session,
            select(func.count()).select_from(Fit).join(Trace, Trace.id == Fit.trace_id).where(Trace.sheet_id.in_(real)),
        ),
        "review": _count(session, select(func.count()).where(Task.sheet_id.in_(real), Task.state == "approved"))
        + _count(session, select(func.count()).where(Signature.sheet_id.in_(real))),
        "people": _count(
            session, select(func.count()).where(User.is_active.is_(True), User.username.not_in(DEMO_USERNAMES))
        ),
    }


def _workbench(sheet_id: int | None, fallback: str) -> str:
    return f"/sheets/{sheet_id}/workbench" if sheet_id is not None else fallback


def first_run_checklist(session: Session, *, is_admin: bool) -> list[ChecklistStep]:
    """The steps from an empty archive to a signed, digitized sheet, each ticked from the data."""
    counts = _counts(session)
    first_collection = session.scalar(
        select(Collection.id).where(Collection.is_demo.is_(False)).order_by(Collection.id).limit(1)
    )
    uncalibrated = _first_sheet(session, Sheet.id.not_in(select(Calibration.sheet_id)))
    calibrated = _first_sheet(session, Sheet.id.in_(select(Calibration.sheet_id)))
    collection_link = f"/collections/{first_collection}" if first_collection else "/collections"
    steps = [
        ChecklistStep(
            "collection",
            "Open a collection for one box or series of charts",
            "A collection keeps the sheets of one site, instrument or period together.",
            counts["collection"] > 0,
            counts["collection"],
            "/collections",
            "Collections",
        ),
        ChecklistStep(
            "sheet",
            "Upload a few scans",
            "Drop PNG, JPEG, TIFF or PDF files on the collection page; each page becomes a sheet.",
            counts["sheet"] > 0,
            counts["sheet"],
            collection_link,
            "Upload",
        ),
        ChecklistStep(
            "calibration",
            "Tie a sheet to its printed scales",
            "Click a few grid points of known value (or the rings of a circular chart) to calibrate it.",
            counts["calibration"] > 0,
            counts["calibration"],
            _workbench(uncalibrated, collection_link),
            "Calibrate",
        ),
        ChecklistStep(
            "trace",
            "Trace a pen line",
            "Click along the pen, or let Tracedesk follow a pen colour across the calibrated area.",
            counts["trace"] > 0,
            counts["trace"],
            _workbench(calibrated, collection_link),
            "Trace",
        ),
        ChecklistStep(
            "fit",
            "Fit an equation to a trace",
            "Compare candidate models and keep one, with its uncertainty and the range it holds for.",
            counts["fit"] > 0,
            counts["fit"],
            _workbench(calibrated, collection_link),
            "Fit",
        ),
        ChecklistStep(
            "review",
            "Have a colleague review and sign it",
            "Submit the sheet; a reviewer checks it, comments on the scan and signs it with a password.",
            counts["review"] > 0,
            counts["review"],
            collection_link,
            "Review",
        ),
    ]
    if is_admin:
        steps.insert(
            0,
            ChecklistStep(
                "people",
                "Add the people you work with",
                "Give each colleague an account with one role: technician, reviewer or viewer.",
                counts["people"] > 1,
                counts["people"],
                "/admin/users",
                "People",
            ),
        )
    return steps
