"""Through the API, every fit family carries the calibration's shared error and the samples' uncertainty.

The chart and its calibration are those of tests/digitizing/test_digitizing_api.py (y = 3 + 2 sin(2 pi x / 24)
drawn by matplotlib into a known box). References: the truth function itself (the interpolation's node values
must hold it within their stated uncertainty, 3 standard errors) and the GUM (JCGM 100:2008, 5.2) for what the
calibration term is.
"""

from __future__ import annotations

import numpy as np
import pytest
from fastapi.testclient import TestClient

from tests.digitizing.test_digitizing_api import MAPPING, _calibration, sheet_id, truth

__all__ = ["sheet_id"]  # the uploaded chart, a fixture shared with the API tests


@pytest.fixture
def trace_id(signed_in: dict[str, TestClient], sheet_id: int) -> int:
    tech = signed_in["technician"]
    assert tech.put(f"/api/v1/sheets/{sheet_id}/calibration", json=_calibration()).status_code == 201
    x = np.linspace(0.0, 48.0, 97)
    vertices = MAPPING.data_to_pixel(x, truth(x)).tolist()
    created = tech.post(f"/api/v1/sheets/{sheet_id}/traces", json={"name": "level", "vertices": vertices})
    assert created.status_code == 201, created.text
    return int(created.json()["id"])


def test_interpolation_reports_node_uncertainty_with_the_calibration_term(
    signed_in: dict[str, TestClient], trace_id: int
) -> None:
    tech = signed_in["technician"]
    response = tech.post(f"/api/v1/traces/{trace_id}/fits", json={"family": "interpolation", "degree": 8})
    assert response.status_code == 201, response.text
    fit = response.json()
    errors = np.array(fit["standard_errors"]["values"])
    assert errors.shape == (9,) and np.all(errors > 0.0)
    nodes, values = np.array(fit["coefficients"]["nodes"]), np.array(fit["coefficients"]["values"])
    assert np.all(np.abs(values - truth(nodes)) <= 3.0 * errors + 1e-9)
    assert 0.0 < fit["stats"]["calibration_share"] <= 1.0


def test_spline_carries_the_calibration_term(signed_in: dict[str, TestClient], trace_id: int) -> None:
    tech = signed_in["technician"]
    response = tech.post(f"/api/v1/traces/{trace_id}/fits", json={"family": "spline"})
    assert response.status_code == 201, response.text
    stats = response.json()["stats"]
    assert 0.0 < stats["calibration_share"] <= 1.0
    assert stats["calibration_click_sigma_px"] > 0.0
