"""Assemble the reduction request (the contract's JSON shape) from a test's stored entries.

What the technician typed is stored as text; this is the one place that turns a stored test
back into the engine's input, so a stored result can always be recomputed from the entries."""

from __future__ import annotations

import hashlib
import json
from collections.abc import Sequence
from typing import Any

from service.apparatus.models import Apparatus
from service.lab_tests.models import PermeabilityTest, SaturationStep, Specimen, Trial


def _put(target: dict[str, Any], key: str, text: str) -> None:
    if text:
        target[key] = text


def specimen_entries(specimen: Specimen | None) -> dict[str, Any]:
    if specimen is None:
        return {}
    out: dict[str, Any] = {}
    # Dimensions at permeation (after consolidation) replace the as-prepared ones.
    _put(out, "length", specimen.final_length_text or specimen.length_text)
    _put(out, "diameter", specimen.final_diameter_text or specimen.diameter_text)
    _put(out, "wet_mass", specimen.wet_mass_text)
    _put(out, "water_content", specimen.water_content_text)
    _put(out, "max_dry_density", specimen.max_dry_density_text)
    _put(out, "d10", specimen.d10_text)
    _put(out, "max_particle_size", specimen.max_particle_size_text)
    if specimen.specific_gravity is not None:
        out["specific_gravity"] = specimen.specific_gravity
    if specimen.retained_on_lower_sieve_pct is not None:
        out["retained_on_lower_sieve"] = f"{specimen.retained_on_lower_sieve_pct} %"
    if specimen.stiff_material:
        out["stiff_material"] = True
    return out


def apparatus_entries(permeameter: Apparatus | None) -> dict[str, Any]:
    if permeameter is None:
        return {}
    out: dict[str, Any] = {}
    _put(out, "standpipe_area", permeameter.standpipe_area_text)
    _put(out, "headwater_area", permeameter.headwater_area_text)
    _put(out, "tailwater_area", permeameter.tailwater_area_text)
    _put(out, "manometer_spacing", permeameter.port_spacing_text)
    return out


def build_request(
    test: PermeabilityTest,
    *,
    specimen: Specimen | None,
    trials: Sequence[Trial],
    saturation: Sequence[SaturationStep] = (),
    permeameter: Apparatus | None = None,
) -> dict[str, Any]:
    """The contract-shaped reduction request for a stored test (excluded trials left out)."""
    apparatus = apparatus_entries(permeameter)
    apparatus.update(test.options.get("apparatus", {}))
    request: dict[str, Any] = {
        "method": test.method,
        "standard": test.standard or None,
        "options": {
            "reference_temperature": f"{test.reference_temperature_c:g} degC",
            "temperature_correction": test.temperature_correction,
            **{k: v for k, v in test.options.items() if k != "apparatus"},
        },
        "specimen": specimen_entries(specimen),
        "apparatus": apparatus,
        "saturation": [
            {"back_pressure": step.back_pressure_text, "b_value": step.b_value}
            for step in sorted(saturation, key=lambda s: s.seq)
        ],
        "trials": [dict(t.entries) for t in sorted(trials, key=lambda t: t.seq) if not t.excluded],
    }
    if test.spec_k_max_text:
        request["specification"] = {"k_max": test.spec_k_max_text}
    return request


def input_hash(request: dict[str, Any]) -> str:
    """SHA-256 of the canonical JSON of a reduction request."""
    encoded = json.dumps(request, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(encoded.encode()).hexdigest()
