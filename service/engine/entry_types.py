"""The types of the method catalogue (service/engine/catalogue.py).

An entry, what a trial needs, a standard, the scopes entries live in and the units a page
offers; a method, which looks entries up, stays in the catalogue.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import StrEnum
from typing import Any

from service.engine import units

SEPARATOR = " · "


class Scope(StrEnum):
    """Where an entry lives; the value is the contract's section name where it has one."""

    TEST = "test"
    SPECIMEN = "specimen"
    APPARATUS = "apparatus"
    SATURATION = "saturation"
    TRIAL = "trials"
    READING = "readings"
    OPTION = "options"
    SPECIFICATION = "specification"
    STAGE = "stages"


# How each section is named in a message, and whether its items are numbered ("Trial 3").
SECTION_WORDS: dict[str, str] = {
    "test": "Test",
    "specimen": "Specimen",
    "apparatus": "Permeameter",
    "saturation": "Saturation step",
    "trials": "Trial",
    "readings": "Reading",
    "options": "Options",
    "specification": "Specification",
    "default_uncertainties": "Default uncertainty",
    "stages": "Stage",
}
NUMBERED = frozenset({"saturation", "trials", "readings"})
# Sections whose entries' labels say enough on their own.
SILENT_SECTIONS = frozenset({"specification", "test"})


@dataclass(frozen=True, slots=True)
class UnitPair:
    """The unit an entry is shown and asked in, per unit system (SI, US customary)."""

    si: str
    us: str

    def for_system(self, system: str | None) -> str:
        """Return the unit for ``system`` ("si" or "us"; anything else is SI)."""
        return self.us if system == "us" else self.si


# The units a form's picker offers for each kind of quantity, as pint reads them (common
# practice, no source: the units a soil laboratory reads its instruments in). A stored value
# in any other unit is still accepted and shown; the picker then offers that unit too.
UNIT_CHOICES: dict[str, tuple[str, ...]] = {
    units.LENGTH.name: ("cm", "mm", "m", "in", "ft"),
    units.AREA.name: ("cm**2", "mm**2", "m**2", "in**2", "ft**2"),
    units.VOLUME.name: ("mL", "L", "cm**3", "in**3"),
    units.MASS.name: ("g", "kg", "lb"),
    units.DURATION.name: ("s", "min", "h"),
    units.TIME.name: ("s", "min", "h"),
    units.TEMPERATURE.name: ("degC", "degF"),
    units.PRESSURE.name: ("kPa", "psi", "bar", "MPa"),
    units.FLOW_RATE.name: ("mL/min", "mL/s", "mL/h", "m**3/s"),
    units.DENSITY.name: ("g/cm**3", "kg/m**3", "lb/ft**3"),
    units.CONDUCTIVITY.name: ("m/s", "cm/s", "ft/day"),
    units.FRACTION.name: ("%",),
    units.VISCOSITY.name: ("mPa*s", "Pa*s", "cP"),
    units.UNIT_WEIGHT.name: ("kN/m**3", "lbf/ft**3"),
}


@dataclass(frozen=True, slots=True)
class Entry:
    """One typed value of a test.

    Parameters
    ----------
    id : str
        The field name in the reduction contract, e.g. ``"head_final"``.
    kind : units.Kind
        What it is: a length, a duration, a flag, a choice ...
    scope : Scope
        Where it lives.
    label : str
        Plain words for a form or a table, e.g. ``"Head at end"``.
    symbol : str
        The symbol of the methods document, e.g. ``"h₂"``.
    help : str
        One sentence on what to type.
    example : str
        A value as typed in SI units, e.g. ``"70.0 cm"``.
    example_us : str
        The same in US customary units (empty: the SI example serves both).
    positive : bool
        Zero and negative values are refused (lengths, masses, durations ...).
    si_field : str
        The engine's field the value becomes, with its unit in the name (``"head_final_m"``);
        empty for entries the engine does not use (kept and shown, not reduced).
    units : UnitPair or None
        The unit shown and offered per unit system; None for unitless entries.
    resolution : str
        The reading resolution a laboratory usually has, e.g. ``"1 mm"`` (common practice,
        no source; the apparatus register holds each instrument's own).
    choices : tuple of str
        The accepted words of a choice.
    on_forms : bool
        Offered on the page forms (False: accepted by the API, not asked for on a page).
    replaces : str
        The entry this one is used in place of when given (the length after consolidation
        replaces the length as prepared in the reduction).
    hint : str
        A few words a form shows beside the field ("flexible wall").
    """

    id: str
    kind: units.Kind
    scope: Scope
    label: str
    symbol: str = ""
    help: str = ""
    example: str = ""
    example_us: str = ""
    positive: bool = True
    si_field: str = ""
    units: UnitPair | None = None
    resolution: str = ""
    choices: tuple[str, ...] = ()
    on_forms: bool = True
    replaces: str = ""
    hint: str = ""

    @property
    def is_quantity(self) -> bool:
        """Whether the entry is a number (with a unit unless dimensionless)."""
        return self.kind.is_quantity

    @property
    def is_flag(self) -> bool:
        """A yes/no entry."""
        return self.kind is units.FLAG

    @property
    def is_text(self) -> bool:
        """A free-text entry."""
        return self.kind is units.TEXT

    @property
    def is_number(self) -> bool:
        """A plain number without a unit (a specific gravity, a B-value)."""
        return self.kind is units.NUMBER

    @property
    def noun(self) -> str:
        """The label inside a sentence: 'Head at end' -> 'the head at end', 'D10' -> 'D10'."""
        head = self.label[:1]
        rest = self.label[1:2]
        if rest and (rest.isupper() or rest.isdigit()):
            return self.label
        return "the " + head.lower() + self.label[1:]

    @property
    def unit_choices(self) -> tuple[str, ...]:
        """The units a form's picker offers (none for a plain number)."""
        return UNIT_CHOICES.get(self.kind.name, ()) if self.is_quantity else ()

    def unit_for(self, system: str | None) -> str:
        """Return the unit a form starts with for ``system`` (a fraction: '%'; a number: none)."""
        if self.units is not None:
            return self.units.for_system(system)
        return self.unit_choices[0] if self.unit_choices else ""

    def example_for(self, system: str | None) -> str:
        """Return the example in the user's unit system."""
        return self.example_us if system == "us" and self.example_us else self.example

    @property
    def accepted(self) -> str:
        """What the entry accepts, for messages."""
        if self.choices:
            return "one of " + ", ".join(f"'{c}'" for c in self.choices)
        if self.kind is units.FLAG:
            return "true or false"
        if self.kind is units.TEXT:
            return "a short text"
        return units.accepted_text(self.kind, positive=self.positive)


@dataclass(frozen=True, slots=True)
class Need:
    """What a trial (or an apparatus) must give.

    Exactly one of ``one_of`` (two of them at once is ambiguous), or else every entry of
    ``or_all`` together. ``Need(("duration",))`` is a plain required entry;
    ``Need(("volume", "water_mass"), or_all=("inflow_volume", "outflow_volume"))`` is the
    constant-head discharge: a volume, a water mass, or the inflow and outflow volumes.
    """

    one_of: tuple[str, ...]
    or_all: tuple[str, ...] = ()

    @property
    def ids(self) -> tuple[str, ...]:
        """Every entry the need names."""
        return (*self.one_of, *self.or_all)


@dataclass(frozen=True, slots=True)
class Standard:
    """A test standard a result can be labelled with."""

    id: str
    title: str
    wall: str  # "flexible", "rigid" or "either"


def _q(
    entry_id: str,
    kind: units.Kind,
    scope: Scope,
    label: str,
    example: str,
    example_us: str = "",
    *,
    si_field: str = "",
    unit: tuple[str, str] | None = None,
    **extra: Any,
) -> Entry:
    """Declare a quantity entry; ``unit`` is the (SI, US) display unit pair."""
    pair = UnitPair(*unit) if unit else None
    return Entry(
        entry_id,
        kind,
        scope,
        label,
        example=example,
        example_us=example_us,
        si_field=si_field,
        units=pair,
        **extra,
    )
