"""CSV exports parsed back with the csv module and compared with the stored data: raw vertices, fitted equations,
period summaries; formula cells neutralised while numbers stay numbers; every export in the audit trail.

Chart values are exact by construction: vertices are placed at the pixels of known values under an exact affine
calibration (tests/workflow/sheet_setup.py), so reading them back must give those values to ~1e-9.
"""

from __future__ import annotations

import csv
import hashlib
import io
from datetime import datetime, timedelta

import numpy as np
import pytest
from fastapi.testclient import TestClient

from tests.conftest import PASSWORD
from tests.workflow.sheet_setup import act, add_trace, calibrate, new_sheets, pixel_of, user_id
from tracedesk.exports.csv_cells import text_cell

Clients = dict[str, TestClient]
START = "2019-05-01T06:00:00+02:00"
XS = [0.0, 3.0, 7.5, 12.0, 18.0, 24.0]
YS = [1.0, -1.0, 4.25, 6.0, 3.5, 2.0]


def _rows(response: object) -> list[list[str]]:
    body: bytes = response.content  # type: ignore[attr-defined]
    assert b"\r\n" in body  # RFC 4180 line ends
    return list(csv.reader(io.StringIO(body.decode("utf-8"), newline="")))


def _sheet_with_trace(client: TestClient, name: str = "Pegel über Grund") -> tuple[int, int, dict[str, object]]:
    collection_id, (sheet_id,) = new_sheets(client, 1)
    calibrate(client, sheet_id, start=START)
    return collection_id, sheet_id, add_trace(client, sheet_id, name, XS, YS)


def test_vertices_csv_round_trips_pixels_values_uncertainty_and_times(signed_in: Clients) -> None:
    tech = signed_in["technician"]
    _, _, trace = _sheet_with_trace(tech)
    response = tech.get(f"/api/v1/traces/{trace['id']}/vertices.csv")
    assert response.status_code == 200 and response.headers["content-type"] == "text/csv; charset=utf-8"
    header, *rows = _rows(response)
    assert header == [
        "vertex",
        "u [px]",
        "v [px]",
        "x [h]",
        "time (ISO 8601)",
        "Pegel über Grund [m]",
        "x standard uncertainty [h]",
        "Pegel über Grund standard uncertainty [m]",
        "confidence",
        "trace origin (auto, edited, manual)",
        "calibration origin (automatic, manual)",
    ]
    assert {tuple(row[-2:]) for row in rows} == {("manual", "manual")}  # clicked by a person, not automatic
    table = np.array([[float(cell) for i, cell in enumerate(row[:-2]) if i != 4] for row in rows])
    np.testing.assert_allclose(
        table[:, 1:3], np.array([pixel_of(x, y) for x, y in zip(XS, YS, strict=True)]), rtol=1e-9
    )
    np.testing.assert_allclose(table[:, 3], XS, atol=1e-9)
    np.testing.assert_allclose(table[:, 4], YS, atol=1e-9)
    stored = tech.get(f"/api/v1/traces/{trace['id']}").json()
    np.testing.assert_allclose(table[:, 5:7], np.array(stored["uncertainty"]), rtol=1e-9)
    start = datetime.fromisoformat(START)
    times = [datetime.fromisoformat(row[4]) for row in rows]
    for x, moment in zip(XS, times, strict=True):
        assert abs((moment - (start + timedelta(hours=x))).total_seconds()) < 1e-3
    assert rows[1][5] == "-1"  # a negative number stays a number (no apostrophe)

    # Every export is recorded in the audit trail, with the SHA-256 of exactly what was served.
    export = signed_in["admin"].get(f"/api/v1/audit/history/trace/{trace['id']}").json()[-1]
    assert export["action"] == "export" and export["actor_name"] == "Tom"
    assert export["changes"]["sha256"]["new"] == hashlib.sha256(response.content).hexdigest()
    assert export["changes"]["format"]["new"] == "vertices.csv"


def test_formula_cells_are_neutralised_and_period_summaries_match(signed_in: Clients) -> None:
    tech = signed_in["technician"]
    _, _, trace = _sheet_with_trace(tech, name='=HYPERLINK("http://evil.example","x")')
    header, *rows = _rows(tech.get(f"/api/v1/traces/{trace['id']}/vertices.csv"))
    assert header[5].startswith("'=HYPERLINK(")  # OWASP CSV injection: a leading apostrophe
    assert all(not cell.startswith("'") for row in rows for cell in row)
    assert float(rows[1][5]) == -1.0
    assert signed_in["viewer"].get(f"/api/v1/traces/{trace['id']}/vertices.csv").status_code == 200

    header, *rows = _rows(tech.get(f"/api/v1/traces/{trace['id']}/periods.csv", params={"period": "6"}))
    summary = tech.get(f"/api/v1/traces/{trace['id']}/summary", params={"period": "6"}).json()["periods"]
    assert len(rows) == len(summary) >= 4
    column = {name: index for index, name in enumerate(header)}
    assert "'=HYPERLINK" not in "".join(header) and "mean [m]" in column  # the value's own name is not used
    for row, period in zip(rows, summary, strict=True):
        np.testing.assert_allclose(float(row[column["mean [m]"]]), period["mean"], rtol=1e-9)
        np.testing.assert_allclose(float(row[column["maximum [m]"]]), period["maximum"], rtol=1e-9)
        assert datetime.fromisoformat(row[column["period start (ISO 8601)"]]).utcoffset() == timedelta(hours=2)
        assert row[-2:] == ["manual", "manual"]


def test_fits_csv_has_one_row_per_fit_with_the_stored_coefficients(signed_in: Clients) -> None:
    tech, reviewer = signed_in["technician"], signed_in["reviewer"]
    collection_id, _, trace = _sheet_with_trace(tech, name="level")
    fits = [
        tech.post(f"/api/v1/traces/{trace['id']}/fits", json={"family": "polynomial", "degree": degree}).json()
        for degree in (1, 2)
    ]
    task_id = reviewer.post(f"/api/v1/collections/{collection_id}/tasks", json={"technician_id": user_id(tech)}).json()[
        "created"
    ][0]["id"]
    act(tech, task_id, "start")
    act(tech, task_id, "submit")
    assert reviewer.post(f"/api/v1/tasks/{task_id}/signatures", json={"password": PASSWORD}).status_code == 201
    header, *rows = _rows(tech.get(f"/api/v1/collections/{collection_id}/fits.csv"))
    assert len(rows) == 2
    column = {name: index for index, name in enumerate(header)}
    for fit, row in zip(fits, rows, strict=True):
        assert int(row[column["fit id"]]) == fit["id"] and row[column["family"]] == "polynomial"
        count = len(fit["coefficients"])
        values = [float(row[column[f"coefficient {k}"]]) for k in range(1, count + 1)]
        errors = [float(row[column[f"coefficient {k} standard error"]]) for k in range(1, count + 1)]
        np.testing.assert_allclose(values, fit["coefficients"], rtol=1e-9)
        np.testing.assert_allclose(errors, fit["standard_errors"], rtol=1e-9)
        assert row[column["equation"]] == text_cell(fit["equation"]["text"])
        # Residual SD in the value unit (m): sqrt(SSR / (n - p)) of the samples about the stored curve (textbook).
        residual = np.asarray(YS) - np.polynomial.polynomial.polyval(XS, fit["coefficients"])
        expected_sd = np.sqrt(residual @ residual / (len(XS) - count))
        assert float(row[column["residual standard deviation [value unit]"]]) == pytest.approx(expected_sd, rel=1e-6)
        assert row[column["x unit"]] == "h" and row[column["value unit"]] == "m"
        np.testing.assert_allclose(
            [float(row[column["domain start [x unit]"]]), float(row[column["domain end [x unit]"]])], [0, 24], atol=1e-9
        )
        assert row[column["approval"]] == "approved" and row[column["approved by"]] == "Rita"
        assert row[column["approved at (ISO 8601, UTC)"]].endswith("Z")
        assert row[-2:] == ["manual", "manual"]  # the origins come last, after the coefficients
        assert header[-2:] == ["trace origin (auto, edited, manual)", "calibration origin (automatic, manual)"]
    assert rows[0][column["coefficient 3"]] == ""  # the straight line has two coefficients; padding stays empty
    single = _rows(tech.get(f"/api/v1/fits/{fits[0]['id']}/equation.csv"))
    assert len(single) == 2 and single[1][column["fit id"]] == str(fits[0]["id"])
