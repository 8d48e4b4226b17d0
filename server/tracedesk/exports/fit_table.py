"""Fitted equations, one row per fit: family, domain, statistics, the equation as text and the sheet's approval
state, then the coefficients with standard errors, and last where the trace and its calibration came from
(automatic or by hand, :mod:`~tracedesk.exports.origins`). Units differ from trace to trace, so they are columns
of their own and the headers of the numbers name the column that holds their unit."""

from __future__ import annotations

import json
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.digitizing.calibrations import calibration_of, x_unit_of
from tracedesk.exports.approvals import SheetApproval, approvals_of_sheets
from tracedesk.exports.csv_cells import Cell
from tracedesk.exports.origins import ORIGIN_HEADER, origin_cells
from tracedesk.models import Calibration, Fit, Sheet, Trace

BASE_HEADER = [
    "collection id",
    "sheet id",
    "sheet file",
    "trace id",
    "trace name",
    "trace version",
    "fit id",
    "fit version",
    "family",
    "options (JSON)",
    "x unit",
    "value unit",
    "domain start [x unit]",
    "domain end [x unit]",
    "points",
    "degrees of freedom",
    "residual standard deviation [value unit]",
    "reduced chi-square (weighted fits; residuals in units of each sample's uncertainty)",
    "r squared",
    "AICc",
    "BIC",
    "cross-validation RMSE [value unit]",
    "equation",
    "stale",
    "warnings",
    "approval",
    "approved by",
    "approved at (ISO 8601, UTC)",
    "record SHA-256",
]


@dataclass(frozen=True)
class FitRow:
    fit: Fit
    trace: Trace
    sheet: Sheet
    x_unit: str
    approval: SheetApproval
    calibration: Calibration | None


def flatten_parameters(parameters: Any, errors: Any) -> list[tuple[str, float | None, float | None]]:
    """(name, value, standard error) for every number of a fit's parameters, in their documented order."""
    if isinstance(parameters, list):
        errors = errors if isinstance(errors, list) else [None] * len(parameters)
        return [(f"c{i}", value, error) for i, (value, error) in enumerate(zip(parameters, errors, strict=False))]
    flat: list[tuple[str, float | None, float | None]] = []
    errors = errors if isinstance(errors, dict) else {}
    for name, value in parameters.items():
        error = errors.get(name)
        if isinstance(value, list):
            error_list = error if isinstance(error, list) else [None] * len(value)
            flat += [(f"{name}[{i}]", v, e) for i, (v, e) in enumerate(zip(value, error_list, strict=False))]
        else:
            flat.append((name, value, error if not isinstance(error, list) else None))
    return flat


def fit_rows(
    session: Session,
    sheet_ids: list[int],
    *,
    trace_id: int | None = None,
    fit_id: int | None = None,
    approvals: dict[int, SheetApproval] | None = None,
) -> list[FitRow]:
    """Every fit of live traces on the given sheets (or of one trace, or one fit), in sheet, trace, fit order."""
    query = (
        select(Fit, Trace, Sheet)
        .join(Trace, Trace.id == Fit.trace_id)
        .join(Sheet, Sheet.id == Trace.sheet_id)
        .where(Sheet.id.in_(sheet_ids), Trace.withdrawn_reason.is_(None))
        .order_by(Sheet.id, Trace.id, Fit.id)
    )
    if trace_id is not None:
        query = query.where(Trace.id == trace_id)
    if fit_id is not None:
        query = query.where(Fit.id == fit_id)
    found = session.execute(query).all()
    if approvals is None:
        approvals = approvals_of_sheets(session, sorted({sheet.id for _, _, sheet in found}))
    calibrations = {sheet.id: calibration_of(session, sheet.id) for _, _, sheet in found}
    return [
        FitRow(fit, trace, sheet, x_unit_of(calibrations[sheet.id]), approvals[sheet.id], calibrations[sheet.id])
        for fit, trace, sheet in found
    ]


def _base_cells(row: FitRow, result: dict[str, Any]) -> list[Cell]:
    stats = result.get("stats") or {}
    domain = result.get("domain") or [None, None]
    approval = row.approval
    return [
        row.sheet.collection_id,
        row.sheet.id,
        row.sheet.filename,
        row.trace.id,
        row.trace.name,
        row.fit.trace_version,
        row.fit.id,
        row.fit.version,
        row.fit.family,
        json.dumps(json.loads(row.fit.options), sort_keys=True),
        row.x_unit,
        row.trace.unit,
        domain[0],
        domain[1],
        stats.get("n"),
        stats.get("dof"),
        _residual_sd(stats),
        stats.get("reduced_chi_square"),
        stats.get("r_squared"),
        stats.get("aicc"),
        stats.get("bic"),
        stats.get("cv_rmse"),
        (result.get("equation") or {}).get("text", ""),
        "yes" if row.fit.stale else "no",
        "; ".join(result.get("warnings") or []),
        approval.state,
        approval.signed_by,
        approval.signed_at.isoformat().replace("+00:00", "Z") if approval.signed_at else None,
        approval.record_sha256,
    ]


def _residual_sd(stats: dict[str, Any]) -> Any:
    """The residual SD in value units. Fits stored before ``reduced_chi_square`` existed may hold the weighted,
    dimensionless figure under this name instead, so their cell stays empty rather than carry a wrong unit."""
    return stats.get("residual_sd") if "reduced_chi_square" in stats else None


def fit_table(rows: list[FitRow]) -> tuple[list[str], Iterator[list[Cell]]]:
    results = [json.loads(row.fit.result) for row in rows]
    flats = [flatten_parameters(r.get("parameters") or [], r.get("standard_errors")) for r in results]
    width = max((len(flat) for flat in flats), default=0)
    header = list(BASE_HEADER)
    for k in range(1, width + 1):
        header += [f"coefficient {k} name", f"coefficient {k}", f"coefficient {k} standard error"]
    header += ORIGIN_HEADER  # last, so the columns of earlier exports keep their places

    def cells() -> Iterator[list[Cell]]:
        for row, result, flat in zip(rows, results, flats, strict=True):
            line = _base_cells(row, result)
            for name, value, error in flat:
                line += [name, _number(value), _number(error)]
            line += [None] * (3 * (width - len(flat)))
            yield line + origin_cells(row.trace, row.calibration)

    return header, cells()


def _number(value: Any) -> float | int | None:
    return value if isinstance(value, int | float) and not isinstance(value, bool) else None
