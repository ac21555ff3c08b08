"""Figures on pages: the filters templates use, over the one formatter (service/figures.py)."""

from __future__ import annotations

from datetime import datetime

from markupsafe import Markup

from service.config import get_settings
from service.figures import (
    at_least_decimals,
    check_text,
    local_time,
    number,
    sci_text,
    show_text,
    typed,
    typed_and_shown,
    unit_label,
    unit_symbol,
)

__all__ = ["install", "number", "sci", "show", "unit_label"]


def sci(value: float | None, digits: int = 3) -> Markup | str:
    """A figure in scientific notation, kept on one line: 1.76 × 10⁻⁹."""
    text = sci_text(value, digits)
    if "×" not in text:
        return text
    return Markup('<span class="sci">{}</span>').format(text)


def show(value: float | None, quantity: str, units: str | None = "si", digits: int = 3) -> Markup:
    """`value` (SI) converted to the user's units, formatted, with the unit after it."""
    text = show_text(value, quantity, units, digits)
    figure, _, unit = text.rpartition(" ")
    if "×" not in figure:
        return Markup("{}").format(text)
    return Markup('<span class="sci">{}</span> {}').format(figure, unit)


def lab_time(moment: datetime | None) -> str:
    """A stored time in the laboratory's time zone (LAB_TIMEZONE), to the minute."""
    return local_time(moment, get_settings().lab_timezone)


def install(env_filters: dict[str, object]) -> None:
    """Register `{{ value|show('k', units) }}`, `{{ 'k'|unit_label(units) }}`, `{{ text|typed }}`,
    `{{ 'cm**2'|unit_symbol }}` and `{{ check|check_message(units) }}`."""
    env_filters["sci"] = sci
    env_filters["number"] = number
    env_filters["show"] = show
    env_filters["unit_label"] = unit_label
    env_filters["typed"] = typed
    env_filters["unit_symbol"] = unit_symbol
    env_filters["typed_and_shown"] = typed_and_shown
    env_filters["at_least_decimals"] = at_least_decimals
    env_filters["lab_time"] = lab_time
    env_filters["check_message"] = check_text
