"""The hostile upload corpus through the HTTP API, end to end (tests/imaging covers the decoding layer alone).

Every file must be refused with its 4xx status and a reason, leave no row in any table and no file in the store,
its temp folders or anywhere else, and be refused in bounded memory: the growth of the process's peak resident
set (VmHWM, which sees Pillow, libvips and PDFium allocations) stays under 64 MiB, where decoding any of the
claimed sizes would take gigabytes (RELIABILITY.md, "Uploads and decoding").
"""

from __future__ import annotations

import functools
import json

import pytest

from tests.archive.scans import pdf_bytes, png_bytes
from tests.imaging.imaging_samples import measure_memory, pdf_one_page_with_stream, pdf_stream, zlib_bomb
from tests.reliability.campaign import Campaign, new_collection, row_counts, stored_files, upload
from tests.reliability.conftest import Figures
from tests.reliability.hostile_files import Hostile, corpus

RSS_GROWTH_LIMIT = 64 * 2**20
PDF_IMAGE_BOMB_SIDE = 20_000  # a 400 Mpx greyscale image XObject on a 100 x 100 pt page


@functools.cache
def _corpus() -> tuple[Hostile, ...]:
    return tuple(corpus())


CORPUS_LABELS = [entry.label for entry in _corpus()]


@pytest.fixture(scope="module")
def box(campaign: Campaign) -> int:
    """A collection to upload into, after one good PNG and PDF warmed up the decoders (their code pages would
    otherwise count as memory growth of the first hostile file)."""
    client = campaign.client("technician")
    collection_id = new_collection(client, "Hostile uploads")
    for name, data in (("warm.png", png_bytes(seed=77)), ("warm.pdf", pdf_bytes(1))):
        assert upload(client, collection_id, name, data, "").status_code == 201
    return collection_id


def _problems(response_status: int, body: dict[str, object], expected: int) -> list[str]:
    problems = []
    if response_status != expected:
        problems.append(f"status {response_status}, expected {expected}")
    refused = body.get("refused") or [{}]
    first = refused[0] if isinstance(refused, list) and refused else {}
    reason = str(body.get("detail") or "")
    if not reason or not isinstance(first, dict) or first.get("reason") != reason:
        problems.append("no clear reason in the answer")
    if body.get("sheets"):
        problems.append("sheets were created")
    name = str(first.get("filename", "")) if isinstance(first, dict) else ""
    if any(part in name for part in ("/", "\\", "\x00", "..")):
        problems.append(f"the answer echoes an unsafe file name {name!r}")
    if "<script" in reason.lower() or "<svg" in reason.lower():
        problems.append("the answer echoes markup from the file")
    return problems


@pytest.mark.parametrize("label", CORPUS_LABELS)
def test_hostile_file_is_refused_with_a_reason_and_leaves_nothing(
    campaign: Campaign, box: int, figures: Figures, label: str
) -> None:
    entry = next(item for item in _corpus() if item.label == label)
    client = campaign.client("technician")
    rows_before, files_before = row_counts(campaign.state), stored_files(campaign.state)
    with measure_memory() as memory:
        response = upload(client, box, entry.filename, entry.data, entry.media_type)
    problems = _problems(response.status_code, response.json(), entry.status)
    if response.headers.get("content-type") != "application/json":
        problems.append("the answer is not JSON")
    rows_left = {t: n - rows_before[t] for t, n in row_counts(campaign.state).items() if n != rows_before[t]}
    files_left = stored_files(campaign.state) - files_before
    if rows_left or files_left:
        problems.append(f"left behind: rows {rows_left}, files {sorted(files_left)}")
    if memory.rss_growth is not None and memory.rss_growth > RSS_GROWTH_LIMIT:
        problems.append(f"peak memory grew by {memory.rss_growth / 2**20:.0f} MiB")
    figures.add(cases=1, failures=int(bool(problems)))
    assert not problems, f"{label}: {problems}; answer {response.text[:300]}"


def test_a_batch_of_hostile_files_is_refused_file_by_file(campaign: Campaign, box: int, figures: Figures) -> None:
    chosen = [item for item in _corpus() if item.status in {413, 415, 422}][::4]
    parts = [("files", (item.filename, item.data, item.media_type)) for item in chosen]
    rows_before, files_before = row_counts(campaign.state), stored_files(campaign.state)
    response = campaign.client("technician").post(f"/api/v1/collections/{box}/sheets", files=parts)
    body = response.json()
    statuses = [refusal["status"] for refusal in body["refused"]]
    problems = [] if statuses == [item.status for item in chosen] else [f"statuses {statuses}"]
    if response.status_code != chosen[0].status:
        problems.append(f"answer status {response.status_code}")
    if row_counts(campaign.state) != rows_before or stored_files(campaign.state) != files_before:
        problems.append("something was left behind")
    figures.add(cases=len(chosen), failures=len(problems))
    assert not problems


def _raw_multipart(filename: bytes, data: bytes, media_type: bytes = b"image/png") -> tuple[bytes, str]:
    """A multipart body written by hand, so the file name reaches the server byte for byte (NUL included)."""
    boundary = "reliability-boundary-7b1c"
    head = (
        f"--{boundary}\r\n".encode()
        + b'Content-Disposition: form-data; name="files"; filename="'
        + filename
        + b'"\r\nContent-Type: '
        + media_type
        + b"\r\n\r\n"
    )
    return head + data + f"\r\n--{boundary}--\r\n".encode(), f"multipart/form-data; boundary={boundary}"


HOSTILE_NAMES = [
    b"../../../../tmp/escaped.png",
    b"..\\..\\..\\windows\\win.ini.png",
    b"/etc/cron.d/evil.png",
    b"evil\x00.png",
    b"nul\x00../../x.png",
    b"\xff\xfe\x00bad-utf8.png",
    b"con.png",
    b"a" * 400 + b".png",
]


def _name_problems(response_status: int, body: dict[str, object], data_dir_files: set[str]) -> list[str]:
    if response_status >= 500:
        return [f"server error {response_status}"]
    if response_status >= 400:  # a refusal of the name itself is fine, if it is explained
        return [] if body.get("detail") else ["refused without a reason"]
    sheets = body.get("sheets")
    name = str(sheets[0]["filename"]) if isinstance(sheets, list) and sheets else ""
    problems = []
    if any(part in name for part in ("/", "\\", "\x00")) or len(name) > 255:
        problems.append(f"stored name {name!r} keeps path parts, NUL or its length")
    if any("escaped" in path or "win.ini" in path or "evil" in path for path in data_dir_files):
        problems.append("a file was written under the user's name")
    return problems


@pytest.mark.parametrize("raw_name", HOSTILE_NAMES, ids=range(len(HOSTILE_NAMES)))
def test_hostile_file_names_are_metadata_only(
    campaign: Campaign, box: int, figures: Figures, raw_name: bytes, tmp_path_factory: pytest.TempPathFactory
) -> None:
    """A good scan under a hostile name is stored under its content hash; the name is cleaned metadata."""
    client = campaign.client("technician")
    data = png_bytes(seed=500 + HOSTILE_NAMES.index(raw_name))
    body, content_type = _raw_multipart(raw_name, data)
    response = client.post(f"/api/v1/collections/{box}/sheets", content=body, headers={"content-type": content_type})
    answer = response.json() if response.headers.get("content-type") == "application/json" else {}
    problems = _name_problems(response.status_code, answer, stored_files(campaign.state))
    escaped = campaign.settings.data_dir.parent.parent.rglob("escaped.png")
    if any(True for _ in escaped):
        problems.append("a file escaped the data folder")
    figures.add(cases=1, failures=len(problems))
    assert not problems, f"{raw_name!r}: {problems}; {response.text[:200]}"


def test_file_over_the_byte_limit_is_refused_while_receiving(
    campaign: Campaign, box: int, figures: Figures, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(campaign.settings, "max_upload_bytes", 4096)
    rows_before, files_before = row_counts(campaign.state), stored_files(campaign.state)
    response = upload(campaign.client("technician"), box, "big.png", png_bytes(seed=600), "image/png")
    problems = _problems(response.status_code, response.json(), 413)
    if row_counts(campaign.state) != rows_before or stored_files(campaign.state) != files_before:
        problems.append("something was left behind")
    figures.add(cases=1, failures=len(problems))
    assert not problems


def _pdf_with_image_bomb(side: int) -> bytes:
    """A one-page PDF (100 x 100 pt) drawing a side x side greyscale Flate image (PDF 1.7 sec. 8.9.5)."""
    image = pdf_stream(
        b"/Type /XObject /Subtype /Image /Width %d /Height %d /ColorSpace /DeviceGray /BitsPerComponent 8 "
        b"/Filter /FlateDecode" % (side, side),
        zlib_bomb(side * side, fill=0),
    )
    page = (
        b"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 100 100] /Resources << /XObject << /Im0 5 0 R >> >> "
        b"/Contents 4 0 R >>"
    )
    return pdf_one_page_with_stream(page, pdf_stream(b"", b"q 100 0 0 100 0 0 cm /Im0 Do Q"), image)


def test_pdf_page_drawing_a_400_megapixel_image_renders_at_page_size_in_bounded_memory(
    campaign: Campaign, box: int, figures: Figures
) -> None:
    """The page box, not the embedded image, sets the rendered size: 100 pt at 300 dpi = ceil(416.7) = 417 px."""
    data = _pdf_with_image_bomb(PDF_IMAGE_BOMB_SIDE)
    with measure_memory() as memory:
        response = upload(campaign.client("technician"), box, "inflates.pdf", data, "application/pdf")
    problems = [] if response.status_code == 201 else [f"status {response.status_code}: {response.text[:200]}"]
    sheets = response.json().get("sheets") or [{}]
    if (sheets[0].get("width"), sheets[0].get("height")) != (417, 417):
        problems.append(f"rendered as {json.dumps(sheets[0])[:120]}")
    if memory.rss_growth is not None and memory.rss_growth > RSS_GROWTH_LIMIT:
        problems.append(f"peak memory grew by {memory.rss_growth / 2**20:.0f} MiB")
    figures.add(cases=1, failures=len(problems))
    assert not problems


def test_viewer_and_anonymous_uploads_are_refused_before_reading_the_file(
    campaign: Campaign, box: int, figures: Figures
) -> None:
    rows_before, files_before = row_counts(campaign.state), stored_files(campaign.state)
    statuses = [
        upload(campaign.client(role), box, "a.png", png_bytes(seed=700), "image/png").status_code
        for role in ("viewer", None)
    ]
    left = row_counts(campaign.state) != rows_before or stored_files(campaign.state) != files_before
    figures.add(cases=2, failures=int(statuses != [403, 401]) + int(left))
    assert statuses == [403, 401]
    assert not left
