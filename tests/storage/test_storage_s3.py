"""S3 store specifics, against moto's in-memory S3: object names, checksums sent, corruption, interrupted publish.

Reference: the S3 `x-amz-checksum-sha256` header is the base64 of the raw SHA-256 digest (AWS S3 API reference,
"Checking object integrity", from memory); FIPS 180-2 example SHA-256("abc") as in the contract tests.
"""

from __future__ import annotations

import base64
import errno
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import pytest

from tracedesk.storage import MANIFEST_NAME, S3FileStore, StorageFull, StoredFileCorrupt, sweep_orphans

ABC_SHA256 = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"


@pytest.fixture
def client(s3_client: Any, bucket: str) -> Any:
    return s3_client


@pytest.fixture
def store(client: Any, bucket: str, tmp_path: Path) -> S3FileStore:
    return S3FileStore(bucket=bucket, prefix="/archive/", client=client, staging_dir=tmp_path / "staging")


@pytest.fixture
def source(tmp_path: Path) -> Path:
    path = tmp_path / "abc.bin"
    path.write_bytes(b"abc")
    return path


def _all_object_names(client: Any, bucket: str) -> list[str]:
    return sorted(item["Key"] for item in client.list_objects_v2(Bucket=bucket).get("Contents", []))


def test_object_layout_and_checksum_sent(store: S3FileStore, client: Any, source: Path) -> None:
    sent: list[dict[str, Any]] = []
    client.meta.events.register("before-call.s3.PutObject", lambda params, **_: sent.append(params))
    store.put_file(source)
    assert _all_object_names(client, store.bucket) == [f"archive/originals/ba/78/{ABC_SHA256}"]
    head = client.head_object(Bucket=store.bucket, Key=f"archive/originals/ba/78/{ABC_SHA256}")
    assert head["Metadata"] == {"sha256": ABC_SHA256}
    headers = sent[0]["headers"]
    assert headers["x-amz-checksum-sha256"] == base64.b64encode(bytes.fromhex(ABC_SHA256)).decode()


def test_replaced_object_is_detected_on_read(store: S3FileStore, client: Any, source: Path, tmp_path: Path) -> None:
    key = store.put_file(source).key
    client.put_object(Bucket=store.bucket, Key=store.object_name(key), Body=b"abd")
    with pytest.raises(StoredFileCorrupt) as corrupt:
        store.read_verified(key)
    assert corrupt.value.key == key
    destination = tmp_path / "copy.bin"
    with pytest.raises(StoredFileCorrupt):
        store.copy_verified(key, destination)
    assert not destination.exists()
    assert [entry.name for entry in tmp_path.iterdir() if entry.name.endswith(".part")] == []


def test_derived_corruption_is_detected(store: S3FileStore, client: Any) -> None:
    with store.stage_derived("sheet-1") as staging:
        (staging.path / "thumbnail.jpg").write_bytes(b"jpeg")
    client.put_object(Bucket=store.bucket, Key="archive/derived/sheet-1/thumbnail.jpg", Body=b"jpeh")
    with pytest.raises(StoredFileCorrupt):
        store.open_derived("sheet-1", "thumbnail.jpg", verify=True)
    assert list(store.staging_dir.iterdir()) == []  # staging folder removed after upload


def test_interrupted_publish_is_unpublished_and_swept(store: S3FileStore, client: Any) -> None:
    # Tiles uploaded, manifest never written (process killed mid-publish).
    client.put_object(Bucket=store.bucket, Key="archive/derived/sheet-9/pyramid_files/0/0_0.jpg", Body=b"tile")
    entries = list(store.iter_derived())
    assert [(entry.name, entry.published) for entry in entries] == [("sheet-9", False)]
    assert not store.derived_exists("sheet-9")
    later = datetime.now(UTC) + timedelta(days=2)
    report = sweep_orphans(store, referenced_keys=set(), referenced_derived={"other"}, now=later)
    assert report.removed_derived == ["sheet-9"]
    assert _all_object_names(client, store.bucket) == []


def test_manifest_is_uploaded_last(store: S3FileStore, client: Any) -> None:
    order: list[str] = []
    client.meta.events.register("before-call.s3.PutObject", lambda params, **_: order.append(params["url_path"]))
    with store.stage_derived("sheet-2") as staging:
        for index in range(5):
            (staging.path / f"tile_{index}.jpg").write_bytes(bytes([index]))
    assert order[-1].endswith(MANIFEST_NAME)
    assert len(order) == 6


def test_disk_full_while_downloading_leaves_nothing(
    store: S3FileStore, source: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    key = store.put_file(source).key
    real_open = Path.open

    class FullFile:
        def __init__(self, target: Any) -> None:
            self._target = target

        def __enter__(self) -> FullFile:
            return self

        def __exit__(self, *exc: object) -> None:
            self._target.close()

        def write(self, data: bytes) -> int:
            raise OSError(errno.ENOSPC, "No space left on device")

    def open_full_for_parts(path: Path, *args: Any, **kwargs: Any) -> Any:
        handle = real_open(path, *args, **kwargs)
        return FullFile(handle) if path.name.endswith(".part") else handle

    monkeypatch.setattr(Path, "open", open_full_for_parts)
    destination = tmp_path / "download" / "copy.bin"
    destination.parent.mkdir()
    with pytest.raises(StorageFull):
        store.copy_verified(key, destination)
    assert list(destination.parent.iterdir()) == []
