"""Double digitization: two technicians trace the same sheet independently; their traces are paired by name and
compared (``agreement.py``) against the collection's tolerance; the reviewer keeps one set or returns the task.
Never commits."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor, record_event
from tracedesk.digitizing.calibrations import calibration_of, mapping_of
from tracedesk.digitizing.traces import samples_of, traces_of_sheet, withdraw_trace
from tracedesk.errors import Conflict, Unprocessable
from tracedesk.models import Task, Trace
from tracedesk.workflow.agreement import TraceAgreement, compare_traces, piecewise_linear_samples
from tracedesk.workflow.authorship import KEEP_DECISION_PREFIX


@dataclass(frozen=True)
class TracePair:
    name: str
    first: Trace
    second: Trace
    agreement: TraceAgreement | None

    def agrees(self, tolerance: float | None) -> bool | None:
        if tolerance is None or self.agreement is None:
            return None
        return self.agreement.agrees(tolerance=tolerance)


@dataclass(frozen=True)
class AgreementReport:
    tolerance: float | None
    pairs: list[TracePair]
    only_first: list[Trace]
    only_second: list[Trace]

    @property
    def status(self) -> str:
        """agree / disagree (a pair beyond tolerance, or a trace without partner) / incomplete / no_tolerance."""
        if not self.pairs and not (self.only_first and self.only_second):
            return "incomplete"
        verdicts = [pair.agrees(self.tolerance) for pair in self.pairs]
        if any(verdict is False for verdict in verdicts) or self.only_first or self.only_second:
            return "disagree"
        if self.tolerance is None:
            return "no_tolerance"
        if any(verdict is None for verdict in verdicts):
            return "disagree"  # a pair with no common range cannot be said to agree
        return "agree"


def technician_sets(session: Session, task: Task) -> tuple[list[Trace], list[Trace]]:
    """The live traces of the sheet created by the first and by the second technician."""
    traces = traces_of_sheet(session, task.sheet_id)
    first = [t for t in traces if task.technician_id is not None and t.created_by_id == task.technician_id]
    second = [
        t for t in traces if task.second_technician_id is not None and t.created_by_id == task.second_technician_id
    ]
    return first, second


def both_sets_present(session: Session, task: Task) -> bool:
    first, second = technician_sets(session, task)
    return bool(first) and bool(second)


def _key(trace: Trace) -> str:
    return " ".join(trace.name.lower().split())


def _finite_samples(session: Session, trace: Trace) -> tuple[np.ndarray, np.ndarray]:
    values, _, _ = samples_of(session, trace)
    return values[:, 0], values[:, 1]


def compare_task(session: Session, task: Task, *, tolerance: float | None) -> AgreementReport:
    """Pair the technicians' traces by name (case and spacing ignored) and compare each pair."""
    first, second = technician_sets(session, task)
    second_by_name = {_key(trace): trace for trace in second}
    pairs: list[TracePair] = []
    only_first: list[Trace] = []
    for trace in first:
        partner = second_by_name.pop(_key(trace), None)
        if partner is None:
            only_first.append(trace)
            continue
        agreement = compare_traces(*_finite_samples(session, trace), *_finite_samples(session, partner))
        pairs.append(TracePair(trace.name, trace, partner, agreement))
    return AgreementReport(tolerance, pairs, only_first, list(second_by_name.values()))


def keep_one_set(session: Session, task: Task, *, keep: str, reason: str, actor: Actor) -> list[int]:
    """The reviewer keeps one technician's traces; the other's are withdrawn (with the reason). Returns their ids."""
    if not task.double_digitization:
        raise Conflict("this task is not double digitized")
    if task.state != "submitted":
        raise Conflict(f"only a submitted task can be decided; this one is {task.state}")
    reason = reason.strip()
    if not reason:
        raise Unprocessable("give a reason for keeping one technician's traces")
    first, second = technician_sets(session, task)
    if not first or not second:
        raise Conflict("only one technician's traces are on the sheet: there is nothing to choose")
    kept_by = task.technician_id if keep == "first" else task.second_technician_id
    dropped = second if keep == "first" else first
    for trace in dropped:
        withdraw_trace(session, trace, actor=actor, reason=f"{KEEP_DECISION_PREFIX}user {kept_by}'s traces: {reason}")
    record_event(
        session,
        actor=actor,
        action="keep_traces",
        entity_type="task",
        entity_id=task.id,
        entity_version=task.version,
        changes={"kept": {"old": None, "new": keep}, "withdrawn_traces": {"old": None, "new": [t.id for t in dropped]}},
        reason=reason,
    )
    return [trace.id for trace in dropped]


def difference_positions(session: Session, task: Task, report: AgreementReport) -> list[tuple[float, float, str]]:
    """Sheet pixels (u, v) on the first technician's trace where each pair differs most, with a label."""
    row = calibration_of(session, task.sheet_id)
    if row is None:
        return []
    mapping = mapping_of(row)
    positions = []
    for pair in report.pairs:
        found = pair.agreement
        if found is None:
            continue
        x, y = piecewise_linear_samples(*_finite_samples(session, pair.first))
        value = float(np.interp(found.max_at, x, y))
        u, v = mapping.values_to_pixels(np.array([[found.max_at, value]]))[0]
        label = f"{pair.name}: largest difference {found.max_difference:.4g} {pair.first.unit}".rstrip()
        positions.append((float(u), float(v), label))
    return positions
