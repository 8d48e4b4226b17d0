"""Unattended batch digitization (issue 9): a collection of rendered charts registers, traces and fits itself;
sheets that pass the thresholds wait for review, the rest (a blank page) wait for a person with the reason."""

from __future__ import annotations

import numpy as np
from fastapi.testclient import TestClient

from tests.digitizing.test_detection_api import _png
from tests.jobs.test_jobs import _wait_for
from tests.science.grid_charts import PrintedChart, render_chart, rotation
from tests.science.test_grid_registration import BLUE, BOX, SPEC_JSON, H, W, _spec

FULL_SCALE = 42.0  # the spec's y frame is 0..42


def pen_function(x: np.ndarray) -> np.ndarray:
    return 20 + 10 * np.sin(x / 4)


def test_batch_run_digitizes_good_sheets_and_explains_the_rest(signed_in: dict[str, TestClient]) -> None:
    reviewer, tech = signed_in["reviewer"], signed_in["technician"]
    collection = reviewer.post("/api/v1/collections", json={"name": "Pump pressure 1987"}).json()["id"]
    files = []
    for index, angle in enumerate((0.8, -1.6)):
        chart = PrintedChart(_spec(), BOX, rotation(angle, width=W, height=H))
        pixels = render_chart(chart, width=W, height=H, pens=[chart.pen(pen_function, colour=BLUE)])
        files.append(("files", (f"day-{index}.png", _png(pixels), "image/png")))
    files.append(("files", ("blank.png", _png(np.full((H, W, 3), 250, dtype=np.uint8)), "image/png")))
    sheets = reviewer.post(f"/api/v1/collections/{collection}/sheets", files=files).json()["sheets"]
    spec = reviewer.post(
        "/api/v1/chart-specs", json={"name": "Daily", "geometry": SPEC_JSON, "collection_id": collection}
    ).json()["id"]
    body = {
        "chart_spec_id": spec,
        "pens": [{"name": "pressure", "pen_color": BLUE, "unit": "bar"}],
        "fit": {"family": "fourier", "degree": 1, "period": 8 * np.pi},
    }
    assert tech.post(f"/api/v1/collections/{collection}/batch-runs", json=body).status_code == 403
    started = reviewer.post(f"/api/v1/collections/{collection}/batch-runs", json=body)
    assert started.status_code == 202, started.text
    run = started.json()
    job = _wait_for(reviewer, run["job_id"], timeout=120)
    assert job["status"] == "succeeded", job
    run = reviewer.get(f"/api/v1/batch-runs/{run['id']}").json()
    assert run["status"] == "finished"
    assert run["counts"] == {"pending": 0, "ready_for_review": 2, "needs_person": 1}
    by_sheet = {item["sheet_id"]: item for item in run["items"]}
    blank = by_sheet[sheets[2]["id"]]
    assert blank["status"] == "needs_person" and "registration refused" in blank["reason"]

    for sheet in sheets[:2]:
        (trace,) = reviewer.get(f"/api/v1/sheets/{sheet['id']}/traces").json()
        samples = np.array([s for s in trace["samples"] if None not in s], dtype=float)
        error = samples[:, 1] - pen_function(samples[:, 0])
        assert np.sqrt(np.mean(error**2)) / FULL_SCALE < 0.002  # no click at all
        history = reviewer.get(f"/api/v1/audit/history/trace/{trace['id']}").json()
        assert "batch run" in history[0]["reason"]
        (fit,) = reviewer.get(f"/api/v1/traces/{trace['id']}/fits").json()
        assert abs(fit["coefficients"]["a0"] - 20) < 0.1 and abs(fit["coefficients"]["b1"] - 10) < 0.1
