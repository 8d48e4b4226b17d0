"""The digitized record of a sheet as canonical JSON, and its SHA-256: what a signature is bound to.

The record holds everything the numbers depend on: the scan (SHA-256 of the uploaded file and the page), the
calibration (kind, full specification, version), every live trace (name, unit, pen width, vertices in sheet
pixels, version) and every fit of those traces (family, options, parameters, the trace and calibration versions
it was computed from, version). Any edit of any of them bumps a version, so it changes the hash.

Canonical form (format ``tracedesk.sheet-record/1``): UTF-8 JSON with keys sorted, no insignificant white space,
non-ASCII characters written as themselves, lists in id order, vertex coordinates as floats, numbers in Python's
shortest round-trip decimal form, and non-finite numbers written as the strings "NaN", "Infinity", "-Infinity".
"""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.digitizing.calibrations import calibration_of
from tracedesk.digitizing.traces import traces_of_sheet
from tracedesk.models import Fit, Sheet, SourceFile, Trace

RECORD_FORMAT = "tracedesk.sheet-record/1"


@dataclass(frozen=True)
class SheetRecord:
    """A sheet's record, its canonical bytes and their SHA-256 (hex)."""

    content: dict[str, Any]
    canonical: bytes
    sha256: str

    @property
    def versions(self) -> dict[str, Any]:
        """Which versions make up this record (kept with a signature to say later what changed)."""
        calibration = self.content["calibration"]
        return {
            "calibration": calibration["version"] if calibration else None,
            "traces": {str(t["id"]): t["version"] for t in self.content["traces"]},
            "fits": {str(f["id"]): f["version"] for f in self.content["fits"]},
        }


def _finite_or_text(value: Any) -> Any:
    if isinstance(value, float) and not math.isfinite(value):
        return "NaN" if math.isnan(value) else ("Infinity" if value > 0 else "-Infinity")
    if isinstance(value, dict):
        return {str(key): _finite_or_text(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [_finite_or_text(item) for item in value]
    return value


def canonical_bytes(content: dict[str, Any]) -> bytes:
    """The canonical JSON encoding described in the module docstring."""
    text = json.dumps(
        _finite_or_text(content), sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False
    )
    return text.encode("utf-8")


def _trace_entry(trace: Trace) -> dict[str, Any]:
    vertices = [[float(u), float(v)] for u, v in json.loads(trace.vertices)]
    return {
        "id": trace.id,
        "version": trace.version,
        "name": trace.name,
        "unit": trace.unit,
        "line_width_px": float(trace.line_width_px),
        "vertices": vertices,
    }


def _fit_entry(fit: Fit) -> dict[str, Any]:
    return {
        "id": fit.id,
        "trace_id": fit.trace_id,
        "version": fit.version,
        "family": fit.family,
        "options": json.loads(fit.options),
        "parameters": json.loads(fit.result).get("parameters"),
        "trace_version": fit.trace_version,
        "calibration_version": fit.calibration_version,
        "stale": fit.stale,
    }


def sheet_record_content(session: Session, sheet: Sheet) -> dict[str, Any]:
    """The record of ``sheet`` as plain JSON-ready data (withdrawn traces are not part of it)."""
    source_sha256 = session.scalar(select(SourceFile.sha256).where(SourceFile.id == sheet.source_file_id))
    calibration = calibration_of(session, sheet.id)
    traces = traces_of_sheet(session, sheet.id)
    trace_ids = [trace.id for trace in traces]
    fits = list(session.scalars(select(Fit).where(Fit.trace_id.in_(trace_ids)).order_by(Fit.id))) if traces else []
    return {
        "format": RECORD_FORMAT,
        "sheet": {"id": sheet.id, "source_sha256": source_sha256, "page_index": sheet.page_index},
        "calibration": None
        if calibration is None
        else {"version": calibration.version, "kind": calibration.kind, "spec": json.loads(calibration.spec)},
        "traces": [_trace_entry(trace) for trace in traces],
        "fits": [_fit_entry(fit) for fit in fits],
    }


def sheet_record(session: Session, sheet: Sheet) -> SheetRecord:
    content = sheet_record_content(session, sheet)
    canonical = canonical_bytes(content)
    return SheetRecord(content=content, canonical=canonical, sha256=hashlib.sha256(canonical).hexdigest())


def describe_version_changes(signed: dict[str, Any], current: dict[str, Any]) -> list[str]:
    """Plain-language differences between two ``SheetRecord.versions`` (what changed since a signature)."""
    changes: list[str] = []
    if signed.get("calibration") != current.get("calibration"):
        changes.append(f"calibration v{signed.get('calibration')} → v{current.get('calibration')}")
    for kind in ("traces", "fits"):
        before, after = signed.get(kind, {}), current.get(kind, {})
        label = kind[:-1]
        for key in sorted(set(before) | set(after), key=int):
            if key not in after:
                changes.append(f"{label} {key} removed")
            elif key not in before:
                changes.append(f"{label} {key} added")
            elif before[key] != after[key]:
                changes.append(f"{label} {key} v{before[key]} → v{after[key]}")
    return changes
