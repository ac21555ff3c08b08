"""Text from outside: the one place that says which characters an input may hold, how an
identifier is normalised, and how a text cell is made safe for a spreadsheet.

- Control characters (C0 except tab, line feed and carriage return, and DEL) are refused in
  every stored text: they cannot be seen, PostgreSQL refuses NUL, and openpyxl refuses most of
  them, which once made a project's XLSX export fail for good (db.py checks every flush).
- Identifiers (sample IDs, the client's sample IDs, location names, apparatus identifiers) are
  normalised where they are typed: Unicode NFC, bidirectional controls and zero-width
  characters removed, surrounding space stripped. Two IDs that look the same are then equal.
- A text cell of an export that a spreadsheet would read as a formula (it starts with =, +,
  -, @, tab or carriage return) gets a leading apostrophe (OWASP, "CSV Injection").
"""

from __future__ import annotations

import re
import unicodedata
from typing import Annotated, Any

from pydantic import AfterValidator
from pydantic_core import PydanticCustomError

# C0 controls but tab (09), line feed (0A) and carriage return (0D); and DEL (7F).
CONTROL_CHARACTERS = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")
# Unicode's bidirectional formatting characters (UAX #9) and the zero-width ones (including
# the byte order mark, which spreadsheets leave at the start of a pasted cell).
INVISIBLE_IN_IDENTIFIERS = re.compile(
    "[\u061c\u200e\u200f\u202a-\u202e\u2066-\u2069\u200b-\u200d\u2060\ufeff]"
)
# Leading characters a spreadsheet program takes as the start of a formula.
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
ACCEPTED_TEXT = "text without control characters (tab and line breaks are fine)"


def control_character(text: str) -> str | None:
    """The first control character in `text` as 'U+000B', or None if there is none."""
    found = CONTROL_CHARACTERS.search(text)
    return f"U+{ord(found.group()):04X}" if found else None


def control_character_message(text: str) -> str | None:
    """Why `text` is refused, or None if it may be stored."""
    code = control_character(text)
    if code is None:
        return None
    return f"contains the invisible control character {code}; accepted: {ACCEPTED_TEXT}"


def first_control_character(value: Any, path: tuple[str | int, ...] = ()) -> tuple[Any, str] | None:
    """The path and message of the first text holding a control character in `value` (a
    string, or lists and dicts of them, as stored in JSON columns), or None."""
    if isinstance(value, str):
        message = control_character_message(value)
        return (path, message) if message else None
    if isinstance(value, dict):
        for key, item in value.items():
            found = first_control_character(item, (*path, str(key)))
            if found:
                return found
    if isinstance(value, list | tuple):
        for index, item in enumerate(value):
            found = first_control_character(item, (*path, index))
            if found:
                return found
    return None


def normalise_identifier(text: str) -> str:
    """`text` in NFC, without bidirectional controls or zero-width characters, stripped."""
    return INVISIBLE_IN_IDENTIFIERS.sub("", unicodedata.normalize("NFC", text)).strip()


def identifier_key(text: str) -> str:
    """What two identifiers are compared by: normalised, then case-folded (Python's full
    Unicode case folding; SQLite's lower() folds ASCII only, so the key is computed here and
    stored)."""
    return unicodedata.normalize("NFC", normalise_identifier(text).casefold())


def _identifier(text: str) -> str:
    message = control_character_message(text)
    if message:
        raise PydanticCustomError("control_character", message)
    normalised = normalise_identifier(text)
    if any(ch in normalised for ch in "\t\r\n"):
        raise PydanticCustomError(
            "line_break", "contains a tab or line break; accepted: an identifier on one line"
        )
    return normalised


# A pydantic string type for identifiers: normalised, refused if it holds control characters.
Identifier = Annotated[str, AfterValidator(_identifier)]


def spreadsheet_text(text: str) -> str:
    """A text cell that no spreadsheet evaluates, and that openpyxl can always write: control
    characters become U+FFFD (only text stored before they were refused can hold them), and a
    formula start gets a leading apostrophe."""
    text = CONTROL_CHARACTERS.sub("\ufffd", text)
    return "'" + text if text.startswith(FORMULA_STARTS) else text
