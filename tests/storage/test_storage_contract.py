"""The `FileStore` contract, run against the local folder store and the S3 store (moto's in-memory S3).

Reference values: SHA-256 digests from Python's hashlib (FIPS 180-4), and the FIPS 180-2 example
SHA-256("abc") = ba7816bf 8f01cfea 414140de 5dae2223 b00361a3 96177a9c b410ff61 f20015ad.
"""

from __future__ import annotations

import hashlib
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from tracedesk.storage import (
    ChecksumMismatch,
    FileStore,
    InvalidStorageName,
    LocalFileStore,
    S3FileStore,
    StoredFileMissing,
    sha256_of_file,
    sweep_orphans,
)

ABC_SHA256 = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"


@pytest.fixture(params=["local", "s3"])
def store(request: pytest.FixtureRequest, tmp_path: Path) -> FileStore:
    if request.param == "local":
        return LocalFileStore(tmp_path / "files")
    client = request.getfixturevalue("s3_client")
    bucket = request.getfixturevalue("bucket")
    return S3FileStore(bucket=bucket, prefix="td/", client=client, staging_dir=tmp_path / "staging")


def _file(tmp_path: Path, name: str, data: bytes) -> Path:
    path = tmp_path / name
    path.write_bytes(data)
    return path


def test_put_returns_the_sha256_and_size(store: FileStore, tmp_path: Path) -> None:
    stored = store.put_file(_file(tmp_path, "abc.bin", b"abc"))
    assert (stored.key, stored.size) == (ABC_SHA256, 3)
    assert store.exists(ABC_SHA256)
    assert store.read_verified(ABC_SHA256) == b"abc"
    assert list(store.iter_keys()) == [ABC_SHA256]


def test_put_is_idempotent(store: FileStore, tmp_path: Path) -> None:
    data = bytes(range(256)) * 5000
    first = store.put_file(_file(tmp_path, "a.bin", data))
    second = store.put_file(_file(tmp_path, "b.bin", data))
    third = store.put_file(_file(tmp_path, "c.bin", data), expected_sha256=first.key)
    assert first == second == third
    assert first.key == hashlib.sha256(data).hexdigest()
    assert list(store.iter_keys()) == [first.key]


def test_put_with_a_wrong_expected_hash_stores_nothing(store: FileStore, tmp_path: Path) -> None:
    with pytest.raises(ChecksumMismatch):
        store.put_file(_file(tmp_path, "abc.bin", b"abc"), expected_sha256="0" * 64)
    assert list(store.iter_keys()) == []


def test_open_and_copy_verified(store: FileStore, tmp_path: Path) -> None:
    data = b"scan bytes " * 100_000  # over the S3 spool threshold once repeated
    key = store.put_file(_file(tmp_path, "scan.tif", data)).key
    with store.open_verified(key) as stream:
        assert stream.read() == data
    copy = store.copy_verified(key, tmp_path / "copy.tif")
    assert sha256_of_file(copy) == key


def test_missing_and_malformed_keys(store: FileStore, tmp_path: Path) -> None:
    with pytest.raises(StoredFileMissing):
        store.read_verified("f" * 64)
    for bad in ["../" + "a" * 61, "A" * 64, "abc", "a" * 63 + "\x00"]:
        with pytest.raises(InvalidStorageName):
            store.exists(bad)
    assert not (tmp_path / "copy").exists()


def test_delete(store: FileStore, tmp_path: Path) -> None:
    key = store.put_file(_file(tmp_path, "abc.bin", b"abc")).key
    assert store.delete(key, if_older_than=datetime.now(UTC) - timedelta(hours=1)) is False  # too young
    assert store.delete(key) is True
    assert store.delete(key) is False
    assert not store.exists(key)


def _stage_sheet(store: FileStore, name: str, files: dict[str, bytes]) -> None:
    with store.stage_derived(name) as staging:
        for relative, data in files.items():
            target = staging.path / relative
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_bytes(data)


def test_derived_folder_publish_and_read(store: FileStore) -> None:
    files = {"normalised.tif": b"pixels", "pyramid.dzi": b"<Image/>", "pyramid_files/0/0_0.jpg": b"tile"}
    _stage_sheet(store, "sheet-1", files)
    assert store.derived_exists("sheet-1")
    manifest = store.derived_manifest("sheet-1")
    assert sorted(manifest) == sorted(files)
    for relative, data in files.items():
        assert manifest[relative].sha256 == hashlib.sha256(data).hexdigest()
        with store.open_derived("sheet-1", relative, verify=True) as stream:
            assert stream.read() == data
    assert [entry.name for entry in store.iter_derived()] == ["sheet-1"]


def test_derived_republish_replaces_every_file(store: FileStore) -> None:
    _stage_sheet(store, "sheet-1", {"a.jpg": b"old", "old_only.jpg": b"stale"})
    _stage_sheet(store, "sheet-1", {"a.jpg": b"new"})
    assert sorted(store.derived_manifest("sheet-1")) == ["a.jpg"]
    with store.open_derived("sheet-1", "a.jpg", verify=True) as stream:
        assert stream.read() == b"new"
    with pytest.raises(StoredFileMissing):
        store.open_derived("sheet-1", "old_only.jpg")


def test_failed_build_publishes_nothing(store: FileStore) -> None:
    staging = store.stage_derived("sheet-2")

    def build_then_fail() -> None:
        with staging:
            (staging.path / "normalised.tif").write_bytes(b"half")
            raise RuntimeError("decoder failed")

    with pytest.raises(RuntimeError, match="decoder failed"):
        build_then_fail()
    assert staging.state == "discarded"
    assert not staging.path.exists()
    assert not store.derived_exists("sheet-2")
    assert list(store.iter_derived()) == []


def test_bad_derived_names_and_paths_are_refused(store: FileStore) -> None:
    for bad in ["../etc", "a/b", ".hidden", "", "x" * 101, "sheet\x00"]:
        with pytest.raises(InvalidStorageName):
            store.stage_derived(bad)
    staging = store.stage_derived("sheet-3")
    (staging.path / "has space.jpg").write_bytes(b"x")
    with pytest.raises(InvalidStorageName):
        staging.publish()
    assert not staging.path.exists()
    assert not store.derived_exists("sheet-3")
    _stage_sheet(store, "sheet-4", {"a.jpg": b"x"})
    for bad_path in ["../sheet-3/a.jpg", "/etc/passwd", "pyramid_files/../../x", ".manifest.json"]:
        with pytest.raises(InvalidStorageName):
            store.open_derived("sheet-4", bad_path)


def test_delete_derived(store: FileStore) -> None:
    _stage_sheet(store, "sheet-5", {"a.jpg": b"x", "b/c.jpg": b"y"})
    assert store.delete_derived("sheet-5") is True
    assert not store.derived_exists("sheet-5")
    assert store.delete_derived("sheet-5") is False
    assert list(store.iter_derived()) == []


def test_orphan_sweep_removes_only_old_unreferenced_files(store: FileStore, tmp_path: Path) -> None:
    kept_key = store.put_file(_file(tmp_path, "kept.bin", b"kept")).key
    orphan_key = store.put_file(_file(tmp_path, "orphan.bin", b"orphan")).key
    _stage_sheet(store, "kept-sheet", {"a.jpg": b"1"})
    _stage_sheet(store, "orphan-sheet", {"a.jpg": b"2"})
    references = {"referenced_keys": {kept_key}, "referenced_derived": {"kept-sheet"}}

    young = sweep_orphans(store, **references)  # default grace: everything is younger than a day
    assert (young.removed_keys, young.removed_derived, young.kept_recent) == ([], [], 2)

    later = datetime.now(UTC) + timedelta(days=2)
    dry = sweep_orphans(store, **references, now=later, dry_run=True)
    assert (dry.removed_keys, dry.removed_derived) == ([orphan_key], ["orphan-sheet"])
    assert store.exists(orphan_key)

    swept = sweep_orphans(store, **references, now=later)
    assert (swept.removed_keys, swept.removed_derived) == ([orphan_key], ["orphan-sheet"])
    assert list(store.iter_keys()) == [kept_key]
    assert [entry.name for entry in store.iter_derived()] == ["kept-sheet"]


def test_sweep_refuses_empty_references(store: FileStore) -> None:
    with pytest.raises(ValueError, match="refusing to sweep everything"):
        sweep_orphans(store, referenced_keys=set(), referenced_derived=set())
    report = sweep_orphans(store, referenced_keys=set(), referenced_derived=set(), allow_empty_references=True)
    assert report.removed_keys == []
