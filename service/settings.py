"""The service's one typed settings object, read from ``CHIRPCAST_*`` environment variables.

Flags of ``chirpcast serve`` override the environment; tests build their own
instance and hand it to :func:`service.app.create_app`.
"""

from __future__ import annotations

import os
from pathlib import Path

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

__all__ = ["ServiceSettings", "default_workers"]


def default_workers() -> int:
    """Cores less one (one is left for the web process), at least one."""
    return max(1, (os.cpu_count() or 1) - 1)


class ServiceSettings(BaseSettings):
    """Everything the web service and its workers are configured by."""

    model_config = SettingsConfigDict(env_prefix="CHIRPCAST_", extra="ignore")

    host: str = "127.0.0.1"
    port: int = Field(default=8000, ge=0, le=65535)
    data_dir: Path = Path("chirpcast-data")
    workers: int = Field(default_factory=default_workers, ge=1)
    max_upload_bytes: int = Field(default=200_000_000, ge=1)
    max_segment_seconds: float = Field(default=1024.0, gt=0)
    max_queue: int = Field(default=32, ge=1)
    rate_per_minute: int = Field(default=30, ge=1)
    heartbeat_seconds: float = Field(default=2.0, gt=0)
    stale_after_seconds: float = Field(default=15.0, gt=0)
    max_attempts: int = Field(default=3, ge=1)
    events_timeout_seconds: float = Field(default=900.0, gt=0)
    public_url: str | None = None

    @property
    def database_path(self) -> Path:
        """The SQLite file of analyses, keys and share tokens."""
        return self.data_dir / "chirpcast.sqlite3"
