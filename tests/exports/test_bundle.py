"""The collection bundle, opened with zipfile and json and compared with what the API stores and serves."""

from __future__ import annotations

import csv
import hashlib
import io
import json
import zipfile

import numpy as np
from fastapi.testclient import TestClient
from PIL import Image

from tests.conftest import PASSWORD
from tests.workflow.sheet_setup import act, add_trace, calibrate, new_sheets, pixel_of, user_id

Clients = dict[str, TestClient]


def _collection(signed_in: Clients) -> tuple[int, list[int], list[dict[str, object]], int]:
    """Two digitized sheets (one approved by Rita) and a third without work; returns ids and the traces."""
    tech, reviewer = signed_in["technician"], signed_in["reviewer"]
    collection_id, sheet_ids = new_sheets(tech, 3)
    traces = []
    for index, sheet_id in enumerate(sheet_ids[:2]):
        calibrate(tech, sheet_id, start="2020-01-01T00:00:00Z")
        trace = add_trace(tech, sheet_id, f"level {index}", [0, 6, 12, 18, 24], [2, 4, 3, 5, 4])
        fit = tech.post(f"/api/v1/traces/{trace['id']}/fits", json={"family": "polynomial", "degree": 2})
        assert fit.status_code == 201
        traces.append(trace)
    body = {"sheet_ids": sheet_ids[:1], "technician_id": user_id(tech)}
    task_id = reviewer.post(f"/api/v1/collections/{collection_id}/tasks", json=body).json()["created"][0]["id"]
    act(tech, task_id, "start")
    act(tech, task_id, "submit")
    assert reviewer.post(f"/api/v1/tasks/{task_id}/signatures", json={"password": PASSWORD}).status_code == 201
    return collection_id, sheet_ids, traces, task_id


def test_bundle_contents_match_the_stored_records(signed_in: Clients) -> None:
    tech, admin = signed_in["technician"], signed_in["admin"]
    collection_id, sheet_ids, traces, task_id = _collection(signed_in)
    response = tech.get(f"/api/v1/collections/{collection_id}/bundle.zip", params={"image_side": 400})
    assert response.status_code == 200 and response.headers["content-type"] == "application/zip"
    archive = zipfile.ZipFile(io.BytesIO(response.content))
    assert archive.testzip() is None
    names = set(archive.namelist())
    first, _, empty = sheet_ids
    trace_id = traces[0]["id"]
    assert {
        "provenance.json",
        "fits.csv",
        "README.txt",
        f"sheet-{first}/overlay.png",
        f"sheet-{empty}/overlay.png",
    } <= names
    for kind in ("vertices", "resampled", "periods"):
        assert f"sheet-{first}/trace-{trace_id}-{kind}.csv" in names

    provenance = json.loads(archive.read("provenance.json"))
    assert provenance["format"] == "tracedesk.bundle-provenance/1" and provenance["software"]["version"]
    assert [sheet["id"] for sheet in provenance["sheets"]] == sheet_ids
    entry = provenance["sheets"][0]
    stored_sheet = tech.get(f"/api/v1/sheets/{first}").json()
    assert entry["source_sha256"] == stored_sheet["sha256"]
    assert entry["record_sha256"] == tech.get(f"/api/v1/sheets/{first}/record").json()["sha256"]
    assert entry["calibration"]["version"] == 1 and entry["calibration"]["rms_px"] < 1e-6
    assert entry["traces"][0] == {**entry["traces"][0], "id": trace_id, "version": 1, "vertex_count": 5}
    assert entry["digitized_by"] == ["Tom"] and entry["batch_runs"] == []
    assert entry["calibration"]["origin"] == "manual" and entry["traces"][0]["origin"] == "manual"
    assert entry["approval"]["state"] == "approved" and entry["approval"]["signed_by"] == "Rita"
    assert entry["approval"]["record_sha256"] == entry["record_sha256"]
    assert entry["task"]["id"] == task_id
    assert provenance["sheets"][1]["approval"]["state"] == "no task"
    assert provenance["sheets"][2]["calibration"] is None and provenance["sheets"][2]["traces"] == []

    inside = archive.read(f"sheet-{first}/trace-{trace_id}-vertices.csv")
    assert inside == tech.get(f"/api/v1/traces/{trace_id}/vertices.csv").content
    fits = list(csv.reader(io.StringIO(archive.read("fits.csv").decode("utf-8"), newline="")))
    assert len(fits) == 1 + 2
    resampled = list(csv.reader(io.StringIO(archive.read(f"sheet-{first}/trace-{trace_id}-resampled.csv").decode())))
    assert resampled[0][:3] == ["x [h]", "time (ISO 8601)", "level 0 [m]"]

    picture = Image.open(io.BytesIO(archive.read(f"sheet-{first}/overlay.png")))
    assert picture.format == "PNG" and max(picture.size) == 400
    scale = picture.width / stored_sheet["width"]
    u, v = pixel_of(12, 3)
    pixels = np.asarray(picture.convert("RGB")).astype(int)
    column, row = int(u * scale), int(v * scale)
    window = pixels[row - 2 : row + 3, column - 2 : column + 3]
    # The first trace colour (#d1006f) is drawn over the (lightened) scan there, and the scan is visible elsewhere.
    assert ((window[..., 0] > 150) & (window[..., 1] < 80)).any()
    assert (pixels[2 * row // 3 :, :20].mean(axis=(0, 1)) > 150).all()

    (event,) = [
        e for e in admin.get(f"/api/v1/audit/history/collection/{collection_id}").json() if e["action"] == "export"
    ]
    assert event["changes"]["sha256"]["new"] == hashlib.sha256(response.content).hexdigest()
    assert event["changes"]["sheets"]["new"] == sheet_ids


def test_a_selection_bundles_only_the_chosen_sheets_and_the_overlay_is_served(signed_in: Clients) -> None:
    tech = signed_in["technician"]
    collection_id, sheet_ids, _, _ = _collection(signed_in)
    response = tech.get(
        f"/api/v1/collections/{collection_id}/bundle.zip", params={"sheet_ids": f"{sheet_ids[1]}", "image_side": 300}
    )
    archive = zipfile.ZipFile(io.BytesIO(response.content))
    provenance = json.loads(archive.read("provenance.json"))
    assert [sheet["id"] for sheet in provenance["sheets"]] == [sheet_ids[1]]
    assert not any(name.startswith(f"sheet-{sheet_ids[0]}/") for name in archive.namelist())
    wrong = tech.get(f"/api/v1/collections/{collection_id}/bundle.zip", params={"sheet_ids": "999999"})
    assert wrong.status_code == 422
    overlay = tech.get(f"/api/v1/sheets/{sheet_ids[0]}/overlay.png", params={"max_side": 320})
    assert overlay.status_code == 200 and overlay.headers["content-type"] == "image/png"
    assert np.asarray(Image.open(io.BytesIO(overlay.content)).convert("RGB")).shape[1] == 320
