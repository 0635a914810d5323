"""Application settings: the one place that reads the environment."""

from __future__ import annotations

import re
from functools import lru_cache
from typing import Literal

from pydantic import Field, field_validator
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
    # Proxies whose X-Forwarded-For and X-Forwarded-Proto are believed (comma-separated addresses
    # or networks, "*" for any): the client address (log-in lockouts, the audit trail, request
    # logs) is then the one the proxy saw. Uvicorn's own default: a proxy on this host only.
    trusted_proxies: str = "127.0.0.1,::1"
    # The address people use, e.g. "https://lossledger.example.org": unsafe requests made with
    # the session cookie must come from it (Origin or Referer). Empty: the request's own Host.
    public_origin: str = ""
    # Login throttling: this many failures within the window lock an account (or an address).
    lockout_failures: int = 10
    address_lockout_failures: int = 50
    lockout_minutes: int = 15
    # Keys that sign evaluation records (HMAC-SHA256), as "id=secret" pairs separated by commas;
    # the first signs new records, every one listed still verifies the records it signed.
    # Empty: records are sealed with their SHA-256 alone.
    seal_keys: str = ""
    # Long work on the job queue (server/jobs.py). Whether a web process runs jobs itself: unset,
    # it does on SQLite (embedded use, one host) and does not on PostgreSQL, where
    # `lossledger worker` runs them; true makes every web process run them as well.
    jobs_in_web: bool | None = None
    # Jobs one process runs at once: a web process's own runner, and `lossledger worker` unless
    # its --concurrency says otherwise.
    job_concurrency: int = Field(default=2, ge=1, le=64)
    # Threads one Monte Carlo uses, in a job or in a request: the cores are shared by everyone.
    monte_carlo_threads: int = Field(default=1, ge=1, le=8)
    # Most draws a Monte Carlo computes while its request waits; a larger one is queued as a run.
    max_sync_draws: int = Field(default=20_000, ge=1)
    # Jobs one person may have waiting or running at once.
    max_open_jobs_per_person: int = Field(default=3, ge=1)
    # A worker says it is alive this often; one silent for job_worker_timeout_s is taken for dead
    # and its jobs are failed (at once on its own host, where a process that is gone shows).
    job_heartbeat_s: float = Field(default=10.0, gt=0)
    job_worker_timeout_s: float = Field(default=30.0, gt=0)
    # How often an idle runner looks for jobs another process queued (its own it sees at once).
    job_poll_s: float = Field(default=2.0, gt=0)

    def runs_jobs_in_web(self) -> bool:
        """Whether a web process runs jobs (``jobs_in_web``, else only on SQLite)."""
        if self.jobs_in_web is not None:
            return self.jobs_in_web
        return self.database_url.startswith("sqlite")

    def seal_key_map(self) -> dict[str, str]:
        """The seal keys by id, in the order given (the first is the one that signs)."""
        keys: dict[str, str] = {}
        for part in self.seal_keys.split(","):
            key_id, sep, secret = part.strip().partition("=")
            if sep and key_id.strip() and secret.strip():
                keys[key_id.strip()] = secret.strip()
        return keys

    @field_validator("public_origin")
    @classmethod
    def _scheme_and_host(cls, value: str) -> str:
        value = value.strip().rstrip("/")
        if value and not re.fullmatch(r"https?://[^/\s?#@]+", value):
            raise ValueError("give the scheme and host people use, e.g. https://lossledger.example.org")
        return value

    def check_production(self) -> None:
        """Refuse settings that are unsafe outside development."""
        if self.env != "production":
            return
        if self.secret_key == DEFAULT_SECRET or len(self.secret_key) < 32:
            raise RuntimeError(
                "LOSSLEDGER_SECRET_KEY must be set to a long random value (32+ characters) in production."
            )
        if any(len(secret) < 32 for secret in self.seal_key_map().values()):
            raise RuntimeError("Each LOSSLEDGER_SEAL_KEYS secret must be 32+ random characters in production.")


@lru_cache
def get_settings() -> Settings:
    """Return the settings, read once per process."""
    return Settings()
