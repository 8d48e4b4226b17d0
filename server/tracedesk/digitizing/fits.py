"""Fit use cases: fit a model to a trace's samples, suggest one, and re-derive fits after a change."""

from __future__ import annotations

import json
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from tracedesk.audit.service import Actor, created_fields, record_event
from tracedesk.digitizing.calibrations import build_remembered, mapping_of, require_calibration
from tracedesk.digitizing.schemas import FitRead
from tracedesk.digitizing.traces import samples_of, trace_pixels
from tracedesk.errors import NotFound, Unprocessable
from tracedesk.models import Fit, Trace
from tracedesk.science.calibration_covariance import CalibrationFactor, calibration_factor
from tracedesk.science.equations import write_equation
from tracedesk.science.errors import ScienceInputError
from tracedesk.science.fit_result import FitResult
from tracedesk.science.fitting import fit_model
from tracedesk.science.model_choice import suggest_model

RESERVED_OPTIONS = frozenset({"family", "x", "y", "sigma", "calibration"})


def fit_inputs(session: Session, trace: Trace) -> tuple[np.ndarray, np.ndarray, np.ndarray | None, int]:
    """x, y, sigma_y of the trace's samples (finite ones, ordered by x) and the calibration version used."""
    values, sigma, calibration_version = samples_of(session, trace)
    selection = _fitted_rows(values)
    values, sigma_y = values[selection], sigma[selection, 1]
    usable_sigma = sigma_y if np.all(np.isfinite(sigma_y)) and np.all(sigma_y > 0) else None
    return values[:, 0], values[:, 1], usable_sigma, calibration_version


def _fitted_rows(values: np.ndarray) -> np.ndarray:
    """Indices of the samples a fit uses: those inside the calibrated chart, in order of increasing x."""
    keep = np.flatnonzero(np.isfinite(values).all(axis=1))
    if not keep.size:
        raise Unprocessable("the trace has no samples inside the calibrated chart")
    return keep[np.argsort(values[keep, 0], kind="stable")]


def calibration_factor_of(session: Session, trace: Trace) -> CalibrationFactor | None:
    """The calibration's shared-error factor for the rows :func:`fit_inputs` returns (None if it cannot be refitted)."""
    row = require_calibration(session, trace.sheet_id)
    mapping = mapping_of(row)
    pixels = trace_pixels(trace)
    selection = _fitted_rows(mapping.pixels_to_values(pixels))
    try:
        spec = json.loads(row.spec)
        return calibration_factor(
            spec, mapping, pixels[selection], line_width_px=trace.line_width_px, build=build_remembered
        )
    except ScienceInputError:
        return None


def compute_fit(session: Session, trace: Trace, family: str, options: dict[str, Any]) -> tuple[FitResult, int]:
    bad = RESERVED_OPTIONS & set(options)
    if bad:
        raise Unprocessable(f"option {sorted(bad)[0]!r} cannot be set in a fit request")
    x, y, sigma, calibration_version = fit_inputs(session, trace)
    calibration = calibration_factor_of(session, trace)
    return fit_model(x, y, family=family, sigma=sigma, calibration=calibration, **options), calibration_version


def _equation_dict(result: FitResult) -> dict[str, str]:
    """The equation four ways; a smoothing spline has no single closed formula, and says so."""
    try:
        equation = write_equation(result)
    except ScienceInputError as error:
        note = f"no closed-form equation: {error}"
        return {"text": note, "latex": "", "python": "", "spreadsheet": ""}
    return {
        "text": equation.plain,
        "latex": equation.latex,
        "python": equation.python,
        "spreadsheet": equation.spreadsheet,
    }


def _store_result(fit: Fit, result: FitResult) -> None:
    body = result.to_dict()
    body["equation"] = _equation_dict(result)
    fit.result = json.dumps(body)


def create_fit(
    session: Session, trace: Trace, family: str, options: dict[str, Any], *, actor: Actor, reason: str | None = None
) -> Fit:
    result, calibration_version = compute_fit(session, trace, family, options)
    fit = Fit(
        trace_id=trace.id,
        family=result.family,
        options=json.dumps(options, sort_keys=True),
        result="{}",
        trace_version=trace.version,
        calibration_version=calibration_version,
        created_by_id=actor.id,
    )
    _store_result(fit, result)
    session.add(fit)
    session.flush()
    summary = {
        "family": result.family,
        "options": options,
        "trace_version": trace.version,
        "calibration_version": calibration_version,
        "parameters": result.to_dict()["parameters"],
    }
    record_event(
        session,
        actor=actor,
        action="create",
        entity_type="fit",
        entity_id=fit.id,
        entity_version=fit.version,
        changes=created_fields(summary),
        reason=reason,
    )
    return fit


def get_fit(session: Session, fit_id: int) -> Fit:
    fit = session.get(Fit, fit_id)
    if fit is None:
        raise NotFound(f"no fit with id {fit_id}")
    return fit


def fits_of_trace(session: Session, trace_id: int) -> list[Fit]:
    return list(session.scalars(select(Fit).where(Fit.trace_id == trace_id).order_by(Fit.id)))


def refit(session: Session, fit: Fit, trace: Trace) -> FitResult:
    """The fit's model recomputed from the trace's current samples (deterministic: same options, same data)."""
    result, _ = compute_fit(session, trace, fit.family, json.loads(fit.options))
    return result


def rederive_fits(session: Session, trace: Trace, *, actor: Actor, cause: str) -> int:
    """Refit every fit of a trace after its vertices or its sheet's calibration changed; say so in the audit."""
    count = 0
    for fit in fits_of_trace(session, trace.id):
        old = json.loads(fit.result).get("parameters")
        try:
            result, calibration_version = compute_fit(session, trace, fit.family, json.loads(fit.options))
        except (Unprocessable, ValueError) as error:
            fit.stale = True
            fit.version += 1
            record_event(
                session,
                actor=actor,
                action="mark_stale",
                entity_type="fit",
                entity_id=fit.id,
                entity_version=fit.version,
                changes={},
                reason=f"{cause}; refit failed: {error}",
            )
            continue
        _store_result(fit, result)
        fit.trace_version, fit.calibration_version, fit.stale = trace.version, calibration_version, False
        fit.version += 1
        record_event(
            session,
            actor=actor,
            action="rederive",
            entity_type="fit",
            entity_id=fit.id,
            entity_version=fit.version,
            changes={"parameters": {"old": old, "new": result.to_dict()["parameters"]}},
            reason=cause,
        )
        count += 1
    return count


def fit_read(fit: Fit) -> FitRead:
    body = json.loads(fit.result)
    return FitRead(
        id=fit.id,
        trace_id=fit.trace_id,
        family=fit.family,
        version=fit.version,
        trace_version=fit.trace_version,
        calibration_version=fit.calibration_version,
        stale=fit.stale,
        options=json.loads(fit.options),
        coefficients=body["parameters"],
        standard_errors=body["standard_errors"],
        covariance=body.get("covariance"),
        stats=body["stats"],
        equation=body["equation"],
        domain=body["domain"],
        warnings=body["warnings"],
        created_at=fit.created_at,
    )


def suggest(session: Session, trace: Trace, *, period: float | None = None) -> dict[str, Any]:
    x, y, sigma, _ = fit_inputs(session, trace)
    suggestion = suggest_model(x, y, sigma=sigma, period=period)
    candidates = [
        {
            "label": c.label,
            "family": c.family,
            "options": c.options,
            "parameter_count": c.parameter_count,
            "aicc": _finite(c.aicc),
            "bic": _finite(c.bic),
            "cv_rmse": _finite(c.cv_rmse),
            "rank": c.rank,
            "recommended": c.recommended,
            "reason": c.reason,
        }
        for c in suggestion.candidates
    ]
    recommended = suggestion.recommended.label if suggestion.recommended else None
    return {"recommended": recommended, "candidates": candidates}


def _finite(value: float | None) -> float | None:
    return value if value is not None and np.isfinite(value) else None
