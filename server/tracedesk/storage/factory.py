"""Build the configured file store from settings, without importing the settings class (it lives above us)."""

from __future__ import annotations

from pathlib import Path
from typing import Protocol

from tracedesk.storage.local import LocalFileStore
from tracedesk.storage.protocol import FileStore
from tracedesk.storage.s3 import S3FileStore


class StoreSettings(Protocol):
    """The settings fields the store needs (`tracedesk.config.Settings` has them)."""

    @property
    def storage_backend(self) -> str: ...

    @property
    def files_dir(self) -> Path: ...

    @property
    def s3_bucket(self) -> str | None: ...

    @property
    def s3_prefix(self) -> str: ...

    @property
    def s3_endpoint_url(self) -> str | None: ...


def build_store(settings: StoreSettings) -> FileStore:
    """A `LocalFileStore` in ``settings.files_dir``, or an `S3FileStore` when the backend is ``"s3"``.

    Raises
    ------
    ValueError
        An unknown backend, or the S3 backend without a bucket.
    """
    if settings.storage_backend == "local":
        return LocalFileStore(settings.files_dir)
    if settings.storage_backend == "s3":
        if not settings.s3_bucket:
            raise ValueError("TRACEDESK_S3_BUCKET must be set when the storage backend is s3")
        return S3FileStore(
            bucket=settings.s3_bucket,
            prefix=settings.s3_prefix,
            endpoint_url=settings.s3_endpoint_url,
            staging_dir=settings.files_dir / "s3-staging",
        )
    raise ValueError(f"unknown storage backend {settings.storage_backend!r}; use 'local' or 's3'")
