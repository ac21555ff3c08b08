"""The door to the engine's stage computations of a flexible-wall test (docs/methods.md §14)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from service.engine import (
    EngineInputError,
    logger,
    permeation,
    stages,
)
from service.engine.checks import Check
from service.errors import FieldProblem, InvalidInput

# --- the stages of a flexible-wall test ----------------------------------------------------------
# Each takes SI figures the stage service read from what was typed and returns plain values
# for storage; a refusal is an InvalidInput whose paths are the stage's own (`where` maps the
# engine's list names onto the stage's).


def _stage_refusal(
    exc: EngineInputError, where: Mapping[str, tuple[str | int, ...]]
) -> InvalidInput:
    """The engine's refusal at the stage's paths: a list the engine names (``readings``) is
    found under the stage's ``groups``, a single value under its ``entries``."""
    problems = []
    for p in exc.problems:
        loc: list[str | int] = list(p.loc)
        if loc and isinstance(loc[0], str):
            head = where.get(loc[0], ("groups", loc[0]) if len(loc) > 1 else ("entries", loc[0]))
            loc = [*head, *loc[1:]]
        loc = ["elapsed" if part == "time" else part for part in loc]
        problems.append(FieldProblem(tuple(loc), p.reason, p.value, p.accepted, p.kind))
    return InvalidInput(problems=problems)


def _check_dict(check: Check) -> dict[str, Any]:
    return {
        "id": check.id,
        "status": check.status,
        "measured": check.measured,
        "limit": check.limit,
        "message": check.message,
    }


def stage_saturation(
    b_checks: Sequence[Mapping[str, float | None]], *, stiff: bool, standard: str | None
) -> dict[str, Any]:
    """Δσ₃, Δu and B of each B check (Skempton 1954) and the saturation check's verdict."""
    readings = [
        stages.BCheckReading(
            back_pressure_pa=r["back_pressure"] or 0.0,
            cell_pressure_before_pa=r["cell_pressure_before"] or 0.0,
            cell_pressure_after_pa=r["cell_pressure_after"] or 0.0,
            pore_pressure_before_pa=r["pore_pressure_before"] or 0.0,
            pore_pressure_after_pa=r["pore_pressure_after"] or 0.0,
            time_s=r.get("elapsed"),
        )
        for r in b_checks
    ]
    if not readings:
        return {"b_checks": [], "check": None}
    try:
        series = stages.saturation_series(readings, stiff_material=stiff, standard=standard or None)
    except EngineInputError as exc:
        raise _stage_refusal(exc, {}) from None
    return {
        "b_checks": [
            {
                "back_pressure_pa": c.back_pressure_pa,
                "cell_pressure_increment_pa": c.cell_pressure_increment_pa,
                "pore_pressure_increment_pa": c.pore_pressure_increment_pa,
                "b_value": c.b_value,
                "time_s": c.time_s,
            }
            for c in series.b_checks
        ],
        "last_change": series.last_change,
        "check": _check_dict(series.check),
    }


def stage_consolidation(
    readings: Sequence[tuple[float, float]],
    *,
    length_m: float | None,
    diameter_m: float | None,
    axial_change_m: float | None,
    dry_mass_kg: float | None,
    specific_gravity: float | None,
) -> dict[str, Any]:
    """End of consolidation from the root-time plot, and the dimensions at permeation.

    `readings` are (time [s], volume change [m³]); the dimensions need the set-up's length
    and diameter, the pore volume also the dry mass and Gₛ."""
    try:
        end = stages.consolidation_end([stages.VolumeReading(t, v) for t, v in readings])
    except EngineInputError as exc:
        raise _stage_refusal(exc, {}) from None
    out: dict[str, Any] = {
        "end": {
            "complete": end.complete,
            "volume_change_m3": end.volume_change_m3,
            "slope_ratio": end.slope_ratio,
            "t100_s": end.t100_s,
            "rate_fraction": end.rate_fraction,
            "method": "root-time: final slope of ΔV against √t at most "
            f"{end.rate_fraction:.0%} of the initial slope",
        },
        "dimensions": None,
        "pore_volume_m3": None,
    }
    if length_m is None or diameter_m is None:
        return out
    try:
        dims = stages.dimensions_after_volume_change(
            length_m=length_m,
            diameter_m=diameter_m,
            volume_change_m3=end.volume_change_m3,
            axial_change_m=axial_change_m,
        )
        state = (
            stages.permeation_state(
                dims,
                dry_mass_kg=dry_mass_kg,
                specific_gravity=specific_gravity,
                water_density_kg_per_m3=1000.0,
            )
            if dry_mass_kg
            else None
        )
    except EngineInputError as exc:
        raise _stage_refusal(exc, {"volume_change": ("groups", "readings")}) from None
    out["dimensions"] = {
        "length_m": dims.length_m,
        "diameter_m": dims.diameter_m,
        "area_m2": dims.area_m2,
        "volume_m3": dims.volume_m3,
        "volumetric_strain": dims.volumetric_strain,
        "axial_strain": dims.axial_strain,
        "method": dims.method,
    }
    out["pore_volume_m3"] = state.pore_volume_m3 if state is not None else None
    return out


def stage_dry_mass(wet_mass_kg: float | None, water_content: float | None) -> float | None:
    """Mass of solids from the specimen as prepared (M/(1 + w)), None when not known."""
    if wet_mass_kg is None or water_content is None:
        return None
    return stages.dry_mass(wet_mass_kg, water_content)


def stage_permeation(
    readings: Sequence[Mapping[str, Any]],
    *,
    method: str,
    headwater_area_m2: float,
    tailwater_area_m2: float | None,
    zero_flow: Mapping[str, float | None] | None,
    length_m: float,
    area_m2: float,
    pore_volume_m3: float | None,
    standard: str | None,
    saturation: Sequence[tuple[float, float]] = (),
) -> dict[str, Any]:
    """Heads from pressures and burette levels, k per interval, and the termination checks.

    Burettes are read in volume graduations numbered from the top; the zero-flow head read
    with the specimen bypassed is subtracted from every head. The determinations go to the
    reduction pipeline as trials, so its steady-state and flow-ratio checks judge them."""
    headwater = permeation.Burette(area_m2=headwater_area_m2)
    tailwater = permeation.Burette(area_m2=tailwater_area_m2) if tailwater_area_m2 else None
    panel = [
        permeation.PanelReading(
            time_s=r["elapsed"],
            headwater_reading=r["headwater_reading"],
            tailwater_reading=r.get("tailwater_reading") if tailwater is not None else None,
            headwater_pressure_pa=r["headwater_pressure"],
            tailwater_pressure_pa=r["tailwater_pressure"],
            temperature_c=r.get("temperature"),
            new_run=bool(r.get("new_run")),
        )
        for r in readings
    ]
    try:
        zero = 0.0
        if zero_flow and zero_flow.get("headwater_reading") is not None and tailwater:
            zero = permeation.zero_flow_head(
                permeation.PanelReading(
                    time_s=0.0,
                    headwater_reading=zero_flow["headwater_reading"] or 0.0,
                    tailwater_reading=zero_flow.get("tailwater_reading"),
                    headwater_pressure_pa=zero_flow.get("headwater_pressure") or 0.0,
                    tailwater_pressure_pa=zero_flow.get("tailwater_pressure") or 0.0,
                ),
                headwater,
                tailwater,
            )
        found = permeation.permeation_determinations(
            panel,
            method=method,
            headwater=headwater,
            tailwater=tailwater,
            length_m=length_m,
            area_m2=area_m2,
            zero_flow_head_m=zero,
            pore_volume_m3=pore_volume_m3,
        )
    except EngineInputError as exc:
        raise _stage_refusal(exc, {"zero_flow": ("groups", "zero_flow", 0)}) from None
    request = permeation.permeation_request(
        found, method=method, headwater=headwater, tailwater=tailwater
    )
    request["specimen"] = {"length": f"{length_m!r} m", "area": f"{area_m2!r} m**2"}
    if standard:
        request["standard"] = standard
        request["permeameter"] = "flexible_wall"
    if saturation:
        request["saturation"] = [
            {"back_pressure": f"{p!r} Pa", "b_value": b} for b, p in saturation
        ]
    # The package's core reduces it (imported here: the core imports this module).
    from service.lab_tests.reduction import reduce_payload

    reduced = reduce_payload(request)
    checks = reduced.result["checks"] if reduced.result is not None else []
    return {
        "zero_flow_head_m": zero,
        "determinations": [
            {
                "run": d.run,
                "time_start_s": d.time_start_s,
                "time_end_s": d.time_end_s,
                "head_initial_m": d.head_initial_m,
                "head_final_m": d.head_final_m,
                "gradient": d.gradient,
                "inflow_volume_m3": d.inflow_volume_m3,
                "outflow_volume_m3": d.outflow_volume_m3,
                "flow_ratio": d.flow_ratio,
                "temperature_c": d.temperature_c,
                "k_m_per_s": d.k_m_per_s,
                "k_ref_m_per_s": d.k_ref_m_per_s,
                "cumulative_flow_m3": d.cumulative_flow_m3,
                "pore_volumes": d.pore_volumes,
            }
            for d in found
        ],
        "k_ref_m_per_s": (
            reduced.result["result"].get("k_ref_m_per_s") if reduced.result is not None else None
        ),
        "checks": [
            {k: c.get(k) for k in ("id", "status", "measured", "limit", "message")} for c in checks
        ],
    }


def stage_post_test(
    *,
    length_m: float,
    diameter_m: float,
    wet_mass_kg: float,
    dry_mass_kg: float,
    specific_gravity: float | None,
) -> dict[str, Any]:
    """Water content, dry density, void ratio and degree of saturation after the test."""
    try:
        state = stages.post_test_state(
            length_m=length_m,
            diameter_m=diameter_m,
            wet_mass_kg=wet_mass_kg,
            dry_mass_kg=dry_mass_kg,
            specific_gravity=specific_gravity,
            water_density_kg_per_m3=1000.0,
        )
    except EngineInputError as exc:
        raise _stage_refusal(exc, {"dry_mass": ("entries", "post_dry_mass")}) from None
    phase = state.phase
    return {
        "water_content": state.water_content,
        "dry_density_kg_per_m3": phase.dry_density_kg_per_m3,
        "void_ratio": phase.void_ratio,
        "degree_of_saturation": phase.degree_of_saturation,
    }


def logger_readings(
    header: Sequence[str],
    rows: Sequence[Sequence[str]],
    mapping: Mapping[str, Any],
    kinds: Mapping[str, Any],
    *,
    first_row: int = 2,
) -> list[dict[str, Any]]:
    """A logger file's rows as stage readings, or every bad cell refused by row and column.

    `mapping` is the apparatus's stored mapping (``time``: column and unit or date-time
    format; ``channels``: quantity -> column and unit); `kinds` the physical kind of each
    quantity (the catalogue entry's). Each reading: ``elapsed`` and the quantities, each
    ``{"text": the cell with its unit, "si": the SI value}``."""
    time = mapping.get("time") or {}
    channels = tuple(
        logger.Channel(
            quantity=name,
            column=str(spec.get("column", "")),
            unit=str(spec.get("unit", "")),
            kind=kinds[name],
            required=bool(spec.get("required", True)),
        )
        for name, spec in (mapping.get("channels") or {}).items()
        if name in kinds
    )
    engine_mapping = logger.LoggerMapping(
        time=logger.TimeColumn(
            column=str(time.get("column", "")),
            unit=time.get("unit") or None,
            datetime_format=time.get("datetime_format") or None,
        ),
        channels=channels,
    )
    try:
        read = logger.parse_logger_rows(header, rows, engine_mapping, first_row=first_row)
    except EngineInputError as exc:
        raise InvalidInput(
            "the logger file was refused; nothing was stored",
            problems=[
                FieldProblem(
                    ("file", *p.loc[1:]) if p.loc and p.loc[0] == "file" else p.loc,
                    p.reason,
                    p.value,
                    p.accepted,
                    p.kind,
                    logger.cell_message(p) if p.loc and p.loc[0] == "file" else "",
                )
                for p in exc.problems
            ],
        ) from None
    units = {c.quantity: c.unit for c in channels}
    out = []
    for row in read.rows:
        elapsed = f"{row.texts['time']} {time['unit']}" if time.get("unit") else f"{row.time_s!r} s"
        reading: dict[str, Any] = {"elapsed": {"text": elapsed, "si": row.time_s}}
        for name, value in row.values.items():
            if value is not None:
                reading[name] = {"text": f"{row.texts[name]} {units[name]}", "si": value}
        out.append(reading)
    return out
