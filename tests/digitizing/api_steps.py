"""The HTTP steps of digitizing one sheet, for the end-to-end tests on hard renderings (test_api_hard_*.py).

Every step goes through the JSON API only: upload, pen colour under a point, calibration, automatic trace,
trace read-back, fit, resampled CSV. Helpers return plain numpy arrays so the tests can compare them with
the truth the renderings were drawn from.
"""

from __future__ import annotations

import csv
import io
from typing import Any

import numpy as np
from fastapi.testclient import TestClient
from numpy.typing import NDArray
from PIL import Image

FloatArray = NDArray[np.float64]
# GUM (JCGM 100:2008) 6.2-6.3: an expanded uncertainty with coverage factor k = 2 covers about 95 % of a
# normal distribution. The tests require at least this share of samples within k standard uncertainties.
COVERAGE_FACTOR = 2.0
COVERAGE_RATE = 0.95
# Issue 3's accuracy targets: traced samples within 0.1 % of full scale RMS, fitted curves within 0.1 % of full
# scale everywhere in the traced range, vertices within 0.3 px RMS (perpendicular distance) of the true curve.
SAMPLE_RMS_FS = 0.001
FIT_MAX_FS = 0.001
VERTEX_RMS_PX = 0.3
# Ours: no single sample off by more than 0.5 % of full scale, and a median standard uncertainty below that
# too (an uncertainty that covers every error by being huge would tell the user nothing).
SAMPLE_MAX_FS = 0.005


def encoded(pixels: NDArray[np.uint8], *, jpeg_quality: int | None = None) -> tuple[bytes, str, str]:
    """(file bytes, file name, media type): PNG, or JPEG at ``jpeg_quality`` (Pillow's encoder, 4:2:0)."""
    buffer = io.BytesIO()
    if jpeg_quality is None:
        Image.fromarray(pixels).save(buffer, format="PNG")
        return buffer.getvalue(), "sheet.png", "image/png"
    Image.fromarray(pixels).save(buffer, format="JPEG", quality=jpeg_quality)
    return buffer.getvalue(), "sheet.jpg", "image/jpeg"


def upload_sheet(client: TestClient, file: tuple[bytes, str, str], *, collection: str) -> int:
    """Upload one scan into a new collection; the new sheet's id."""
    collection_id = client.post("/api/v1/collections", json={"name": collection}).json()["id"]
    data, name, media = file
    response = client.post(f"/api/v1/collections/{collection_id}/sheets", files=[("files", (name, data, media))])
    assert response.status_code == 201, response.text
    return int(response.json()["sheets"][0]["id"])


def pen_colour_at(client: TestClient, sheet_id: int, pixel: FloatArray) -> str:
    """The ink colour the workbench samples when the pen is clicked at ``pixel`` (u, v)."""
    u, v = (float(c) for c in pixel)
    response = client.get(f"/api/v1/sheets/{sheet_id}/colour", params={"u": u, "v": v, "radius": 3})
    assert response.status_code == 200, response.text
    assert response.json()["ink_found"] is True
    return str(response.json()["pen_color"])


def put_calibration(client: TestClient, sheet_id: int, spec: dict[str, Any], *, reason: str = "") -> dict[str, Any]:
    """Store a calibration (a first one, or a correction with If-Match and a reason)."""
    url = f"/api/v1/sheets/{sheet_id}/calibration"
    headers, body = {}, dict(spec)
    if reason:
        headers["If-Match"] = client.get(url).headers["etag"]
        body["reason"] = reason
    response = client.put(url, json=body, headers=headers)
    assert response.status_code in (200, 201), response.text
    return dict(response.json())


def auto_trace(client: TestClient, sheet_id: int, *, name: str, unit: str, colour: str, region: Any) -> dict[str, Any]:
    """Trace a pen automatically; the stored trace as the API returns it."""
    body = {"name": name, "unit": unit, "pen_color": colour, "region": region}
    response = client.post(f"/api/v1/sheets/{sheet_id}/traces/auto", json=body)
    assert response.status_code == 201, response.text
    return dict(response.json())


def trace_arrays(client: TestClient, trace_id: int) -> tuple[FloatArray, FloatArray, FloatArray]:
    """(vertices px, samples in chart units, per-sample standard uncertainties), as read back by GET."""
    body = client.get(f"/api/v1/traces/{trace_id}").json()
    as_array = lambda rows: np.array(rows, dtype=np.float64)  # noqa: E731 - None becomes NaN
    return as_array(body["vertices"]), as_array(body["samples"]), as_array(body["uncertainty"])


def create_fit(client: TestClient, trace_id: int, request: dict[str, Any]) -> dict[str, Any]:
    response = client.post(f"/api/v1/traces/{trace_id}/fits", json=request)
    assert response.status_code == 201, response.text
    return dict(response.json())


def resampled_csv(client: TestClient, trace_id: int, **params: Any) -> tuple[list[str], FloatArray, FloatArray]:
    """(header, x, value) of the resampled CSV download; rows with an empty value are left out."""
    response = client.get(f"/api/v1/traces/{trace_id}/resampled.csv", params=params)
    assert response.status_code == 200, response.text
    rows = list(csv.reader(io.StringIO(response.text)))
    filled = [row for row in rows[1:] if row[1]]
    return rows[0], np.array([float(row[0]) for row in filled]), np.array([float(row[1]) for row in filled])


def rms(values: FloatArray) -> float:
    return float(np.sqrt(np.mean(np.square(values))))


def covered_share(error: FloatArray, sigma: FloatArray) -> float:
    """Share of samples whose error lies within ``COVERAGE_FACTOR`` standard uncertainties."""
    return float(np.mean(np.abs(error) <= COVERAGE_FACTOR * sigma))


def assert_samples_match(error: FloatArray, sigma: FloatArray, *, full_scale: float) -> None:
    """Reading errors y - f(x) against the sample targets, and their standard uncertainties against the errors."""
    assert rms(error) < SAMPLE_RMS_FS * full_scale, f"RMS {rms(error) / full_scale:.4%} of full scale"
    assert np.max(np.abs(error)) < SAMPLE_MAX_FS * full_scale
    assert covered_share(error, sigma) >= COVERAGE_RATE
    assert np.median(sigma) < SAMPLE_MAX_FS * full_scale


def assert_fit_matches(fit: dict[str, Any], truth: Any, *, full_scale: float, chart: Any = None) -> None:
    """The reported equation within ``FIT_MAX_FS`` of the truth over the fit's domain (the traced range).

    ``chart`` maps values to the axis' chart coordinate first (``np.log10`` on a log axis).
    """
    x = np.linspace(*fit["domain"], 1000)
    to_chart = chart or (lambda values: values)
    error = to_chart(fitted_curve(fit, x)) - to_chart(truth(x))
    assert np.max(np.abs(error)) < FIT_MAX_FS * full_scale, f"{np.max(np.abs(error)) / full_scale:.4%} of full scale"


def reading_sigma(uncertainty: FloatArray, slope: FloatArray) -> FloatArray:
    """Standard uncertainty of y - f(x) from the per-sample (sigma_x, sigma_y): sqrt(sigma_y^2 + (f' sigma_x)^2).

    First-order propagation (GUM 5.1.2): an error in x moves the truth it is compared with by f'(x) sigma_x.
    """
    return np.hypot(uncertainty[:, 1], slope * uncertainty[:, 0])


def fitted_curve(fit: dict[str, Any], x: FloatArray) -> FloatArray:
    """Evaluate a fit from the coefficients the API reports, with the formulas of the API contract (issue 3)."""
    coefficients = fit["coefficients"]
    if fit["family"] == "polynomial":
        return np.asarray(np.polynomial.polynomial.polyval(x, coefficients), dtype=np.float64)
    if fit["family"] == "exponential":
        return np.asarray(coefficients["a"] * np.exp(coefficients["b"] * x) + coefficients["c"], dtype=np.float64)
    assert fit["family"] == "fourier", fit["family"]
    turn = 2.0 * np.pi * x / coefficients["period"]
    total = np.full_like(x, coefficients["a0"])
    k = 1
    while f"a{k}" in coefficients:
        total += coefficients[f"a{k}"] * np.cos(k * turn) + coefficients[f"b{k}"] * np.sin(k * turn)
        k += 1
    return total
