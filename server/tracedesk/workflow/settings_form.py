"""The collection's workflow settings as posted by the board page's form (every field is text; blank = none)."""

from __future__ import annotations

import json
from typing import Any

from tracedesk.digitizing.batch_schemas import BatchThresholds
from tracedesk.workflow.schemas import WorkflowSettingsUpdate


def settings_update_from_form(
    *, double_digitization: str, tolerance: str, thresholds: dict[str, str], batch_fit: str
) -> WorkflowSettingsUpdate:
    """Raises ``ValueError`` (pydantic's ``ValidationError`` is one) on a field that does not parse.

    Blank threshold fields keep their defaults (``min_r_squared`` blank: no fit-quality floor); a blank fit box
    means batch runs fit nothing.
    """
    numbers: dict[str, Any] = {name: float(text) for name, text in thresholds.items() if text.strip()}
    if "max_gaps" in numbers:
        if not numbers["max_gaps"].is_integer():
            raise ValueError("the largest number of gaps is a whole number")
        numbers["max_gaps"] = int(numbers["max_gaps"])
    fit = json.loads(batch_fit) if batch_fit.strip() else None
    return WorkflowSettingsUpdate(
        double_digitization=bool(double_digitization),
        tolerance=float(tolerance) if tolerance.strip() else None,
        batch_thresholds=BatchThresholds.model_validate(numbers),
        batch_fit=fit,
    )
