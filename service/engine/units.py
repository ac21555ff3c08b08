"""The one pint unit registry of the service, and the parsing of typed quantities into SI floats.

Quantities arrive as a string (``"12.5 cm"``), as an object
(``{"value": 12.5, "unit": "cm", "u": 0.05}``, ``u`` the standard uncertainty in the same
unit) or, for dimensionless inputs only, as a bare number. They leave as floats in the
canonical unit of their kind (SI; temperatures in degree Celsius). The number is read by
Python, never by pint, so a typed expression cannot make the parser compute huge powers;
pint only resolves the unit text, and each unit's conversion is cached.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

import pint

from service.engine.errors import EngineInputError, Loc

ureg: pint.UnitRegistry[float] = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
Q_ = ureg.Quantity


@dataclass(frozen=True, slots=True)
class Kind:
    """A kind of input: its dimensionality, canonical unit and examples for messages.

    Besides physical quantities, three kinds describe entries that carry no unit: a yes/no
    flag, a choice among listed words, and free text.
    """

    name: str
    canonical_unit: str
    dimensionality: str
    examples: str

    @property
    def is_quantity(self) -> bool:
        """Whether values of this kind are numbers (with a unit unless dimensionless)."""
        return self.dimensionality not in NOT_QUANTITIES


LENGTH = Kind("length", "m", "[length]", "'12.5 cm', '125 mm' or '4.9 in'")
AREA = Kind("area", "m**2", "[length]**2", "'0.283 cm**2', '28.3 mm**2' or '0.044 in**2'")
VOLUME = Kind("volume", "m**3", "[length]**3", "'355 mL', '0.355 L' or '21.7 in**3'")
MASS = Kind("mass", "kg", "[mass]", "'560 g', '0.56 kg' or '1.23 lb'")
DURATION = Kind("duration", "s", "[time]", "'120 s', '2 min' or '1.5 h'")
TIME = Kind("time", "s", "[time]", "'0 s', '10 min' or '1.5 h'")
TEMPERATURE = Kind("temperature", "degC", "[temperature]", "'21.5 degC' or '70.7 degF'")
PRESSURE = Kind("pressure", "Pa", "[mass]/[length]/[time]**2", "'12 kPa', '1.7 psi' or '0.12 bar'")
FLOW_RATE = Kind("flow rate", "m**3/s", "[length]**3/[time]", "'0.5 mL/min' or '8.3e-9 m**3/s'")
DENSITY = Kind(
    "density", "kg/m**3", "[mass]/[length]**3", "'1.68 g/cm**3', '1680 kg/m**3' or '104.9 lb/ft**3'"
)
CONDUCTIVITY = Kind("hydraulic conductivity", "m/s", "[length]/[time]", "'1e-9 m/s' or '1e-7 cm/s'")
VISCOSITY = Kind(
    "dynamic viscosity", "Pa*s", "[mass]/[length]/[time]", "'1.002 mPa*s' or '1.002 cP'"
)
UNIT_WEIGHT = Kind(
    "unit weight", "N/m**3", "[mass]/[length]**2/[time]**2", "'9.79 kN/m**3' or '62.3 lbf/ft**3'"
)
FRACTION = Kind("fraction or percentage", "", "dimensionless", "'18.5 %' (with its % sign)")
NUMBER = Kind("number", "", "dimensionless", "2.70 or 0.96 (no unit)")
FLAG = Kind("yes or no", "", "flag", "true or false")
CHOICE = Kind("choice", "", "choice", "one of the listed words")
TEXT = Kind("text", "", "text", "a short text")
NOT_QUANTITIES = frozenset({"flag", "choice", "text"})

# Percentages and fractions must say which they are: a bare 5 is never read as 500 %.
UNIT_REQUIRED = frozenset({FRACTION.name})

# Magnitudes no permeability test has, in the canonical unit: (smallest above zero, largest).
# Within them every product the engine forms stays a finite float (docs/methods.md §11.3).
PLAUSIBLE_MAGNITUDE: dict[str, tuple[float, float]] = {
    LENGTH.name: (1e-9, 1e4),
    AREA.name: (1e-12, 1e4),
    VOLUME.name: (1e-15, 1e3),
    MASS.name: (1e-12, 1e4),
    DURATION.name: (1e-3, 1e9),
    TIME.name: (0.0, 1e9),
    TEMPERATURE.name: (0.0, 1e3),
    PRESSURE.name: (1e-6, 1e9),
    FLOW_RATE.name: (1e-20, 1e3),
    DENSITY.name: (1.0, 1e5),
    CONDUCTIVITY.name: (1e-20, 1e3),
    VISCOSITY.name: (1e-6, 1e3),
    UNIT_WEIGHT.name: (1.0, 1e6),
    FRACTION.name: (1e-9, 1e3),
    NUMBER.name: (1e-9, 1e6),
}

_NUMBER_THEN_UNIT = re.compile(r"^\s*([-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")
_LONG_DIGITS = re.compile(r"\d{3,}")
# An exponent applied to an exponent ("m**9**9**9") would make pint compute a huge power.
_EXPONENT_CHAIN = re.compile(r"(\*\*|\^)[\s(+\-]*[\d.]+[\s)]*(\*\*|\^)")
_MAX_TEXT = 64


@dataclass(frozen=True, slots=True)
class Conversion:
    """Linear map ``canonical = factor * typed + offset`` for one (unit, kind) pair."""

    factor: float
    offset: float
    unit: str


def _a(noun: str) -> str:
    return ("an " if noun[0] in "aeiou" else "a ") + noun


def accepted_text(kind: Kind, *, positive: bool) -> str:
    """Describe what a field of this kind accepts, for messages."""
    if kind.dimensionality == "dimensionless":
        return f"{_a(kind.name)} such as {kind.examples}"
    rule = " greater than zero" if positive else ""
    return f"{_a(kind.name)}{rule} with its unit, such as {kind.examples}"


def _unit_hint(unit_text: str, kind: Kind) -> str:
    if kind is TEMPERATURE and unit_text.strip() in {"C", "c", "F", "f"}:
        letter = unit_text.strip().upper()
        name = {"C": "coulomb", "c": "the speed of light", "F": "farad", "f": "femto"}[
            unit_text.strip()
        ]
        return f"'{unit_text.strip()}' is {name} in unit notation; write 'deg{letter}'"
    return ""


@lru_cache(maxsize=2048)
def conversion_for(unit_text: str, kind: Kind) -> Conversion:
    """Resolve ``unit_text`` with the registry and return its conversion to ``kind``'s unit.

    Raises
    ------
    ValueError
        With a plain reason when the unit is unknown or of the wrong dimension.
    """
    if (
        len(unit_text) > _MAX_TEXT
        or _LONG_DIGITS.search(unit_text)
        or _EXPONENT_CHAIN.search(unit_text)
    ):
        raise ValueError("the unit text is not one the registry understands")
    try:
        unit = ureg.parse_units(unit_text) if unit_text else ureg.dimensionless
    except Exception as exc:  # pint raises several types for bad text
        raise ValueError(f"unknown unit '{unit_text}'") from exc
    target = ureg.parse_units(kind.canonical_unit) if kind.canonical_unit else ureg.dimensionless
    if Q_(1.0, unit).dimensionality != Q_(1.0, target).dimensionality:
        hint = _unit_hint(unit_text, kind)
        dim = str(Q_(1.0, unit).dimensionality)
        reason = f"'{unit_text or 'no unit'}' is not {_a(kind.name)} (its dimension is {dim})"
        raise ValueError(f"{reason}; {hint}" if hint else reason)
    offset = float(Q_(0.0, unit).to(target).magnitude)
    factor = float(Q_(1.0, unit).to(target).magnitude) - offset
    return Conversion(factor=factor, offset=offset, unit=str(unit))


def _number(raw: Any) -> float | None:
    if isinstance(raw, bool):
        return None
    if isinstance(raw, int | float):
        return float(raw)
    if isinstance(raw, str):
        try:
            return float(raw)
        except ValueError:
            return None
    return None


def parse_quantity(
    raw: Any,
    kind: Kind,
    loc: Loc,
    *,
    positive: bool = True,
    default_u: float | None = None,
) -> tuple[float, float | None]:
    """Parse one typed quantity into its canonical float and standard uncertainty.

    Parameters
    ----------
    raw : str, dict or number
        ``"12.5 cm"``, ``{"value": 12.5, "unit": "cm", "u": 0.05}``, or a bare number for
        dimensionless kinds.
    kind : Kind
        The physical kind the field needs.
    loc : tuple
        Field location, used in refusals.
    positive : bool
        Refuse zero and negative values (lengths, areas, masses, volumes, durations).
    default_u : float, optional
        Standard uncertainty [canonical unit] used when the input carries none.

    Returns
    -------
    (value, u) : tuple of float and float or None
        Value in the canonical unit of ``kind`` and its standard uncertainty (None if unknown).

    Raises
    ------
    EngineInputError
        Naming ``loc``, the value received and what is accepted.
    """
    accepted = accepted_text(kind, positive=positive)
    dimensionless = kind.dimensionality == "dimensionless"
    u_typed: float | None = None
    if isinstance(raw, dict):
        extra = sorted(set(raw) - {"value", "unit", "u"})
        if extra:
            raise EngineInputError.single(
                loc,
                raw,
                "an object with 'value', 'unit' and optional 'u'",
                "unknown keys " + ", ".join(extra),
                "unknown_field",
            )
        magnitude = _number(raw.get("value"))
        if magnitude is None:
            raise EngineInputError.single(
                (*loc, "value"), raw.get("value"), "a number", "is not a number", "not_a_number"
            )
        if kind.name in UNIT_REQUIRED and "unit" not in raw:
            raise EngineInputError.single(
                loc,
                raw,
                accepted,
                "has no unit: say '%' or give a fraction with unit ''",
                "missing_unit",
            )
        unit_text = raw.get("unit", "")
        if unit_text is None:
            unit_text = ""
        if not isinstance(unit_text, str):
            raise EngineInputError.single(
                (*loc, "unit"), unit_text, accepted, "is not a unit text", "bad_unit"
            )
        if "u" in raw and raw["u"] is not None:
            u_typed = _number(raw["u"])
            if u_typed is None or not math.isfinite(u_typed) or u_typed < 0:
                raise EngineInputError.single(
                    (*loc, "u"),
                    raw["u"],
                    "a standard uncertainty: a finite number >= 0 in the same unit",
                    "is not a valid uncertainty",
                    "bad_uncertainty",
                )
    elif isinstance(raw, str):
        if len(raw) > _MAX_TEXT + 32:
            raise EngineInputError.single(
                loc, raw, accepted, "is too long to be a quantity", "bad_quantity"
            )
        match = _NUMBER_THEN_UNIT.match(raw)
        if re.match(r"^\s*[-+]?\d+,\d", raw):
            raise EngineInputError.single(
                loc, raw, accepted, "uses a decimal comma; write a decimal point", "bad_quantity"
            )
        if match is None:
            reason = "does not start with a number"
            if re.match(r"^\s*[-+]?(nan|inf)", raw, re.IGNORECASE):
                reason = "is not a finite number"
            raise EngineInputError.single(loc, raw, accepted, reason, "bad_quantity")
        magnitude = float(match.group(1))
        unit_text = match.group(2)
        if kind.name in UNIT_REQUIRED and not unit_text:
            raise EngineInputError.single(
                loc, raw, accepted, "is a number without '%' or a unit", "missing_unit"
            )
    elif _number(raw) is not None and not isinstance(raw, str):
        magnitude = float(raw)
        unit_text = ""
        if not dimensionless or kind.name in UNIT_REQUIRED:
            raise EngineInputError.single(
                loc, raw, accepted, "is a number without a unit", "missing_unit"
            )
    else:
        raise EngineInputError.single(loc, raw, accepted, "is not a quantity", "bad_quantity")

    if not math.isfinite(magnitude):
        raise EngineInputError.single(loc, raw, accepted, "is not a finite number", "not_finite")
    try:
        conv = conversion_for(unit_text, kind)
    except ValueError as exc:
        raise EngineInputError.single(loc, raw, accepted, str(exc), "wrong_dimension") from None
    value = magnitude * conv.factor + conv.offset
    if not math.isfinite(value):
        raise EngineInputError.single(loc, raw, accepted, "is not a finite number", "not_finite")
    if positive and value <= 0.0:
        raise EngineInputError.single(
            loc, raw, accepted, "must be greater than zero", "not_positive"
        )
    u = abs(conv.factor) * u_typed if u_typed is not None else default_u
    _refuse_implausible(raw, kind, loc, accepted, value, u)
    return value, u


def _refuse_implausible(
    raw: Any, kind: Kind, loc: Loc, accepted: str, value: float, u: float | None
) -> None:
    """Refuse a magnitude no test has, so that no figure derived from it can overflow."""
    bounds = PLAUSIBLE_MAGNITUDE.get(kind.name)
    if bounds is None:
        return
    smallest, largest = bounds
    unit = f" {kind.canonical_unit}" if kind.canonical_unit else ""
    if abs(value) > largest or (u is not None and u > largest):
        raise EngineInputError.single(
            loc,
            raw,
            f"{accepted}, at most {largest:g}{unit}",
            "is too large for any permeability test",
            "out_of_range",
        )
    if value != 0.0 and abs(value) < smallest:
        raise EngineInputError.single(
            loc,
            raw,
            f"{accepted}, at least {smallest:g}{unit}",
            "is too small for any permeability test",
            "out_of_range",
        )


def parse_uncertainty(raw: Any, kind: Kind, loc: Loc) -> float:
    """Parse a standard uncertainty typed as a quantity (``"0.05 cm"``) [canonical unit].

    Offset units count as differences: ``"0.3 degC"`` is 0.3 K, not 273.45 K.

    Raises
    ------
    EngineInputError
        For text, unit or dimension refused by :func:`parse_quantity`, or a negative value.
    """
    parse_quantity(raw, kind, loc, positive=False)  # refuses bad text, unit and dimension
    if isinstance(raw, dict):
        magnitude = float(raw["value"])
        unit_text = raw.get("unit") or ""
    elif isinstance(raw, str):
        match = _NUMBER_THEN_UNIT.match(raw)
        assert match is not None  # parse_quantity accepted it
        magnitude = float(match.group(1))
        unit_text = match.group(2)
    else:
        magnitude = float(raw)
        unit_text = ""
    delta = magnitude * conversion_for(unit_text, kind).factor
    if delta < 0.0:
        raise EngineInputError.single(
            loc, raw, "a standard uncertainty >= 0 with its unit", "is negative", "bad_uncertainty"
        )
    return delta
