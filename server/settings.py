"""Application settings: the one place that reads the environment."""

from __future__ import annotations

from functools import lru_cache
from typing import Literal

from pydantic_settings import BaseSettings, SettingsConfigDict


class Settings(BaseSettings):
    """Settings read from ``LOSSLEDGER_*`` environment variables (or a ``.env`` file)."""

    model_config = SettingsConfigDict(env_prefix="LOSSLEDGER_", env_file=".env", extra="ignore")

    database_url: str = "sqlite:///./lossledger.db"
    env: Literal["development", "test", "production"] = "development"
    host: str = "127.0.0.1"
    port: int = 8000
    # Largest request body accepted, in bytes.
    max_body_bytes: int = 5_000_000
    # Most offers a single lot may hold; protects the ranking from absurd payloads.
    max_offers_per_lot: int = 2_000


@lru_cache
def get_settings() -> Settings:
    """Return the settings, read once per process."""
    return Settings()
