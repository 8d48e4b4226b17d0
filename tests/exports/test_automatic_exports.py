"""Exports mark automatic results (issue 9): the per-trace and fitted-equation CSVs end with the trace's and the
calibration's origin, and the bundle's provenance names the batch run that digitized a sheet and who started it.

The sheet is a chart rendered with matplotlib (tests/science/grid_charts.py) and digitized by a batch run, so no
person clicked anything; the expected origins are the ones the run writes (``auto`` traces, ``automatic``
calibration) and, after a person's edit, ``edited``.
"""

from __future__ import annotations

import csv
import io
import json
import zipfile

from fastapi.testclient import TestClient

from tests.digitizing.test_batch_runs import FIT, PENS, _chart_png, _collection, _run

ORIGINS = ["trace origin (auto, edited, manual)", "calibration origin (automatic, manual)"]


def _csv(client: TestClient, url: str) -> list[list[str]]:
    response = client.get(url)
    assert response.status_code == 200, response.text
    assert b"\r\n" in response.content  # RFC 4180 line ends
    return list(csv.reader(io.StringIO(response.content.decode("utf-8"), newline="")))


def test_exports_tell_automatic_results_apart(signed_in: dict[str, TestClient]) -> None:
    admin = signed_in["admin"]
    collection, (sheet,), spec = _collection(admin, "Automatic exports", [("day.png", _chart_png(0.6))])
    run = _run(admin, collection, {"chart_spec_id": spec, "pens": PENS, "fit": FIT})
    assert run["counts"]["ready_for_review"] == 1, run
    (trace,) = admin.get(f"/api/v1/sheets/{sheet}/traces").json()

    header, *rows = _csv(admin, f"/api/v1/traces/{trace['id']}/vertices.csv")
    assert header[-2:] == ORIGINS and rows
    assert {tuple(row[-2:]) for row in rows} == {("auto", "automatic")}
    header, *rows = _csv(admin, f"/api/v1/collections/{collection}/fits.csv")
    assert header[-2:] == ORIGINS and [row[-2:] for row in rows] == [["auto", "automatic"]]
    assert rows[0][header.index("family")] == "fourier"  # existing columns keep their names and places

    bundle = admin.get(f"/api/v1/collections/{collection}/bundle.zip", params={"image_side": 200})
    assert bundle.status_code == 200, bundle.text
    (entry,) = json.loads(zipfile.ZipFile(io.BytesIO(bundle.content)).read("provenance.json"))["sheets"]
    assert entry["digitized_by"] == [f"batch run {run['id']} (automatic)"]
    assert entry["batch_runs"] == [{"batch_run": run["id"], "automatic": True, "started_by": "Ada"}]
    assert entry["calibration"]["origin"] == "automatic" and entry["traces"][0]["origin"] == "auto"

    # A person's edit of the automatic trace shows as "edited"; the person joins the authors beside the run.
    stored = admin.get(f"/api/v1/traces/{trace['id']}")
    moved = [[u + 0.5, v] for u, v in stored.json()["vertices"]]
    edited = admin.patch(
        f"/api/v1/traces/{trace['id']}",
        json={"vertices": moved, "reason": "nudge the start"},
        headers={"If-Match": stored.headers["ETag"]},
    )
    assert edited.status_code == 200, edited.text
    header, *rows = _csv(admin, f"/api/v1/traces/{trace['id']}/vertices.csv")
    assert {tuple(row[-2:]) for row in rows} == {("edited", "automatic")}
    bundle = admin.get(f"/api/v1/collections/{collection}/bundle.zip", params={"image_side": 200})
    (entry,) = json.loads(zipfile.ZipFile(io.BytesIO(bundle.content)).read("provenance.json"))["sheets"]
    assert entry["digitized_by"] == ["Ada", f"batch run {run['id']} (automatic)"]
