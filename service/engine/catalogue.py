"""The method catalogue: every entry a permeability test takes, declared once.

An :class:`Entry` says what one typed value is: its name in the reduction contract, its
physical kind, symbol, plain label, help text and example, where it lives (the test, the
specimen, the apparatus, a saturation step, a trial, a reading, an option or the
specification), whether it must be greater than zero, the unit it is shown in for each unit
system, the reading resolution a laboratory usually has, and the engine field it becomes.

A :class:`Method` lists the entries its trials and its apparatus take, in the order a form
shows them, and what a trial must give (:class:`Need`): one entry, one of several
alternatives, or a set of entries given together. Standards are listed once
(:data:`STANDARDS`).

The parser of the engine, the API input models and their examples, the page forms, the labels
on the review page and the certificate, the export headers and every refusal message are
derived from these declarations, so a new entry is declared here and nowhere else. Room is
left for later scopes (the stages of a flexible-wall test: set-up, saturation, consolidation,
permeation, post-test) as further :class:`Scope` members.

Method descriptions and standard titles follow ``docs/methods.md``; the standards' titles are
given from memory and name the documents, they do not quote them.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from service.engine import units

# The catalogue's types live in entry_types; they are re-exported here, where callers read
# them (catalogue.Entry, catalogue.Scope, ...).
from service.engine.entry_types import (
    NUMBERED,
    SECTION_WORDS,
    SEPARATOR,
    SILENT_SECTIONS,
    UNIT_CHOICES,
    Entry,
    Need,
    Scope,
    Standard,
    UnitPair,
    _q,
)
from service.engine.rules import D2434, D5084, D5856, DECISION_RULES, ISO, PERMEAMETERS

__all__ = [
    "NUMBERED",
    "SECTION_WORDS",
    "SEPARATOR",
    "SILENT_SECTIONS",
    "UNIT_CHOICES",
    "Entry",
    "Method",
    "Need",
    "Scope",
    "Standard",
    "UnitPair",
]


@dataclass(frozen=True)
class Method:
    """One way of running a test and reducing its trials.

    Parameters
    ----------
    id : str
        The contract's method name, e.g. ``"falling_head"``.
    name : str
        The one display name, e.g. ``"Falling head, constant tailwater"``.
    short_name : str
        A short form for tables, e.g. ``"Falling head"``.
    summary : str
        One sentence on what is measured.
    trial : tuple of str
        The trial entries it takes, in form order.
    needs : tuple of Need
        What each trial must give (unless it is a run of readings).
    apparatus : tuple of str
        The apparatus entries it takes, in form order.
    apparatus_needs : tuple of Need
        What the apparatus must give.
    readings : bool
        A trial may instead be a run of timed head readings (reduced by regression).
    replaced_by_readings : tuple of str
        Entries a run of readings replaces (giving both is refused).
    standards : tuple of str
        The standards whose procedure it serves.
    """

    id: str
    name: str
    short_name: str
    summary: str
    trial: tuple[str, ...]
    needs: tuple[Need, ...]
    apparatus: tuple[str, ...] = ()
    apparatus_needs: tuple[Need, ...] = ()
    readings: bool = False
    replaced_by_readings: tuple[str, ...] = ()
    standards: tuple[str, ...] = ()

    @property
    def trial_entries(self) -> tuple[Entry, ...]:
        """The trial entries, in form order."""
        return tuple(entry(Scope.TRIAL, i) for i in self.trial)

    @property
    def apparatus_entries(self) -> tuple[Entry, ...]:
        """The apparatus entries, in form order."""
        return tuple(entry(Scope.APPARATUS, i) for i in self.apparatus)

    @property
    def trial_keys(self) -> frozenset[str]:
        """Every key a trial of this method may carry (``readings`` included when allowed)."""
        return frozenset(self.trial) | ({"readings"} if self.readings else frozenset())

    def required(self, entry_id: str) -> bool:
        """Whether a trial cannot be reduced without this entry."""
        return any(need.one_of == (entry_id,) and not need.or_all for need in self.needs)

    def hint(self, entry_id: str) -> str:
        """Return a short form hint from the needs: 'or the water mass collected', 'optional'."""
        for need in (*self.needs, *self.apparatus_needs):
            if entry_id in need.one_of:
                others = [o for o in need.one_of if o != entry_id]
                words = [_noun(o) for o in others]
                if need.or_all:
                    words.append(" and ".join(_noun(o) for o in need.or_all))
                return "or " + " or ".join(words) if words else ""
            if entry_id in need.or_all:
                return "with " + " and ".join(_noun(o) for o in need.or_all if o != entry_id)
        return "optional"


# Short names for the tables below.
L, S, A, TR, RD, OPT, SP, T = (
    units.LENGTH,
    Scope.SPECIMEN,
    Scope.APPARATUS,
    Scope.TRIAL,
    Scope.READING,
    Scope.OPTION,
    Scope.SPECIFICATION,
    Scope.TEST,
)

# --- the specimen ---------------------------------------------------------------------------

# fmt: off
SPECIMEN: tuple[Entry, ...] = (
    _q("diameter", L, S, "Diameter", "7.10 cm", "2.80 in", si_field="diameter_m",
       unit=("cm", "in"), symbol="D", resolution="0.02 mm",
       help="Specimen diameter as prepared (or give its cross-section area)."),
    _q("area", units.AREA, S, "Cross-section area", "39.6 cm**2", "6.14 in**2", si_field="area_m2",
       unit=("cm**2", "in**2"), symbol="A", on_forms=False,
       help="Cross-section area of the specimen, instead of its diameter."),
    _q("length", L, S, "Length", "11.60 cm", "4.57 in", si_field="length_m", unit=("cm", "in"),
       symbol="L", resolution="0.02 mm", help="Specimen length (the flow length)."),
    _q("wet_mass", units.MASS, S, "Wet mass", "560.0 g", si_field="wet_mass_kg", unit=("g", "g"),
       symbol="m", resolution="0.01 g", help="Mass of the specimen as prepared."),
    _q("water_content", units.FRACTION, S, "Water content", "22.4 %", si_field="water_content",
       symbol="w", positive=False, help="Water content of the specimen, with its '%' sign."),
    _q("specific_gravity", units.NUMBER, S, "Specific gravity", "2.70", si_field="specific_gravity",
       symbol="Gₛ", help="Specific gravity of the soil solids (no unit)."),
    _q("max_dry_density", units.DENSITY, S, "Max. dry density", "1.68 g/cm**3", "104.9 lb/ft**3",
       si_field="max_dry_density_kg_per_m3", unit=("g/cm**3", "lb/ft**3"), symbol="ρd,max",
       help="Reference maximum dry density, for the relative compaction."),
    _q("void_ratio", units.NUMBER, S, "Void ratio", "0.65", si_field="void_ratio", symbol="e",
       on_forms=False, help="Void ratio, when it is known rather than worked out."),
    _q("d10", L, S, "D10", "0.30 mm", "0.012 in", si_field="d10_m", unit=("mm", "in"),
       symbol="D₁₀", help="Particle size that 10 % of the soil is finer than."),
    _q("max_particle_size", L, S, "Max. particle size", "12.5 mm", "0.5 in",
       si_field="max_particle_size_m", unit=("mm", "in"), symbol="Dmax",
       help="Largest particle in the specimen."),
    _q("retained_on_lower_sieve", units.FRACTION, S, "Retained on the lower sieve", "40 %",
       si_field="retained_on_lower_sieve", positive=False,
       help="Share of the soil retained on the lower of the two sieves of the size rule."),
    Entry("stiff_material", units.FLAG, S, "Stiff material", si_field="stiff_material",
          on_forms=False,
          help="Declared stiff: a B-value that stops rising with back pressure may be accepted."),
    _q("final_diameter", L, S, "Diameter after consolidation", "7.08 cm", "2.79 in",
       unit=("cm", "in"), replaces="diameter", hint="flexible wall",
       help="Flexible wall: diameter at permeation; replaces the diameter."),
    _q("final_length", L, S, "Length after consolidation", "11.52 cm", "4.54 in",
       unit=("cm", "in"), replaces="length", hint="flexible wall",
       help="Flexible wall: length at permeation; replaces the length."),
)
# fmt: on
SPECIMEN_NEEDS = (Need(("diameter", "area")),)

# --- the apparatus (the permeameter's geometry, from the register or typed) ------------------

# fmt: off
APPARATUS: tuple[Entry, ...] = (
    _q("standpipe_area", units.AREA, A, "Standpipe area", "0.283 cm**2", "0.044 in**2",
       si_field="standpipe_area_m2", unit=("cm**2", "in**2"), symbol="a"),
    _q("standpipe_diameter", L, A, "Standpipe diameter", "0.60 cm", "0.24 in",
       si_field="standpipe_area_m2", unit=("cm", "in"), symbol="d"),
    _q("headwater_area", units.AREA, A, "Headwater burette area", "0.71 cm**2", "0.110 in**2",
       si_field="headwater_area_m2", unit=("cm**2", "in**2"), symbol="a_in"),
    _q("headwater_diameter", L, A, "Headwater burette diameter", "0.95 cm", "0.37 in",
       si_field="headwater_area_m2", unit=("cm", "in"), on_forms=False),
    _q("tailwater_area", units.AREA, A, "Tailwater burette area", "0.95 cm**2", "0.147 in**2",
       si_field="tailwater_area_m2", unit=("cm**2", "in**2"), symbol="a_out"),
    _q("tailwater_diameter", L, A, "Tailwater burette diameter", "1.10 cm", "0.43 in",
       si_field="tailwater_area_m2", unit=("cm", "in"), on_forms=False),
    _q("manometer_spacing", L, A, "Manometer port spacing", "15.0 cm", "5.9 in",
       si_field="manometer_spacing_m", unit=("cm", "in"), symbol="L",
       help="Flow length between the manometer ports; replaces the specimen length."),
)
# fmt: on

# --- trials and readings --------------------------------------------------------------------

# fmt: off
TRIAL: tuple[Entry, ...] = (
    _q("volume", units.VOLUME, TR, "Volume collected", "355 mL", si_field="volume_m3",
       unit=("mL", "mL"), symbol="V", resolution="0.1 mL"),
    _q("water_mass", units.MASS, TR, "Water mass collected", "354.2 g", si_field="water_mass_kg",
       unit=("g", "g"), symbol="m_w", resolution="0.01 g"),
    _q("duration", units.DURATION, TR, "Duration", "3600 s", si_field="duration_s",
       unit=("s", "s"), symbol="t", resolution="0.1 s", hint="or use the stopwatch"),
    _q("head_difference", L, TR, "Head difference", "4.50 cm", "1.77 in",
       si_field="head_difference_m", unit=("cm", "in"), symbol="Δh", resolution="1 mm"),
    _q("pressure_difference", units.PRESSURE, TR, "Pressure difference", "35 kPa", "5.1 psi",
       si_field="pressure_difference_pa", unit=("kPa", "psi"), symbol="Δp",
       resolution="0.1 kPa"),
    _q("inflow_volume", units.VOLUME, TR, "Inflow volume", "9.75 mL", si_field="inflow_volume_m3",
       unit=("mL", "mL"), symbol="V_in", resolution="0.05 mL"),
    _q("outflow_volume", units.VOLUME, TR, "Outflow volume", "9.50 mL",
       si_field="outflow_volume_m3", unit=("mL", "mL"), symbol="V_out", resolution="0.05 mL"),
    _q("head_initial", L, TR, "Head at start", "100.0 cm", "39.4 in", si_field="head_initial_m",
       unit=("cm", "in"), symbol="h₁", resolution="1 mm"),
    _q("head_final", L, TR, "Head at end", "70.0 cm", "27.6 in", si_field="head_final_m",
       unit=("cm", "in"), symbol="h₂", resolution="1 mm"),
    _q("flow_rate", units.FLOW_RATE, TR, "Flow rate", "0.020 mL/min",
       si_field="flow_rate_m3_per_s", unit=("mL/min", "mL/min"), symbol="q"),
    _q("temperature", units.TEMPERATURE, TR, "Temperature", "21.5 degC", "70.7 degF",
       si_field="temperature_c", unit=("degC", "degF"), symbol="T", positive=False,
       resolution="0.1 K",
       help="Permeant temperature; without it k is not corrected."),
)
# fmt: on
# fmt: off
READING: tuple[Entry, ...] = (
    _q("time", units.TIME, RD, "Time", "600 s", si_field="time_s", unit=("s", "s"), symbol="t",
       positive=False),
    _q("head", L, RD, "Head", "110.7 cm", "43.6 in", si_field="head_m", unit=("cm", "in"),
       symbol="h"),
)
# fmt: on
# A falling-head run for examples: (time, head), ln h falling linearly with time.
EXAMPLE_READINGS = (
    ("0 s", "120.0 cm"),
    ("600 s", "110.7 cm"),
    ("1200 s", "102.0 cm"),
    ("1800 s", "94.1 cm"),
)

# --- saturation, options, specification, and the test's own entries -------------------------

# fmt: off
SATURATION: tuple[Entry, ...] = (
    _q("back_pressure", units.PRESSURE, Scope.SATURATION, "Back pressure", "345 kPa", "50 psi",
       si_field="back_pressure_pa", unit=("kPa", "psi"), positive=False),
    _q("b_value", units.NUMBER, Scope.SATURATION, "B-value", "0.96", si_field="b_value",
       symbol="B", positive=False, help="Skempton's B measured after this step."),
)
# fmt: on
# fmt: off
OPTIONS: tuple[Entry, ...] = (
    _q("reference_temperature", units.TEMPERATURE, OPT, "Reference temperature", "20 degC",
       si_field="reference_temperature_c", unit=("degC", "degC"), positive=False),
    Entry("temperature_correction", units.CHOICE, OPT, "Temperature correction",
          si_field="temperature_correction", choices=("iapws", "astm_d5084")),
    Entry("water_density", units.CHOICE, OPT, "Water density",
          si_field="water_density", choices=("temperature", "nominal")),
    _q("viscosity", units.VISCOSITY, OPT, "Water viscosity", "1.002 mPa*s",
       si_field="viscosity_pa_s", unit=("mPa*s", "mPa*s"), symbol="η",
       help="Overrides the viscosity of water at the test temperature."),
    _q("unit_weight", units.UNIT_WEIGHT, OPT, "Unit weight of water", "9.79 kN/m**3",
       "62.3 lbf/ft**3", si_field="unit_weight_n_per_m3", unit=("kN/m**3", "lbf/ft**3"),
       symbol="γw", help="Overrides the unit weight of water."),
)
# fmt: on
# fmt: off
SPECIFICATION: tuple[Entry, ...] = (
    _q("k_max", units.CONDUCTIVITY, SP, "Specification limit on k", "1e-9 m/s", "2.8e-4 ft/day",
       si_field="k_max_m_per_s", unit=("m/s", "ft/day"), symbol="k_max"),
    Entry("decision_rule", units.CHOICE, SP, "Decision rule", si_field="decision_rule",
          choices=DECISION_RULES,
          help="Simple acceptance (k at or below the limit) or guarded acceptance (the "
          "expanded uncertainty must clear the limit); ILAC-G8:09/2019."),
)
# fmt: on
# fmt: off
TEST: tuple[Entry, ...] = (
    _q("target_dry_density", units.DENSITY, T, "Target dry density", "1.68 g/cm**3",
       "104.9 lb/ft**3", unit=("g/cm**3", "lb/ft**3"),
       help="Compacted specimens: the dry density to prepare to."),
    _q("spec_k_max", units.CONDUCTIVITY, T, "Specification limit on k", "1e-9 m/s",
       "2.8e-4 ft/day", unit=("m/s", "ft/day"),
       help="The project's limit applies unless this test has its own."),
    Entry("permeant", units.TEXT, T, "Permeant", example="de-aired tap water",
          help="The liquid passed through the specimen."),
    _q("cell_pressure", units.PRESSURE, T, "Cell pressure", "550 kPa", "80 psi",
       unit=("kPa", "psi"), positive=False, hint="flexible wall",
       help="Flexible wall: the cell pressure."),
    _q("back_pressure", units.PRESSURE, T, "Back pressure", "515 kPa", "75 psi",
       unit=("kPa", "psi"), positive=False, help="Flexible wall: the back pressure."),
    _q("effective_confining", units.PRESSURE, T, "Effective confining pressure", "35 kPa",
       "5 psi", unit=("kPa", "psi"), positive=False,
       help="Flexible wall: cell pressure less the mean pore pressure."),
)
# fmt: on

# --- the stages of a flexible-wall test (set-up, saturation, consolidation, permeation, after) ---
# The stage forms also use the specimen's, the test's and the trial's own entries (diameter,
# cell pressure, temperature ...); these are the ones only a stage asks for.
STG = Scope.STAGE
# fmt: off
STAGE: tuple[Entry, ...] = (
    Entry("membrane", units.TEXT, STG, "Membrane", example="latex, 0.30 mm",
          help="The membrane round the specimen: material and thickness."),
    Entry("filter_papers", units.TEXT, STG, "Filter papers", example="one at each end",
          help="Filter papers between the specimen and the porous stones."),
    Entry("porous_stones", units.TEXT, STG, "Porous stones", example="boiled and de-aired",
          help="The porous stones or discs and how they were prepared."),
    _q("elapsed", units.TIME, STG, "Time", "30 min", unit=("min", "min"), positive=False,
       help="Time since the stage started."),
    _q("cell_pressure_before", units.PRESSURE, STG, "Cell pressure before", "350 kPa", "50.8 psi",
       unit=("kPa", "psi"), positive=False, symbol="σ₃,0"),
    _q("cell_pressure_after", units.PRESSURE, STG, "Cell pressure after", "400 kPa", "58.0 psi",
       unit=("kPa", "psi"), positive=False, symbol="σ₃,1"),
    _q("pore_pressure_before", units.PRESSURE, STG, "Pore pressure before", "330 kPa",
       "47.9 psi", unit=("kPa", "psi"), positive=False, symbol="u₀"),
    _q("pore_pressure_after", units.PRESSURE, STG, "Pore pressure after", "378 kPa", "54.8 psi",
       unit=("kPa", "psi"), positive=False, symbol="u₁",
       help="Pore pressure once it has settled after the cell-pressure rise."),
    _q("volume_change", units.VOLUME, STG, "Volume change", "4.2 mL", unit=("mL", "mL"),
       positive=False, symbol="ΔV",
       help="Water expelled from the specimen since the stage started (compression positive)."),
    _q("axial_change", L, STG, "Height decrease", "0.40 mm", "0.016 in", unit=("mm", "in"),
       positive=False, symbol="ΔH",
       help="Measured decrease of height; leave empty to take the strain as isotropic."),
    Entry("permeation_method", units.CHOICE, STG, "Hydraulic system",
          choices=("constant_head", "falling_head", "falling_head_rising_tail"),
          help="ASTM D5084 A (constant head), B (falling head, constant tailwater) or C "
          "(falling headwater, rising tailwater)."),
    _q("headwater_reading", units.VOLUME, STG, "Headwater burette", "2.40 mL", unit=("mL", "mL"),
       positive=False, resolution="0.05 mL",
       help="Headwater burette scale reading (numbered from the top)."),
    _q("tailwater_reading", units.VOLUME, STG, "Tailwater burette", "20.10 mL", unit=("mL", "mL"),
       positive=False, resolution="0.05 mL",
       help="Tailwater burette scale reading (numbered from the top)."),
    _q("headwater_pressure", units.PRESSURE, STG, "Headwater pressure", "520 kPa", "75.4 psi",
       unit=("kPa", "psi"), positive=False, symbol="p_hw"),
    _q("tailwater_pressure", units.PRESSURE, STG, "Tailwater pressure", "500 kPa", "72.5 psi",
       unit=("kPa", "psi"), positive=False, symbol="p_tw"),
    Entry("new_run", units.FLAG, STG, "Burettes refilled",
          help="The burettes were refilled or reset just before this reading."),
    _q("post_diameter", L, STG, "Diameter after the test", "7.08 cm", "2.79 in",
       unit=("cm", "in"), symbol="D_f"),
    _q("post_length", L, STG, "Length after the test", "11.52 cm", "4.54 in", unit=("cm", "in"),
       symbol="L_f"),
    _q("post_wet_mass", units.MASS, STG, "Wet mass after the test", "566.0 g", unit=("g", "g"),
       symbol="m_f", resolution="0.01 g"),
    _q("post_dry_mass", units.MASS, STG, "Oven-dry mass", "462.0 g", unit=("g", "g"),
       symbol="m_s", resolution="0.01 g", help="Mass of the whole specimen after oven drying."),
)
# fmt: on

CATALOGUE: dict[Scope, tuple[Entry, ...]] = {
    Scope.TEST: TEST,
    Scope.SPECIMEN: SPECIMEN,
    Scope.APPARATUS: APPARATUS,
    Scope.SATURATION: SATURATION,
    Scope.TRIAL: TRIAL,
    Scope.READING: READING,
    Scope.OPTION: OPTIONS,
    Scope.SPECIFICATION: SPECIFICATION,
    Scope.STAGE: STAGE,
}

# --- standards and methods ----------------------------------------------------------------------

# fmt: off
STANDARDS: tuple[Standard, ...] = (
    Standard(D5084, "Hydraulic conductivity of saturated porous materials using a flexible "
             "wall permeameter", "flexible"),
    Standard(D5856, "Hydraulic conductivity of porous material using a rigid-wall, "
             "compaction-mold permeameter", "rigid"),
    Standard(D2434, "Permeability of granular soils (constant head)", "rigid"),
    Standard(ISO, "Laboratory testing of soil, part 11: permeability tests", "either"),
)
# fmt: on

FALLING_RUN = ("head_initial", "head_final", "duration")
FLOWS = ("inflow_volume", "outflow_volume")
# fmt: off
METHODS: tuple[Method, ...] = (
    Method(
        id="falling_head",
        name="Falling head, constant tailwater",
        short_name="Falling head",
        summary="The head in a standpipe falls through the specimen to a constant tailwater.",
        trial=(*FALLING_RUN, "temperature"),
        needs=(Need(("head_initial",)), Need(("head_final",)), Need(("duration",))),
        apparatus=("standpipe_diameter", "standpipe_area"),
        apparatus_needs=(Need(("standpipe_area", "standpipe_diameter")),),
        readings=True,
        replaced_by_readings=FALLING_RUN,
        standards=(D5084, D5856, ISO),
    ),
    Method(
        id="falling_head_rising_tail",
        name="Falling headwater, rising tailwater",
        short_name="Rising tailwater",
        summary="Headwater and tailwater burettes of their own areas: the head difference "
        "falls as one burette empties and the other fills.",
        trial=(*FALLING_RUN, *FLOWS, "temperature"),
        needs=(
            Need(("head_initial",)), Need(("duration",)), Need(("head_final",), or_all=FLOWS),
        ),
        apparatus=("headwater_area", "tailwater_area"),
        apparatus_needs=(
            Need(("headwater_area", "headwater_diameter")),
            Need(("tailwater_area", "tailwater_diameter")),
        ),
        readings=True,
        replaced_by_readings=FALLING_RUN,
        standards=(D5084, D5856, ISO),
    ),
    Method(
        id="constant_head",
        name="Constant head",
        short_name="Constant head",
        summary="Water collected over a timed interval under a constant head difference.",
        trial=(
            "volume", "water_mass", "duration", "head_difference", "pressure_difference",
            *FLOWS, "temperature",
        ),
        needs=(
            Need(("duration",)),
            Need(("head_difference", "pressure_difference")),
            Need(("volume", "water_mass"), or_all=FLOWS),
        ),
        apparatus=("manometer_spacing",),
        standards=(D2434, D5084, D5856, ISO),
    ),
    Method(
        id="constant_rate",
        name="Constant rate of flow",
        short_name="Constant rate",
        summary="A pump drives a constant flow rate; the pressure difference it needs is read.",
        trial=("flow_rate", "pressure_difference", "head_difference", *FLOWS, "temperature"),
        needs=(Need(("flow_rate",)), Need(("pressure_difference", "head_difference"))),
        standards=(D5084, D5856, ISO),
    ),
)
# fmt: on
# Entries a method accepts that the page forms do not ask for (the API takes them).
FORM_QUIET: dict[str, frozenset[str]] = {
    "constant_head": frozenset({"pressure_difference", "inflow_volume", "outflow_volume"}),
    "constant_rate": frozenset({"head_difference", "inflow_volume", "outflow_volume"}),
}


# --- look-ups -----------------------------------------------------------------------------------


def entries(scope: Scope) -> tuple[Entry, ...]:
    """Every entry of one scope, in form order."""
    return CATALOGUE[scope]


def entry(scope: Scope, entry_id: str) -> Entry:
    """Return the entry ``entry_id`` of ``scope``.

    Raises
    ------
    KeyError
        When the scope has no such entry.
    """
    for item in CATALOGUE[scope]:
        if item.id == entry_id:
            return item
    raise KeyError(f"{scope.value} has no entry {entry_id!r}")


def find(scope: Scope, entry_id: str) -> Entry | None:
    """Return the entry, or None when the scope has no such entry."""
    return next((item for item in CATALOGUE[scope] if item.id == entry_id), None)


def _entry_anywhere(entry_id: str) -> Entry | None:
    for scope in (Scope.TRIAL, Scope.APPARATUS, Scope.SPECIMEN):
        found = find(scope, entry_id)
        if found is not None:
            return found
    return None


def _noun(entry_id: str) -> str:
    found = _entry_anywhere(entry_id)
    return found.noun if found is not None else entry_id.replace("_", " ")


def need_text(need: Need) -> str:
    """Say what a need accepts, in words.

    For example 'the volume collected, the water mass collected, or both the inflow volume
    and the outflow volume'; for one entry, what that entry accepts.
    """
    parts = [_noun(i) for i in need.one_of]
    if need.or_all:
        parts.append("both " + " and ".join(_noun(i) for i in need.or_all))
    if len(parts) == 1:
        only = _entry_anywhere(need.one_of[0])
        return only.accepted if only is not None else parts[0]
    if len(parts) == 2:
        return " or ".join(parts)
    return ", ".join(parts[:-1]) + ", or " + parts[-1]


def method(method_id: str) -> Method:
    """Return the method ``method_id``.

    Raises
    ------
    KeyError
        When no method has that id.
    """
    for item in METHODS:
        if item.id == method_id:
            return item
    raise KeyError(f"no method {method_id!r}")


def method_ids() -> tuple[str, ...]:
    """Return the contract's method names, in the catalogue's order."""
    return tuple(m.id for m in METHODS)


def method_name(method_id: str) -> str:
    """Return the display name of a method (the id itself for an unknown one)."""
    return next((m.name for m in METHODS if m.id == method_id), method_id)


def permeameter_ids() -> tuple[str, ...]:
    """Return the kinds of permeameter a request may name (``permeameter``)."""
    return PERMEAMETERS


def standard_ids() -> tuple[str, ...]:
    """Return the standards a result can be labelled with."""
    return tuple(s.id for s in STANDARDS)


def form_entries(method_id: str) -> tuple[Entry, ...]:
    """Return the trial entries a page form asks for, in order."""
    quiet = FORM_QUIET.get(method_id, frozenset())
    return tuple(e for e in method(method_id).trial_entries if e.id not in quiet and e.on_forms)


def all_trial_keys() -> frozenset[str]:
    """Every key any method's trial may carry."""
    return frozenset().union(*(m.trial_keys for m in METHODS))


# --- naming a field in a message ----------------------------------------------------------------


def _scope_of(section: str) -> Scope | None:
    try:
        return Scope(section)
    except ValueError:
        return None


def _word(part: str, scope: Scope | None) -> str:
    if scope is not None:
        found = find(scope, part)
        if found is not None:
            return found.label
    return part.replace("_", " ").capitalize()


def label_of(loc: Sequence[str | int], numbers: Sequence[int] | None = None) -> str:
    """Name a field's location in words, with positions counted from one.

    Parameters
    ----------
    loc : sequence of str or int
        The contract path, e.g. ``("trials", 2, "head_final")``.
    numbers : sequence of int, optional
        The number each trial position goes by (a stored test's trial numbers); by default
        position + 1.

    Returns
    -------
    str
        ``"Trial 3 · Head at end"``, ``"Specimen · Length"``,
        ``"Trial 1 · Reading 4 · Head"``; ``"Request"`` for an empty location.
    """
    words: list[str] = []
    scope: Scope | None = None
    parts = list(loc)
    index = 0
    while index < len(parts):
        part = parts[index]
        following = parts[index + 1] if index + 1 < len(parts) else None
        index += 1
        if isinstance(part, int):
            words.append(f"Item {part + 1}")
        elif part not in SECTION_WORDS:
            words.append(_word(part, scope))
        elif part in NUMBERED and isinstance(following, int):
            scope = _scope_of(part)
            number = following + 1
            if part == "trials" and numbers is not None and following < len(numbers):
                number = numbers[following]
            words.append(f"{SECTION_WORDS[part]} {number}")
            index += 1
        elif following is None:
            words.append(part.capitalize() if part in NUMBERED else SECTION_WORDS[part])
        else:
            scope = _scope_of(part)
            if part not in SILENT_SECTIONS:
                words.append(SECTION_WORDS[part])
    return SEPARATOR.join(words) or "Request"


# --- examples for the API documentation ----------------------------------------------------------


def example_request(method_id: str, *, readings: bool = False) -> dict[str, Any]:
    """Build a request the engine reduces from the entries' examples.

    Each need is met with its first option; the temperature is added. With ``readings``, the
    trial is the run of :data:`EXAMPLE_READINGS` (methods that take readings only).
    """
    m = method(method_id)
    specimen = {i: entry(Scope.SPECIMEN, i).example for i in ("length", "diameter")}
    apparatus = {
        i: entry(Scope.APPARATUS, i).example for need in m.apparatus_needs for i in need.one_of[:1]
    }
    trial: dict[str, Any]
    if readings and m.readings:
        trial = {"readings": [{"time": t, "head": h} for t, h in EXAMPLE_READINGS]}
    else:
        trial = {i: entry(Scope.TRIAL, i).example for need in m.needs for i in need.one_of[:1]}
    if "temperature" in m.trial:
        trial["temperature"] = entry(Scope.TRIAL, "temperature").example
    request: dict[str, Any] = {"method": m.id, "specimen": specimen, "trials": [trial]}
    if apparatus:
        request["apparatus"] = apparatus
    return request


__all__ = [
    "CATALOGUE",
    "METHODS",
    "SPECIMEN_NEEDS",
    "STANDARDS",
    "UNIT_CHOICES",
    "Entry",
    "Method",
    "Need",
    "Scope",
    "Standard",
    "UnitPair",
    "entries",
    "entry",
    "example_request",
    "find",
    "form_entries",
    "label_of",
    "method",
    "method_ids",
    "method_name",
    "need_text",
    "standard_ids",
]
