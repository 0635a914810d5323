"""Application settings: the one place that reads the environment."""

from __future__ import annotations

from functools import lru_cache
from typing import Literal

from pydantic_settings import BaseSettings, SettingsConfigDict


DEFAULT_SECRET = "development-only-secret-change-me"


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
    # Signs the session cookie. Production refuses to start with the default.
    secret_key: str = DEFAULT_SECRET
    session_idle_minutes: int = 30
    session_max_hours: int = 12
    token_minutes: int = 60
    # Login throttling: this many failures within the window lock an account (or an address).
    lockout_failures: int = 10
    address_lockout_failures: int = 50
    lockout_minutes: int = 15

    def check_production(self) -> None:
        """Refuse settings that are unsafe outside development."""
        if self.env != "production":
            return
        if self.secret_key == DEFAULT_SECRET or len(self.secret_key) < 32:
            raise RuntimeError(
                "LOSSLEDGER_SECRET_KEY must be set to a long random value (32+ characters) in production."
            )


@lru_cache
def get_settings() -> Settings:
    """Return the settings, read once per process."""
    return Settings()
