"""Runtime settings, read from the environment (prefix ``TRACEDESK_``) with pydantic-settings."""

from __future__ import annotations

from pathlib import Path
from typing import Literal

from pydantic import Field, model_validator
from pydantic_settings import BaseSettings, SettingsConfigDict

DEVELOPMENT_SECRET = "development-only-secret-change-me"  # noqa: S105 - a marker, refused outside development


class Settings(BaseSettings):
    """Everything the service needs to start; one instance is passed to ``create_app``."""

    model_config = SettingsConfigDict(env_prefix="TRACEDESK_", extra="ignore")

    environment: Literal["development", "test", "production"] = "development"
    data_dir: Path = Path("var")
    database_url: str | None = None
    secret_key: str = DEVELOPMENT_SECRET
    base_url: str = "http://127.0.0.1:8000"
    # Tracedesk's own logs (JSON lines on standard error, one per request with its id and duration).
    log_level: Literal["DEBUG", "INFO", "WARNING", "ERROR"] = "INFO"

    # Sessions (seconds). Idle and absolute limits follow OWASP session-management guidance.
    session_idle_timeout: int = 30 * 60
    session_absolute_timeout: int = 12 * 60 * 60
    cookie_secure: bool | None = None

    # Login throttling: failures allowed per account / per address inside the window.
    login_window_seconds: int = 15 * 60
    login_max_failures_per_account: int = 5
    login_max_failures_per_address: int = 20

    # Uploads and decoding limits.
    max_upload_bytes: int = 512 * 1024 * 1024
    max_pixels_per_page: int = 120_000_000
    max_pages_per_file: int = 500
    pdf_dpi: int = 300
    # Each page is decoded in a child process with this wall-clock time and address space (tracedesk.imaging).
    decode_timeout_seconds: float = Field(default=60.0, gt=0)
    decode_memory_mib: int = Field(default=2048, ge=256)
    # Wall-clock seconds all the pages of one uploaded file may take to decode together (10 x the page limit):
    # past it the file is refused, naming the page it reached, and nothing of it is kept.
    decode_file_seconds: float = Field(default=600.0, gt=0, allow_inf_nan=False)
    # Decodes running at once in each web or worker process; memory used by decoding stays below this many times
    # decode_memory_mib. Two suits the two-core reference machine.
    decode_parallel: int = Field(default=2, ge=1, le=64)

    # Storage backend: "local" (data_dir/files) or "s3".
    storage_backend: Literal["local", "s3"] = "local"
    s3_bucket: str | None = None
    s3_prefix: str = ""
    s3_endpoint_url: str | None = None

    # Background jobs: "inprocess" (a thread pool in each web process) or "rq" (Redis + `tracedesk worker`).
    job_backend: Literal["inprocess", "rq"] = "inprocess"
    job_threads: int = Field(default=2, ge=1, le=32)
    redis_url: str | None = None
    rq_queue: str = Field(default="tracedesk", pattern=r"^[A-Za-z0-9_.-]{1,64}$")

    argon2_memory_kib: int = Field(default=19 * 1024, ge=19 * 1024)
    argon2_time_cost: int = Field(default=2, ge=2)

    @model_validator(mode="after")
    def _refuse_default_secret(self) -> Settings:
        if self.environment == "production" and self.secret_key == DEVELOPMENT_SECRET:
            raise ValueError(
                "TRACEDESK_SECRET_KEY must be set to a long random value outside development "
                "(e.g. `python -c 'import secrets; print(secrets.token_urlsafe(48))'`)"
            )
        if self.environment == "production" and len(self.secret_key) < 32:
            raise ValueError("TRACEDESK_SECRET_KEY must be at least 32 characters long")
        return self

    @property
    def resolved_database_url(self) -> str:
        """The database URL: the configured one, else an embedded SQLite file in the data folder."""
        if self.database_url:
            return self.database_url
        return f"sqlite:///{(self.data_dir / 'tracedesk.sqlite3').resolve()}"

    @property
    def files_dir(self) -> Path:
        return self.data_dir / "files"

    @property
    def secure_cookies(self) -> bool:
        if self.cookie_secure is not None:
            return self.cookie_secure
        return self.base_url.startswith("https://")
