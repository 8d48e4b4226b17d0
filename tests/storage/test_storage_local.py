"""Local folder store: layout, durability order (write, fsync, rename, fsync folder), corruption, disk full.

The durability sequence is the one POSIX requires for a crash-safe replace (fsync the data, rename, fsync the
directory; see the rename(2) and fsync(2) manual pages, from memory).
"""

from __future__ import annotations

import errno
import os
import stat
from datetime import UTC, datetime, timedelta
from pathlib import Path
from types import SimpleNamespace

import pytest

from tracedesk.storage import (
    LocalFileStore,
    StorageError,
    StorageFull,
    StoredFileCorrupt,
    build_store,
    sweep_orphans,
)
from tracedesk.storage.hashing import HashingWriter

ABC_SHA256 = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"  # FIPS 180-2 example


@pytest.fixture
def store(tmp_path: Path) -> LocalFileStore:
    return LocalFileStore(tmp_path / "files")


@pytest.fixture
def source(tmp_path: Path) -> Path:
    path = tmp_path / "upload.bin"
    path.write_bytes(b"abc")
    return path


def _temp_entries(store: LocalFileStore) -> list[str]:
    return sorted(entry.name for entry in store.temp_dir.iterdir())


def test_layout_and_read_only_originals(store: LocalFileStore, source: Path) -> None:
    store.put_file(source)
    final = store.root / "originals" / "ba" / "78" / ABC_SHA256
    assert store.path_for(ABC_SHA256) == final
    assert final.read_bytes() == b"abc"
    assert stat.S_IMODE(final.stat().st_mode) == 0o440
    assert source.read_bytes() == b"abc"  # the source is copied, not moved
    assert _temp_entries(store) == []


def test_durability_order(store: LocalFileStore, source: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    events: list[str] = []
    real_fsync, real_replace = os.fsync, os.replace

    def logging_fsync(descriptor: int) -> None:
        target = Path(os.readlink(f"/proc/self/fd/{descriptor}"))
        events.append(f"fsync {'folder' if target.is_dir() else 'file'} {target.name}")
        real_fsync(descriptor)

    def logging_replace(src: str | Path, dst: str | Path) -> None:
        events.append(f"replace {Path(dst).name}")
        real_replace(src, dst)

    monkeypatch.setattr(os, "fsync", logging_fsync)
    monkeypatch.setattr(os, "replace", logging_replace)
    store.put_file(source)
    file_synced = next(i for i, event in enumerate(events) if event.startswith("fsync file incoming-"))
    replaced = events.index(f"replace {ABC_SHA256}")
    folder_synced = events.index("fsync folder 78")
    assert file_synced < replaced < folder_synced


def test_crash_before_rename_leaves_nothing(
    store: LocalFileStore, source: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    def failing_replace(src: str | Path, dst: str | Path) -> None:
        raise OSError(errno.EIO, "simulated I/O error")

    monkeypatch.setattr(os, "replace", failing_replace)
    with pytest.raises(StorageError, match="simulated I/O error"):
        store.put_file(source)
    assert not store.exists(ABC_SHA256)
    assert _temp_entries(store) == []


@pytest.mark.parametrize("failing", ["write", "fsync"])
def test_disk_full_is_a_clear_error_and_leaves_no_temp_file(
    store: LocalFileStore, tmp_path: Path, monkeypatch: pytest.MonkeyPatch, failing: str
) -> None:
    big = tmp_path / "big.bin"
    big.write_bytes(os.urandom(3 * 1024 * 1024))  # several chunks, so the failure is mid-file

    calls = {"count": 0}
    real = getattr(os, failing)

    def full_disk(*args: object) -> object:
        calls["count"] += 1
        if calls["count"] >= 2 or failing == "fsync":
            raise OSError(errno.ENOSPC, "No space left on device")
        return real(*args)

    monkeypatch.setattr(os, failing, full_disk)
    with pytest.raises(StorageFull, match="no space left") as refused:
        store.put_file(big)
    assert refused.value.http_status == 507
    monkeypatch.undo()
    assert _temp_entries(store) == []
    assert list(store.iter_keys()) == []


def test_flipped_byte_is_detected_on_read(store: LocalFileStore, source: Path, tmp_path: Path) -> None:
    key = store.put_file(source).key
    final = store.path_for(key)
    final.chmod(0o640)
    final.write_bytes(b"abd")
    with pytest.raises(StoredFileCorrupt) as corrupt:
        store.read_verified(key)
    assert corrupt.value.key == key
    assert corrupt.value.actual_sha256 != key
    with pytest.raises(StoredFileCorrupt):
        store.open_verified(key)
    with pytest.raises(StoredFileCorrupt):
        store.copy_verified(key, tmp_path / "copy.bin")


def test_put_repairs_a_copy_of_the_wrong_size(store: LocalFileStore, source: Path) -> None:
    key = store.put_file(source).key
    final = store.path_for(key)
    final.chmod(0o640)
    final.write_bytes(b"ab")  # truncated by some accident
    store.put_file(source)
    assert store.read_verified(key) == b"abc"


def test_idempotent_put_refreshes_the_write_time(store: LocalFileStore, source: Path) -> None:
    """Otherwise a sweep running during a re-upload could delete the file the new row points at."""
    key = store.put_file(source).key
    old = (datetime.now(UTC) - timedelta(days=3)).timestamp()
    os.utime(store.path_for(key), (old, old))
    store.put_file(source, expected_sha256=key)
    assert store.path_for(key).stat().st_mtime > old + 86400
    report = sweep_orphans(store, referenced_keys={"f" * 64}, referenced_derived=set())
    assert report.removed_keys == []


def test_derived_flipped_byte_detected_and_published_folder_is_durable(store: LocalFileStore) -> None:
    with store.stage_derived("sheet-1") as staging:
        (staging.path / "thumbnail.jpg").write_bytes(b"jpeg bytes")
    tile = store.derived_file_path("sheet-1", "thumbnail.jpg")
    assert tile == store.root / "derived" / "sheet-1" / "thumbnail.jpg"
    tile.write_bytes(b"jpeg bytez")
    with pytest.raises(StoredFileCorrupt):
        store.open_derived("sheet-1", "thumbnail.jpg", verify=True)
    with store.open_derived("sheet-1", "thumbnail.jpg") as unverified:  # tiles are served unverified
        assert unverified.read() == b"jpeg bytez"
    assert _temp_entries(store) == []


def test_sweep_removes_crash_leftovers_in_tmp(store: LocalFileStore) -> None:
    leftover = store.temp_dir / "incoming-dead"
    leftover.write_bytes(b"partial")
    staging_leftover = store.temp_dir / "incoming-dead.derived"
    staging_leftover.mkdir()
    old = (datetime.now(UTC) - timedelta(days=2)).timestamp()
    for path in (leftover, staging_leftover):
        os.utime(path, (old, old))
    fresh = store.temp_dir / "incoming-live"
    fresh.write_bytes(b"in flight")
    report = sweep_orphans(store, referenced_keys={"f" * 64}, referenced_derived=set())
    assert sorted(report.removed_temporaries) == ["incoming-dead", "incoming-dead.derived"]
    assert _temp_entries(store) == ["incoming-live"]


def test_hashing_writer_matches_hashlib(tmp_path: Path) -> None:
    path = tmp_path / "received.bin"
    with path.open("wb") as target:
        writer = HashingWriter(target)
        for part in (b"a", b"b", b"c"):
            writer.write(part)
    assert (writer.hexdigest(), writer.size) == (ABC_SHA256, 3)
    assert path.read_bytes() == b"abc"


def test_build_store_from_settings(tmp_path: Path) -> None:
    local = build_store(
        SimpleNamespace(
            storage_backend="local", files_dir=tmp_path / "f", s3_bucket=None, s3_prefix="", s3_endpoint_url=None
        )
    )
    assert isinstance(local, LocalFileStore)
    with pytest.raises(ValueError, match="S3_BUCKET"):
        build_store(
            SimpleNamespace(
                storage_backend="s3", files_dir=tmp_path / "f", s3_bucket=None, s3_prefix="", s3_endpoint_url=None
            )
        )
