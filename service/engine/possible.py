"""Refusals of inputs that describe an impossible test or specimen.

Read by parse.py: a specimen whose mass, size, water content and G_s leave no voids, and
rising-tailwater
burette volumes that leave no positive head (docs/methods.md §3.2).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any, Protocol

from service.engine.catalogue import Method
from service.engine.errors import Loc
from service.engine.model import Apparatus, Options, Trial
from service.engine.phase import phase_relations
from service.engine.reductions import rising_tail_final_head
from service.engine.water import water_density


class Problems(Protocol):
    """Where a refusal is noted (the parser's reader)."""

    def add(self, loc: Loc, value: Any, accepted: str, reason: str, kind: str = ...) -> None:
        """Note one refused field."""


def check_possible(
    reader: Problems,
    method: Method | None,
    spec_values: Mapping[str, Any],
    apparatus: Apparatus,
    trials: list[Trial | None],
    raw_trials: Any,
    options: Options,
) -> None:
    """Refuse inputs that describe an impossible test or specimen."""
    if "area_m2" in spec_values:
        rho_w = water_density(20.0, options.water_density)
        try:
            phase_relations(
                area_m2=spec_values["area_m2"],
                length_m=spec_values.get("length_m"),
                wet_mass_kg=spec_values.get("wet_mass_kg"),
                water_content=spec_values.get("water_content"),
                specific_gravity=spec_values.get("specific_gravity"),
                max_dry_density_kg_per_m3=spec_values.get("max_dry_density_kg_per_m3"),
                void_ratio=spec_values.get("void_ratio"),
                water_density_kg_per_m3=rho_w,
            )
        except ValueError as exc:
            reader.add(
                ("specimen", "wet_mass"),
                None,
                "a wet mass, size, water content and G_s that leave voids",
                str(exc),
                "impossible_test",
            )
    if method is None or method.id != "falling_head_rising_tail":
        return
    a_in, a_out = apparatus.headwater_area_m2, apparatus.tailwater_area_m2
    for j, trial in enumerate(trials):
        if trial is None or trial.readings is not None or trial.head_final_m is not None:
            continue
        if trial.head_initial_m is None or a_in is None or a_out is None:
            continue
        h2 = rising_tail_final_head(
            trial.head_initial_m,
            trial.inflow_volume_m3 or 0.0,
            trial.outflow_volume_m3 or 0.0,
            a_in,
            a_out,
        )
        if not (h2 > 0.0 and math.isfinite(h2)):
            reader.add(
                ("trials", j, "inflow_volume"),
                raw_trials[j].get("inflow_volume"),
                "burette volumes that leave a positive head: V_in/a_in + V_out/a_out below "
                "the head at start",
                f"with outflow_volume they imply a final head of {h2 * 100:.2f} cm",
                "impossible_test",
            )
