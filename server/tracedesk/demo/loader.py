"""Loading the demo archive: accounts, demo collections, rendered sheets uploaded through the archive's ingest,
then calibrations, traces, fits and (when the workflow feature is present) tasks, reviews and signatures.

Loading is idempotent: whatever exists is kept and only what is missing is made, so a second run changes
nothing and an interrupted run is finished by the next one.
"""

from __future__ import annotations

import tempfile
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path

from PIL import Image
from sqlalchemy import func, select

from tracedesk.archive.ingest import ReceivedFile, ingest_received
from tracedesk.archive.schemas import CollectionCreate, SheetUpdate
from tracedesk.archive.service import create_collection, update_sheet
from tracedesk.audit.service import SYSTEM, Actor
from tracedesk.db import transaction
from tracedesk.demo.archive_events import demo_was_removed, record_demo_event
from tracedesk.demo.digitize import LazyRender, WorkLog, digitize_sheet
from tracedesk.demo.people import DemoAccount, ensure_demo_people
from tracedesk.demo.scenarios import COLLECTIONS, DEMO_DPI, DemoCollection, DemoSheet, demo_sheets
from tracedesk.demo.truth import RenderedSheet
from tracedesk.demo.workflow_plan import ensure_task, finish_task
from tracedesk.errors import Conflict
from tracedesk.models import Collection, Sheet
from tracedesk.storage import sha256_of_file
from tracedesk.web.state import AppState

ProgressCallback = Callable[[str], None]
JPEG_QUALITY = 90


@dataclass
class DemoSummary:
    """What a load did: the accounts (passwords only when generated now), collections, sheets and notes."""

    accounts: list[DemoAccount]
    collections: list[str]
    sheets_added: int = 0
    records_added: int = 0
    notes: list[str] = field(default_factory=list)

    @property
    def changed(self) -> bool:
        """False when the demo was complete already and nothing was added."""
        new_accounts = any(account.password for account in self.accounts)
        return bool(self.sheets_added or self.records_added or new_accounts)


@dataclass(frozen=True)
class DemoPeople:
    """The demo accounts as actors by scenario key, and the passwords generated in this run (by user name)."""

    actors: dict[str, Actor]
    passwords: dict[str, str]


def _silent(_: str) -> None:
    return None


def _collection_values(spec: DemoCollection) -> CollectionCreate:
    return CollectionCreate(
        name=spec.name,
        description=spec.description,
        site=spec.site,
        instrument=spec.instrument,
        period_start=spec.period_start,
        period_end=spec.period_end,
        notes=spec.notes,
    )


def ensure_collections(state: AppState, actor: Actor) -> tuple[dict[str, int], int]:
    """The demo collections by key (created when missing) and how many were created.

    Raises Conflict when a real (non-demo) collection has a demo collection's name: the demo never mixes
    with real data.
    """
    ids: dict[str, int] = {}
    created = 0
    with transaction(state.writer) as session:
        for spec in COLLECTIONS:
            found = session.scalar(select(Collection).where(func.lower(Collection.name) == spec.name.lower()))
            if found is not None and not found.is_demo:
                raise Conflict(f"a real collection is named {spec.name!r}; rename it before loading the demo")
            if found is None:
                found = create_collection(session, _collection_values(spec), actor=actor, is_demo=True)
                created += 1
            ids[spec.key] = found.id
    return ids, created


def _existing_sheet(state: AppState, collection_id: int, filename: str) -> Sheet | None:
    with transaction(state.reader) as session:
        sheet = session.scalar(
            select(Sheet).where(Sheet.collection_id == collection_id, Sheet.filename == filename).limit(1)
        )
        if sheet is not None:
            session.expunge(sheet)
        return sheet


def _metadata(plan: DemoSheet, rendered: RenderedSheet) -> SheetUpdate:
    pens = "; ".join(f"{pen.name} ({pen.colour}) = {pen.signal.formula()} [{pen.unit}]" for pen in rendered.truth.pens)
    notes = (
        "Demo sheet: an invented record drawn by Tracedesk, not a real one. "
        f"Known truth (x in {plan.x_unit} from the chart's start): {pens}. "
        "The home page compares the digitized values with this truth."
    )
    return SheetUpdate(
        source_ref=plan.source_ref,
        recorded_from=plan.recorded_from,
        recorded_to=plan.recorded_to,
        station=plan.station,
        notes=notes,
        tags=list(plan.tags),
    )


def _upload(state: AppState, plan: DemoSheet, collection_id: int, rendered: RenderedSheet, actor: Actor) -> int:
    """Write the scan as a JPEG, as a scanner would, and send it through the archive's ingest."""
    with tempfile.TemporaryDirectory(prefix="tracedesk-demo-") as folder:
        path = Path(folder) / plan.filename
        dpi = rendered.truth.dpi
        Image.fromarray(rendered.image).save(path, format="JPEG", quality=JPEG_QUALITY, subsampling=0, dpi=(dpi, dpi))
        received = ReceivedFile(
            path=path,
            filename=plan.filename,
            media_type="image/jpeg",
            sha256=sha256_of_file(path),
            size=path.stat().st_size,
        )
        try:
            sheet_id = ingest_received(state, collection_id, actor, received)[0].sheet.id
        except Conflict as error:  # the same bytes are in the collection under another name
            sheet_id = int((error.detail or {})["existing_sheet_id"])
    with transaction(state.writer) as session:
        sheet = session.get(Sheet, sheet_id)
        assert sheet is not None
        update_sheet(session, sheet, _metadata(plan, rendered), actor=actor)
    return sheet_id


def _load_sheet(
    state: AppState,
    plan: DemoSheet,
    collection_id: int,
    people: DemoPeople,
    dpi: float,
    summary: DemoSummary,
    log: WorkLog,
    say: ProgressCallback,
) -> None:
    existing = _existing_sheet(state, collection_id, plan.filename)
    render = LazyRender(plan, existing.dpi if existing is not None and existing.dpi else dpi)
    if existing is None:
        say(f"drawing and uploading {plan.filename}")
        sheet_id = _upload(state, plan, collection_id, render.get(), people.actors[plan.digitizer])
        summary.sheets_added += 1
    else:
        sheet_id = existing.id
    ensure_task(state, plan, sheet_id, collection_id, people.actors, log)
    say(f"digitizing {plan.filename} ({plan.stage}, task {plan.workflow.replace('_', ' ')})")
    digitize_sheet(state, plan, sheet_id, render, people.actors, log)
    finish_task(state, plan, sheet_id, people.actors, people.passwords, render, log)


def load_demo(
    state: AppState,
    *,
    progress: ProgressCallback | None = None,
    dpi: float = DEMO_DPI,
    only: Iterable[str] | None = None,
) -> DemoSummary:
    """Load (or complete) the demo archive; returns the accounts with the passwords generated by this call.

    ``dpi`` sets the scan resolution of newly drawn sheets (the product draws at 200 dpi; tests use less), rounded
    to whole dots per inch as a JPEG stores it (a resumed load redraws a sheet at its stored resolution);
    ``only`` limits the sheets to those keys (e.g. ``"level-w10"``), for tests and partial tours.
    """
    dpi = float(round(dpi))
    say = progress or _silent
    say("demo accounts")
    with transaction(state.writer) as session:
        accounts, actors = ensure_demo_people(session, state.hasher, actor=SYSTEM)
    people = DemoPeople(actors, {account.username: account.password for account in accounts if account.password})
    ids, collections_created = ensure_collections(state, actors["admin"])
    summary = DemoSummary(accounts=accounts, collections=[spec.name for spec in COLLECTIONS])
    log = WorkLog(created=collections_created)
    wanted = None if only is None else set(only)
    for plan in demo_sheets():
        if wanted is not None and plan.key not in wanted:
            continue
        _load_sheet(state, plan, ids[plan.collection], people, dpi, summary, log, say)
    summary.records_added = log.created
    summary.notes = log.notes
    if summary.changed:
        changes = {"sheets_added": summary.sheets_added, "records_added": summary.records_added}
        with transaction(state.writer) as session:
            record_demo_event(session, actor=SYSTEM, action="load", changes=changes)
    return summary


def first_run_wants_demo(state: AppState) -> bool:
    """True when the archive holds no collection yet and nobody removed the demo before (``serve --demo``)."""
    with transaction(state.reader) as session:
        empty = not session.scalar(select(func.count()).select_from(Collection))
        return empty and not demo_was_removed(session)
