"""Uploading scans through the API: accepted formats, duplicates, refusals that leave nothing behind."""

from __future__ import annotations

import hashlib
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import func, select

from tests.archive.scans import multipage_tiff_bytes, pdf_bytes, png_bytes
from tracedesk.db import transaction
from tracedesk.models import Sheet, SourceFile
from tracedesk.web.state import AppState


def _collection(client: TestClient, name: str = "Pump house strip charts") -> int:
    response = client.post("/api/v1/collections", json={"name": name})
    assert response.status_code == 201, response.text
    return int(response.json()["id"])


def _upload(client: TestClient, collection_id: int, *files: tuple[str, bytes, str]):  # type: ignore[no-untyped-def]
    parts = [("files", (name, data, media)) for name, data, media in files]
    return client.post(f"/api/v1/collections/{collection_id}/sheets", files=parts)


def _counts(state: AppState) -> tuple[int, int]:
    with transaction(state.reader) as session:
        sheets = session.scalar(select(func.count()).select_from(Sheet))
        sources = session.scalar(select(func.count()).select_from(SourceFile))
    return int(sheets or 0), int(sources or 0)


def _stored_files(state: AppState) -> list[Path]:
    root = state.settings.files_dir
    return [path for path in root.rglob("*") if path.is_file()] if root.exists() else []


def test_png_upload_gives_a_sheet_with_hash_tiles_and_original(signed_in: dict[str, TestClient]) -> None:
    tech = signed_in["technician"]
    collection_id = _collection(tech)
    data = png_bytes(seed=1)
    response = _upload(tech, collection_id, ("chart-001.png", data, "image/png"))
    assert response.status_code == 201, response.text
    body = response.json()
    assert body["refused"] == []
    (sheet,) = body["sheets"]
    assert (sheet["width"], sheet["height"]) == (640, 400)
    assert sheet["sha256"] == hashlib.sha256(data).hexdigest()
    assert sheet["filename"] == "chart-001.png"
    assert tech.get(f"/api/v1/sheets/{sheet['id']}/original").content == data
    dzi = tech.get(f"/api/v1/sheets/{sheet['id']}/tiles/sheet.dzi")
    assert dzi.status_code == 200 and 'Width="640"' in dzi.text and 'Height="400"' in dzi.text
    tile = tech.get(f"/api/v1/sheets/{sheet['id']}/tiles/sheet_files/0/0_0.jpg")
    assert tile.status_code == 200 and tile.content[:2] == b"\xff\xd8"
    assert tech.get(f"/api/v1/sheets/{sheet['id']}/thumbnail").content[:2] == b"\xff\xd8"


def test_multipage_tiff_and_pdf_give_one_sheet_per_page(signed_in: dict[str, TestClient]) -> None:
    tech = signed_in["technician"]
    collection_id = _collection(tech)
    response = _upload(
        tech,
        collection_id,
        ("week.tif", multipage_tiff_bytes(3), "image/tiff"),
        ("lab-plots.pdf", pdf_bytes(2), "application/pdf"),
    )
    assert response.status_code == 201, response.text
    sheets = response.json()["sheets"]
    assert [(s["filename"], s["page_index"]) for s in sheets] == [
        ("week.tif", 0),
        ("week.tif", 1),
        ("week.tif", 2),
        ("lab-plots.pdf", 0),
        ("lab-plots.pdf", 1),
    ]
    pdf_sheet = sheets[3]
    # A 640 x 400 image saved at 72 dpi is an 8.889 x 5.556 inch page; at 300 dpi: 2667 x 1667 pixels (rounded).
    assert abs(pdf_sheet["width"] - 2667) <= 1 and abs(pdf_sheet["height"] - 1667) <= 1


def test_exact_duplicate_in_same_collection_is_refused_naming_the_sheet(
    signed_in: dict[str, TestClient], state: AppState
) -> None:
    tech = signed_in["technician"]
    collection_id = _collection(tech)
    data = png_bytes(seed=2)
    first = _upload(tech, collection_id, ("a.png", data, "image/png")).json()["sheets"][0]
    again = _upload(tech, collection_id, ("renamed.png", data, "image/png"))
    assert again.status_code == 409
    assert f"#{first['id']}" in again.json()["refused"][0]["reason"]
    other = _collection(tech, "Second box")
    assert _upload(tech, other, ("a.png", data, "image/png")).status_code == 201
    assert _counts(state) == (2, 1)  # one stored original shared by both collections


@pytest.mark.parametrize(
    ("name", "data", "media", "status"),
    [
        ("looks.png", b"<svg xmlns='http://www.w3.org/2000/svg'></svg>", "image/png", 415),
        ("empty.png", b"", "image/png", 422),
        ("cut.png", png_bytes(seed=3)[:300], "image/png", 422),
        ("../../etc/passwd.png", b"GIF89a" + b"\x00" * 64, "image/png", 415),
    ],
)
def test_bad_files_are_refused_and_leave_nothing(
    signed_in: dict[str, TestClient], state: AppState, name: str, data: bytes, media: str, status: int
) -> None:
    tech = signed_in["technician"]
    collection_id = _collection(tech)
    before_files = _stored_files(state)
    response = _upload(tech, collection_id, (name, data, media))
    assert response.status_code == status, response.text
    assert response.json()["refused"][0]["reason"]
    assert _counts(state) == (0, 0)
    assert _stored_files(state) == before_files


def test_mixed_batch_keeps_the_good_and_explains_the_bad(signed_in: dict[str, TestClient]) -> None:
    tech = signed_in["technician"]
    collection_id = _collection(tech)
    response = _upload(
        tech, collection_id, ("good.png", png_bytes(seed=4), "image/png"), ("bad.png", b"not an image", "image/png")
    )
    assert response.status_code == 201
    body = response.json()
    assert [s["filename"] for s in body["sheets"]] == ["good.png"]
    assert body["refused"][0]["filename"] == "bad.png"


def test_viewers_cannot_upload(signed_in: dict[str, TestClient]) -> None:
    collection_id = _collection(signed_in["technician"])
    response = _upload(signed_in["viewer"], collection_id, ("a.png", png_bytes(), "image/png"))
    assert response.status_code == 403
