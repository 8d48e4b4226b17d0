"""Password hashing (argon2id, PHC strings) and the password policy of RELIABILITY.md."""

from __future__ import annotations

from functools import cache
from importlib import resources

from argon2 import PasswordHasher, Type
from argon2.exceptions import InvalidHashError, VerificationError, VerifyMismatchError

from tracedesk.errors import Unprocessable

MIN_LENGTH = 8
MAX_LENGTH = 256


def build_hasher(*, memory_kib: int, time_cost: int) -> PasswordHasher:
    """argon2id with at least OWASP's minimum (m = 19 MiB, t = 2, p = 1)."""
    return PasswordHasher(time_cost=time_cost, memory_cost=memory_kib, parallelism=1, type=Type.ID)


@cache
def common_passwords() -> frozenset[str]:
    text = resources.files("tracedesk.accounts").joinpath("common_passwords.txt").read_text("utf-8")
    return frozenset(line.strip() for line in text.splitlines() if line.strip() and not line.startswith("#"))


def check_password_policy(password: str, *, username: str = "") -> None:
    """Length 8-256, not a common password, not the user name; no composition rules (NIST SP 800-63B)."""
    if len(password) < MIN_LENGTH:
        raise Unprocessable(f"the password must have at least {MIN_LENGTH} characters")
    if len(password) > MAX_LENGTH:
        raise Unprocessable(f"the password must have at most {MAX_LENGTH} characters")
    lowered = password.lower()
    if lowered in common_passwords() or (username and lowered == username.lower()):
        raise Unprocessable("this password is too common or too easy to guess; choose another")


def verify_password(hasher: PasswordHasher, stored_hash: str | None, password: str) -> bool:
    """True when the password matches; an unknown user (``stored_hash`` None) costs the same and fails."""
    if stored_hash is None:
        hasher.hash(password)  # same cost as a verification, so timing does not reveal unknown accounts
        return False
    try:
        return hasher.verify(stored_hash, password)
    except (VerifyMismatchError, VerificationError, InvalidHashError):
        return False
