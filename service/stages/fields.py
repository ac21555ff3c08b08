"""What each stage asks for, built from the method catalogue's entries (declared there once):
its own entries, and its lists of readings (groups), in form order."""

from __future__ import annotations

from dataclasses import dataclass

from service.lab_tests.reduction import Entry, Scope, catalogue
from service.stages.models import StageName


@dataclass(frozen=True)
class Group:
    """A list of readings within a stage (one row each); `single` for a one-row group."""

    id: str
    label: str
    entries: tuple[Entry, ...]
    required: tuple[str, ...]
    single: bool = False


@dataclass(frozen=True)
class StageSpec:
    id: str
    title: str
    summary: str
    entries: tuple[Entry, ...]
    required: tuple[str, ...] = ()
    groups: tuple[Group, ...] = ()

    def group(self, group_id: str) -> Group:
        return next(g for g in self.groups if g.id == group_id)


def _e(scope: Scope, *ids: str) -> tuple[Entry, ...]:
    return tuple(catalogue.entry(scope, i) for i in ids)


_STAGE, _TEST, _SPEC = Scope.STAGE, Scope.TEST, Scope.SPECIMEN
_PANEL = ("headwater_reading", "tailwater_reading", "headwater_pressure", "tailwater_pressure")

STAGES: tuple[StageSpec, ...] = (
    StageSpec(
        StageName.SETUP,
        "Set-up",
        "The specimen in the cell: membrane, filters and stones, permeant, and the specimen "
        "as prepared.",
        entries=(
            *_e(_STAGE, "membrane", "filter_papers", "porous_stones"),
            *_e(_TEST, "permeant"),
            *_e(_SPEC, "diameter", "length", "wet_mass", "water_content", "specific_gravity"),
        ),
        required=("diameter", "length", "wet_mass"),
    ),
    StageSpec(
        StageName.SATURATION,
        "Saturation",
        "Back pressure raised in increments with the cell pressure; B checked with drainage "
        "closed.",
        entries=_e(_SPEC, "stiff_material"),
        groups=(
            Group(
                "increments",
                "Increment",
                (*_e(_STAGE, "elapsed"), *_e(_TEST, "cell_pressure", "back_pressure")),
                ("elapsed", "cell_pressure", "back_pressure"),
            ),
            Group(
                "b_checks",
                "B check",
                (
                    *_e(_STAGE, "elapsed"),
                    *_e(_TEST, "back_pressure"),
                    *_e(
                        _STAGE,
                        "cell_pressure_before",
                        "cell_pressure_after",
                        "pore_pressure_before",
                        "pore_pressure_after",
                    ),
                ),
                (
                    "back_pressure",
                    "cell_pressure_before",
                    "cell_pressure_after",
                    "pore_pressure_before",
                    "pore_pressure_after",
                ),
            ),
        ),
    ),
    StageSpec(
        StageName.CONSOLIDATION,
        "Consolidation",
        "The effective stress applied and the volume of water expelled against time, until "
        "it levels off.",
        entries=(*_e(_TEST, "cell_pressure", "back_pressure"), *_e(_STAGE, "axial_change")),
        required=("cell_pressure", "back_pressure"),
        groups=(
            Group(
                "readings",
                "Reading",
                _e(_STAGE, "elapsed", "volume_change"),
                ("elapsed", "volume_change"),
            ),
        ),
    ),
    StageSpec(
        StageName.PERMEATION,
        "Permeation",
        "Burette readings and panel pressures; the head, inflow, outflow and k are worked "
        "out from them.",
        entries=(
            *_e(_STAGE, "permeation_method"),
            *_e(Scope.APPARATUS, "headwater_area", "tailwater_area"),
        ),
        required=("permeation_method", "headwater_area"),
        groups=(
            Group(
                "zero_flow",
                "Zero-flow reading (specimen bypassed)",
                _e(_STAGE, *_PANEL),
                _PANEL,
                single=True,
            ),
            Group(
                "readings",
                "Reading",
                (
                    *_e(_STAGE, "elapsed", *_PANEL),
                    *_e(Scope.TRIAL, "temperature"),
                    *_e(_STAGE, "new_run"),
                ),
                ("elapsed", "headwater_reading", "headwater_pressure", "tailwater_pressure"),
            ),
        ),
    ),
    StageSpec(
        StageName.POST_TEST,
        "After the test",
        "The specimen taken out of the cell: dimensions, masses, water content and degree of "
        "saturation.",
        entries=_e(_STAGE, "post_diameter", "post_length", "post_wet_mass", "post_dry_mass"),
        required=("post_diameter", "post_length", "post_wet_mass", "post_dry_mass"),
    ),
)
STAGE_IDS = tuple(s.id for s in STAGES)


def stage_spec(stage: str) -> StageSpec | None:
    return next((s for s in STAGES if s.id == stage), None)
