"""Passwords, session and API tokens, and the signed session cookie."""

from __future__ import annotations

import hashlib
import hmac
import secrets

from itsdangerous import BadSignature, Signer
from pwdlib import PasswordHash

_hasher = PasswordHash.recommended()  # argon2id with the library's current parameters
# A hash to verify against when the user does not exist, so both paths take as long.
_DUMMY_HASH = _hasher.hash("not-a-real-password")

SESSION_COOKIE = "lossledger_session"
CSRF_HEADER = "X-CSRF-Token"
CSRF_FIELD = "csrf_token"


def hash_password(password: str) -> str:
    return _hasher.hash(password)


def verify_password(password: str, password_hash: str | None) -> bool:
    if password_hash is None:
        _hasher.verify(password, _DUMMY_HASH)
        return False
    return _hasher.verify(password, password_hash)


def new_token() -> str:
    """A fresh random secret for a session, an API token or a CSRF token."""
    return secrets.token_urlsafe(32)


def token_hash(token: str) -> str:
    """What the database keeps of a token: its SHA-256, never the token."""
    return hashlib.sha256(token.encode()).hexdigest()


def same_secret(a: str | None, b: str | None) -> bool:
    return bool(a) and bool(b) and hmac.compare_digest(a, b)


def sign_cookie(secret_key: str, token: str) -> str:
    return Signer(secret_key, salt="lossledger-session").sign(token).decode()


def unsign_cookie(secret_key: str, value: str | None) -> str | None:
    if not value:
        return None
    try:
        return Signer(secret_key, salt="lossledger-session").unsign(value).decode()
    except BadSignature:
        return None
