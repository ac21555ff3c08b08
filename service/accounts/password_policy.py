"""Which new passwords are refused, after NIST SP 800-63B §5.1.1.2 (memorized secrets):
at least MIN_PASSWORD_LENGTH characters, any characters (spaces too), no composition rules,
but never a commonly used password, a word from the user's own details or the service's
name, nor a repeat or a run of characters ('aaaaaaaaaa', '1234567890')."""

from __future__ import annotations

import itertools
import string
from functools import lru_cache
from pathlib import Path

MIN_PASSWORD_LENGTH = 10
# Argon2 takes any length; the cap keeps a megabyte "password" from costing CPU.
MAX_PASSWORD_LENGTH = 1024
COMMON_PASSWORDS = Path(__file__).with_name("common_passwords.txt")
SERVICE_WORDS = ("seepline",)
# A common password with digits or symbols added before or after it is still common.
_DECORATION = string.digits + string.punctuation + string.whitespace
ACCEPTED = (
    f"at least {MIN_PASSWORD_LENGTH} characters that are not a common password, your name or "
    "email address, or a repeat or run of characters; a few unrelated words work well"
)


@lru_cache
def common_passwords() -> frozenset[str]:
    lines = COMMON_PASSWORDS.read_text(encoding="utf-8").splitlines()
    return frozenset(line.casefold() for line in lines if line and not line.startswith("#"))


def _letters(text: str) -> str:
    return "".join(ch for ch in text.casefold() if ch.isalnum() and not ch.isdigit())


def _repeats_or_runs(password: str) -> bool:
    text = password.casefold()
    if len(set(text)) < 3:
        return True
    for unit in range(1, len(text) // 2 + 1):
        if len(text) % unit == 0 and text == text[:unit] * (len(text) // unit):
            return True
    steps = {ord(b) - ord(a) for a, b in itertools.pairwise(text)}
    return steps in ({1}, {-1})


def password_problem(password: str, *, email: str = "", full_name: str = "") -> str | None:
    """Why `password` is refused as a new password (to follow 'the password ...'), or None."""
    if len(password) > MAX_PASSWORD_LENGTH:
        return f"is too long; accepted: at most {MAX_PASSWORD_LENGTH} characters"
    if len(password) < MIN_PASSWORD_LENGTH:
        return f"is too short; accepted: {ACCEPTED}"
    if _repeats_or_runs(password):
        return f"is a repeat or a run of characters; accepted: {ACCEPTED}"
    folded = password.casefold()
    core = folded.strip(_DECORATION)
    if folded in common_passwords() or (len(core) >= 4 and core in common_passwords()):
        return f"is one of the most common passwords; accepted: {ACCEPTED}"
    own = {_letters(email.split("@")[0]), _letters(full_name), *SERVICE_WORDS}
    own.update(_letters(part) for part in full_name.split() if len(part) >= 3)
    own.discard("")
    if (email and email.casefold() in folded) or _letters(password) in own:
        return f"is made of your own name or email address; accepted: {ACCEPTED}"
    return None
