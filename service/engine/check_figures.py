"""How the acceptance checks quote figures.

Scientific notation and percentages for people, and each quoted figure kept as a value
(:class:`Figure`) so a page can show it in the reader's units (docs/methods.md §9 for the
digits that tell figures apart).
"""

from __future__ import annotations

import re
from typing import NamedTuple

_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


class Figure(NamedTuple):
    """A figure quoted in a check's message, kept as a value.

    A page shows it in the reader's units: its text in the message (with the unit), its SI
    value, the quantity it is (a key of the display table of service/figures.py: ``"k"``,
    ``"small_length"``) and the significant digits shown.
    """

    text: str
    value: float
    quantity: str
    digits: int = 3


_MANTISSA = re.compile(r"^[-+−]?[\d.]+")


def quoted(text: str, value: float, quantity: str) -> Figure:
    """Keep ``text`` (``"71.0 mm"``, ``"5.70 × 10⁻¹⁰ m/s"``) with its ``value`` [SI].

    Its digits are those of the text's mantissa (at least two).
    """
    match = _MANTISSA.match(text)
    digits = len((match.group(0) if match else "").replace(".", "").lstrip("-+−0"))
    return Figure(text, value, quantity, max(digits, 2))


def sci(value: float, digits: int = 3) -> str:
    """Format a number in scientific notation for people: ``1.76 × 10⁻⁹`` (``digits`` figures)."""
    mantissa, exponent = f"{value:.{digits - 1}e}".split("e")
    power = int(exponent)
    if power == 0:
        return mantissa
    return f"{mantissa} × 10{str(power).translate(_SUPERSCRIPT)}"


def pct(fraction: float, decimals: int = 1, *, sign: bool = False) -> str:
    """Format a fraction as a percentage for people: ``0.143`` → ``14.3 %`` (``−28.6 %``)."""
    text = f"{fraction * 100:{'+' if sign else ''}.{decimals}f} %"
    return text.replace("-", "−")


def distinct(*values: float, digits: int = 3) -> list[str]:
    """Format values with :func:`sci` to the fewest digits that tell apart those that differ.

    At least ``digits`` significant figures; more until every pair of different values reads
    differently (docs/methods.md §9).
    """
    for n in range(digits, 18):
        shown = [sci(v, n) for v in values]
        if all(
            (shown[i] != shown[j]) or values[i] == values[j]
            for i in range(len(values))
            for j in range(i + 1, len(values))
        ):
            return shown
    return [repr(v) for v in values]


def k_text(value: float) -> str:
    """Write a conductivity [m/s] as the messages quote it: ``5.70 × 10⁻¹⁰ m/s``."""
    return f"{sci(value)} m/s"


def mm_text(value_m: float, spec: str = ".1f") -> str:
    """Write a length [m] as the messages quote it, in millimetres: ``71.0 mm``."""
    return f"{value_m * 1000:{spec}} mm"


def mm(value_m: float, spec: str = ".1f") -> Figure:
    """Keep a length [m] quoted in millimetres as a :class:`Figure`."""
    return quoted(mm_text(value_m, spec), value_m, "small_length")
