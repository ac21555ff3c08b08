"""Typed values of every feature: the text as typed and its SI float, through the engine's one
unit registry (depths at reception, a project's limit, the register's geometry and
resolutions, a test's conditions).

This is the one module besides ``service/lab_tests/reduction/`` that imports the engine:
typing a quantity is needed by features that never reduce a test, and routing them through
the lab-tests door would tie reception and the register to test recording.
"""

from __future__ import annotations

from service.engine import units
from service.engine.errors import EngineInputError
from service.errors import FieldProblem, InvalidInput, Loc, invalid

Kind = units.Kind
# The kinds the features type (units: service/engine/units.py).
AREA, CONDUCTIVITY, DENSITY, DURATION = (
    units.AREA,
    units.CONDUCTIVITY,
    units.DENSITY,
    units.DURATION,
)
FRACTION, LENGTH, MASS, PRESSURE = units.FRACTION, units.LENGTH, units.MASS, units.PRESSURE
TEMPERATURE, TIME, VOLUME = units.TEMPERATURE, units.TIME, units.VOLUME

__all__ = [
    "AREA",
    "CONDUCTIVITY",
    "DENSITY",
    "DURATION",
    "FRACTION",
    "LENGTH",
    "MASS",
    "PRESSURE",
    "TEMPERATURE",
    "TIME",
    "VOLUME",
    "Kind",
    "typed",
    "typed_step",
    "unit_refusal",
]


def _refused(exc: EngineInputError, loc: Loc) -> InvalidInput:
    """The engine's refusal of one value, at the caller's field (`loc`, no ``body``)."""
    return InvalidInput(
        problems=[
            FieldProblem((*loc, *p.loc[1:]), p.reason, p.value, p.accepted, p.kind)
            for p in exc.problems
        ]
    )


def typed(
    text: str, kind: Kind, loc: Loc, *, positive: bool = False, non_negative: bool = False
) -> tuple[str, float]:
    """What was typed (``"1.50 m"``, ``"5 ft"``) as (the text as typed, its SI float).

    Raises
    ------
    InvalidInput
        Naming the field at `loc`, the value and what is accepted.
    """
    shown = text.strip()
    try:
        value, _ = units.parse_quantity(shown, kind, ("value",), positive=positive)
    except EngineInputError as exc:
        raise _refused(exc, loc) from None
    if non_negative and value < 0:
        raise invalid(
            loc,
            "must not be negative",
            value=shown,
            accepted=f"a {kind.name} of zero or more with its unit, such as {kind.examples}",
            kind="negative",
        )
    return shown, value


def typed_step(text: str, kind: Kind, loc: Loc) -> tuple[str, float]:
    """A step or resolution (``"0.1 degC"`` is 0.1 K, not 273.25 K), greater than zero.

    Raises
    ------
    InvalidInput
        Naming the field at `loc`.
    """
    shown = text.strip()
    try:
        value = units.parse_uncertainty(shown, kind, ("value",))
    except EngineInputError as exc:
        raise _refused(exc, loc) from None
    if value <= 0:
        raise invalid(
            loc,
            "must be greater than zero",
            value=shown,
            accepted=f"a {kind.name} step with its unit, such as {kind.examples}",
            kind="not_positive",
        )
    return shown, value


def unit_refusal(unit_text: str, kind: Kind) -> str | None:
    """Why a unit typed on its own is refused for `kind` (None when it is accepted)."""
    try:
        units.conversion_for(unit_text.strip(), kind)
    except ValueError as exc:
        return str(exc)
    return None
