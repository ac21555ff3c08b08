"""Reduce a validated test to k, flow figures, phase relations, uncertainty and checks."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import asdict
from functools import partial
from typing import Any

from service.engine import checks, conversions, reductions, water
from service.engine.errors import EngineInputError
from service.engine.model import (
    TRIAL_NUMBERS,
    Flow,
    GradientSeries,
    ReductionInput,
    ReductionResult,
    SpecimenResult,
    Summary,
    Trial,
    TrialResult,
)
from service.engine.phase import phase_relations
from service.engine.uncertainty import COVERAGE_FACTOR, sensitivities, type_a_of_mean
from service.engine.version import ENGINE_VERSION

CAUTIONS = (
    "Results describe the specimens tested under the stated conditions; the hydraulic "
    "conductivity of the soil in the field can differ.",
    "Use in design is for a licensed engineer under local codes and regulations.",
)

# Geometry inputs shared by all trials: name in the flat input -> label in the budget.
GEOMETRY_LABELS = {
    "flow_length_m": "specimen.length",
    "area_m2": "specimen.diameter",
    "standpipe_area_m2": "apparatus.standpipe_area",
    "headwater_area_m2": "apparatus.headwater_area",
    "tailwater_area_m2": "apparatus.tailwater_area",
}
TRIAL_LABELS = {
    "volume_m3": "volume",
    "water_mass_kg": "water_mass",
    "duration_s": "duration",
    "head_difference_m": "head_difference",
    "pressure_difference_pa": "pressure_difference",
    "inflow_volume_m3": "inflow_volume",
    "outflow_volume_m3": "outflow_volume",
    "head_initial_m": "head_initial",
    "head_final_m": "head_final",
    "flow_rate_m3_per_s": "flow_rate",
    "temperature_c": "temperature",
}


class _Core:
    """Per-trial figures computed from a flat mapping of inputs."""

    __slots__ = ("flow_rate", "gradient", "head_final", "k_t", "r_factor")

    def __init__(
        self,
        k_t: float,
        r_factor: float,
        gradient: float,
        flow_rate: float,
        head_final: float | None,
    ):
        self.k_t = k_t
        self.r_factor = r_factor
        self.gradient = gradient
        self.flow_rate = flow_rate
        self.head_final = head_final


def _unit_weight(inp: ReductionInput, temperature_c: float | None) -> float:
    if inp.options.unit_weight_n_per_m3 is not None:
        return inp.options.unit_weight_n_per_m3
    t = inp.options.reference_temperature_c if temperature_c is None else temperature_c
    return water.water_density(t, inp.options.water_density) * water.STANDARD_GRAVITY


def _viscosity(inp: ReductionInput, temperature_c: float | None) -> float:
    if inp.options.viscosity_pa_s is not None:
        return inp.options.viscosity_pa_s
    t = inp.options.reference_temperature_c if temperature_c is None else temperature_c
    return water.water_viscosity(t)


def _core(inp: ReductionInput, trial: Trial, x: Mapping[str, float]) -> _Core:
    """k_T, R, gradient and flow rate of one trial from the flat inputs ``x`` (SI floats)."""
    method = inp.method
    opts = inp.options
    length = x["flow_length_m"]
    area = x["area_m2"]
    temperature = x.get("temperature_c")
    r_factor = water.temperature_factor(
        temperature, opts.reference_temperature_c, opts.temperature_correction
    )
    h2: float | None = None
    if method in ("constant_head", "constant_rate"):
        if "pressure_difference_pa" in x:
            head = reductions.head_from_pressure(
                x["pressure_difference_pa"], _unit_weight(inp, temperature)
            )
        else:
            head = x["head_difference_m"]
        if method == "constant_rate":
            q = x["flow_rate_m3_per_s"]
            k_t = reductions.constant_rate_k(q, length, area, head)
        else:
            if "volume_m3" in x:
                volume = x["volume_m3"]
            elif "water_mass_kg" in x:
                volume = x["water_mass_kg"] / water.water_density(
                    opts.reference_temperature_c if temperature is None else temperature,
                    opts.water_density,
                )
            else:
                volume = 0.5 * (x["inflow_volume_m3"] + x["outflow_volume_m3"])
            q = volume / x["duration_s"]
            k_t = reductions.constant_head_k(volume, length, area, head, x["duration_s"])
        return _Core(k_t, r_factor, head / length, q, None)

    if method == "falling_head":
        a_eff = x["standpipe_area_m2"]
    else:
        a_eff = reductions.rising_tail_effective_area(
            x["headwater_area_m2"], x["tailwater_area_m2"]
        )
    if trial.readings is not None:
        fit = reductions.fit_log_head(
            [r.time_s for r in trial.readings], [r.head_m for r in trial.readings]
        )
        k_t = -fit.slope * a_eff * length / area
        first, last = trial.readings[0], trial.readings[-1]
        q = a_eff * (first.head_m - last.head_m) / (last.time_s - first.time_s)
        return _Core(k_t, r_factor, first.head_m / length, q, last.head_m)
    h1 = x["head_initial_m"]
    if "head_final_m" in x:
        h2 = x["head_final_m"]
    else:
        h2 = reductions.rising_tail_final_head(
            h1,
            x["inflow_volume_m3"],
            x["outflow_volume_m3"],
            x["headwater_area_m2"],
            x["tailwater_area_m2"],
        )
    dt = x["duration_s"]
    k_t = a_eff * length / (area * dt) * math.log(h1 / h2)
    q = a_eff * (h1 - h2) / dt
    return _Core(k_t, r_factor, h1 / length, q, h2)


def _geometry(inp: ReductionInput) -> tuple[dict[str, float], dict[str, float], dict[str, str]]:
    spec, app = inp.specimen, inp.apparatus
    values: dict[str, float] = {"area_m2": spec.area_m2}
    u: dict[str, float] = {}
    labels = dict(GEOMETRY_LABELS)
    if spec.diameter_m is None:
        labels["area_m2"] = "specimen.area"
    if "area_m2" in spec.u:
        u["area_m2"] = spec.u["area_m2"]
    if app.manometer_spacing_m is not None:
        values["flow_length_m"] = app.manometer_spacing_m
        labels["flow_length_m"] = "apparatus.manometer_spacing"
        if "manometer_spacing_m" in app.u:
            u["flow_length_m"] = app.u["manometer_spacing_m"]
    elif spec.length_m is not None:
        values["flow_length_m"] = spec.length_m
        if "length_m" in spec.u:
            u["flow_length_m"] = spec.u["length_m"]
    else:
        raise EngineInputError.single(
            ("specimen", "length"), None, "a length such as '11.6 cm'", "is required", "missing"
        )
    for name in ("standpipe_area_m2", "headwater_area_m2", "tailwater_area_m2"):
        value = getattr(app, name)
        if value is not None:
            values[name] = value
            if name in app.u:
                u[name] = app.u[name]
    return values, u, labels


def _flat_trial(trial: Trial) -> tuple[dict[str, float], dict[str, float]]:
    values: dict[str, float] = {}
    for name in TRIAL_NUMBERS:
        value = getattr(trial, name)
        if value is not None:
            values[name] = value
    u = {k: v for k, v in trial.u.items() if k in values and v > 0.0}
    return values, u


def reduce(inp: ReductionInput) -> ReductionResult:
    """Reduce one test: every trial, the representative k, phase relations, flow and checks.

    Parameters
    ----------
    inp : ReductionInput
        Validated test in SI (from :func:`service.engine.parse.parse_request`).

    Returns
    -------
    ReductionResult

    Notes
    -----
    k_ref = R·k_T per trial (domain-reference §4.1); the representative value is the mean
    of the last four determinations under ASTM D5084, otherwise of all trials (§6.1.3,
    practice). Uncertainty: first-order GUM with sensitivities by central differences,
    shared geometry treated as fully correlated between trials, plus s/√n (§8).

    Raises
    ------
    EngineInputError
        When the inputs cannot give a finite positive k (never a NaN or negative k).
    """
    try:
        return _reduce(inp)
    except EngineInputError:
        raise
    except (ArithmeticError, ValueError) as exc:
        raise EngineInputError.single(
            ("trials",),
            None,
            "a physically possible test",
            f"cannot be reduced: {exc}",
            "impossible_test",
        ) from None


def _reduce(inp: ReductionInput) -> ReductionResult:
    opts = inp.options
    geom, geom_u, labels = _geometry(inp)
    trial_results: list[TrialResult] = []
    sens_all: list[dict[str, float]] = []
    u_all: list[dict[str, float]] = []
    se_abs: list[float] = []
    for j, trial in enumerate(inp.trials):
        tvalues, tu = _flat_trial(trial)
        x = {**geom, **tvalues}
        core = _core(inp, trial, x)
        k_t = core.k_t
        k_ref = k_t * core.r_factor
        if not (math.isfinite(k_ref) and k_ref > 0.0):
            raise EngineInputError.single(
                ("trials", j),
                None,
                "a trial whose inputs give a finite k greater than zero",
                f"gives k = {k_ref!r}",
                "impossible_test",
            )
        u_map = {**geom_u, **tu}
        sens: dict[str, float] = {}
        contributions: dict[str, float] | None = None
        se_rel = None
        r_squared = None
        if trial.readings is not None:
            fit = reductions.fit_log_head(
                [r.time_s for r in trial.readings], [r.head_m for r in trial.readings]
            )
            r_squared = fit.r_squared
            se_rel = (
                fit.slope_std_error / abs(fit.slope) if fit.slope_std_error is not None else None
            )
        if u_map:
            sens = sensitivities(partial(_k_ref_of, inp, trial), x, list(u_map), u_map)
            contributions = {}
            for name, u in u_map.items():
                label = labels.get(name) or TRIAL_LABELS[name]
                contributions[label] = abs(sens[name] * u) / k_ref
        if se_rel is not None:
            contributions = dict(contributions or {})
            contributions["readings (slope standard error)"] = se_rel
        u_rel = math.sqrt(sum(c * c for c in contributions.values())) if contributions else None
        sens_all.append(sens)
        u_all.append(u_map)
        se_abs.append((se_rel or 0.0) * k_ref)
        flow_ratio = None
        if trial.inflow_volume_m3 is not None and trial.outflow_volume_m3 is not None:
            flow_ratio = trial.outflow_volume_m3 / trial.inflow_volume_m3
        t_c = trial.temperature_c
        permeability = conversions.intrinsic_permeability(
            k_t, _viscosity(inp, t_c), unit_weight_n_per_m3=_unit_weight(inp, t_c)
        )
        derived_h2 = (
            core.head_final if (trial.head_final_m is None and trial.readings is None) else None
        )
        trial_results.append(
            TrialResult(
                k_m_per_s=k_t,
                k_ref_m_per_s=k_ref,
                temperature_factor=core.r_factor,
                gradient=core.gradient,
                flow_ratio=flow_ratio,
                r_squared=r_squared,
                u_rel=u_rel,
                discharge_velocity_m_per_s=core.flow_rate / geom["area_m2"],
                intrinsic_permeability_m2=permeability,
                slope_std_error_rel=se_rel,
                head_final_m=derived_h2,
                u_contributions=contributions,
            )
        )

    n = len(trial_results)
    used = tuple(range(n - 4, n)) if (inp.standard == checks.D5084 and n >= 4) else tuple(range(n))
    k_used = [trial_results[j].k_ref_m_per_s for j in used]
    k_mean = sum(k_used) / len(k_used)
    summary = _summary(trial_results, used, k_mean, sens_all, u_all, se_abs, geom_u)

    spec = inp.specimen
    rho_phase = water.water_density(20.0, opts.water_density)
    phase = phase_relations(
        area_m2=spec.area_m2,
        length_m=spec.length_m,
        wet_mass_kg=spec.wet_mass_kg,
        water_content=spec.water_content,
        specific_gravity=spec.specific_gravity,
        max_dry_density_kg_per_m3=spec.max_dry_density_kg_per_m3,
        void_ratio=spec.void_ratio,
        water_density_kg_per_m3=rho_phase,
    )
    specimen_result = SpecimenResult(
        area_m2=spec.area_m2,
        volume_m3=phase.volume_m3,
        bulk_density_kg_per_m3=phase.bulk_density_kg_per_m3,
        dry_density_kg_per_m3=phase.dry_density_kg_per_m3,
        void_ratio=phase.void_ratio,
        porosity=phase.porosity,
        degree_of_saturation=phase.degree_of_saturation,
        relative_compaction_pct=phase.relative_compaction_pct,
        water_density_kg_per_m3=rho_phase,
        water_density_convention=(
            "nominal 1000 kg/m³"
            if opts.water_density == "nominal"
            else "ρ_w at 20 °C (G_s reference)"
        ),
    )

    fastest = max(used, key=lambda j: trial_results[j].discharge_velocity_m_per_s)
    v = trial_results[fastest].discharge_velocity_m_per_s
    t_fast = inp.trials[fastest].temperature_c
    reynolds = None
    if spec.d10_m is not None:
        rho = _unit_weight(inp, t_fast) / water.STANDARD_GRAVITY
        reynolds = reductions.reynolds_number(rho, v, spec.d10_m, _viscosity(inp, t_fast))
    flow = Flow(
        discharge_velocity_m_per_s=v,
        seepage_velocity_m_per_s=v / phase.porosity if phase.porosity else None,
        reynolds_number=reynolds,
    )

    hazen = None
    kozeny = None
    if spec.d10_m is not None:
        if 0.0001 - 1e-12 <= spec.d10_m <= 0.003 + 1e-12:
            hazen = reductions.hazen_k(spec.d10_m)
        if phase.porosity is not None and phase.porosity < 1.0:
            t_ref = opts.reference_temperature_c
            kozeny = reductions.kozeny_carman_k(
                spec.d10_m,
                phase.porosity,
                water.water_density(t_ref, opts.water_density) * water.STANDARD_GRAVITY,
                water.water_viscosity(t_ref),
            )

    series, spread, distinct = _gradient_series(inp, trial_results)
    temps = [t.temperature_c for t in inp.trials]
    diameter = (
        spec.diameter_m if spec.diameter_m is not None else math.sqrt(4.0 * spec.area_m2 / math.pi)
    )
    check_list = (
        checks.steady_state([t.k_ref_m_per_s for t in trial_results], inp.standard),
        checks.flow_ratio([trial_results[j].flow_ratio for j in used], inp.standard),
        checks.gradient_limit(k_mean, max(trial_results[j].gradient for j in used), inp.standard),
        checks.saturation([s.b_value for s in inp.saturation], spec.stiff_material, inp.standard),
        checks.specimen_size(
            inp.standard,
            diameter,
            spec.length_m,
            spec.max_particle_size_m,
            spec.retained_on_lower_sieve,
        ),
        checks.laminar_flow(reynolds),
        checks.temperature_range(temps, inp.standard, opts.temperature_correction),
        checks.specification(k_mean, inp.k_max_m_per_s, summary.expanded_u_rel),
        checks.hazen(k_mean, hazen),
        checks.darcy_linearity(series.k_change if series else None, spread, distinct),
    )
    return ReductionResult(
        engine_version=ENGINE_VERSION,
        method=inp.method,
        standard=inp.standard,
        reference_temperature_c=opts.reference_temperature_c,
        temperature_correction=opts.temperature_correction,
        trials=tuple(trial_results),
        summary=summary,
        specimen=specimen_result,
        flow=flow,
        hazen_k_m_per_s=hazen,
        kozeny_carman_k_m_per_s=kozeny,
        gradient_series=series,
        checks=check_list,
    )


def _k_ref_of(inp: ReductionInput, trial: Trial, x: Mapping[str, float]) -> float:
    core = _core(inp, trial, x)
    return core.k_t * core.r_factor


def _summary(
    trial_results: list[TrialResult],
    used: tuple[int, ...],
    k_mean: float,
    sens_all: list[dict[str, float]],
    u_all: list[dict[str, float]],
    se_abs: list[float],
    geom_u: Mapping[str, float],
) -> Summary:
    """Representative k_ref and its uncertainty (GUM §5.1.2 with correlated shared geometry)."""
    m = len(used)
    variance = 0.0
    any_b = False
    for name, u in geom_u.items():
        total = sum(sens_all[j].get(name, 0.0) for j in used) / m
        variance += (total * u) ** 2
        any_b = True
    for j in used:
        for name, u in u_all[j].items():
            if name in geom_u:
                continue
            variance += (sens_all[j][name] * u / m) ** 2
            any_b = True
        if se_abs[j]:
            variance += (se_abs[j] / m) ** 2
            any_b = True
    type_a = type_a_of_mean([trial_results[j].k_ref_m_per_s for j in used])
    type_a_rel = type_a / k_mean if type_a is not None else None
    u_rel = None
    if any_b:
        u_rel = math.sqrt(variance / k_mean**2 + (type_a_rel or 0.0) ** 2)
    permeability = sum(trial_results[j].intrinsic_permeability_m2 for j in used) / m
    return Summary(
        k_ref_m_per_s=k_mean,
        trials_used=used,
        u_rel=u_rel,
        expanded_u_rel=COVERAGE_FACTOR * u_rel if u_rel is not None else None,
        u_rel_type_a=type_a_rel,
        intrinsic_permeability_m2=permeability,
    )


def _gradient_series(
    inp: ReductionInput, trial_results: list[TrialResult]
) -> tuple[GradientSeries | None, float | None, int]:
    if inp.method != "constant_head" or len(trial_results) < 2:
        return None, None, 0
    gradients = [t.gradient for t in trial_results]
    distinct = len({round(i, 6) for i in gradients})
    if max(gradients) / min(gradients) < 1.01:
        return None, None, 1
    velocities = [t.discharge_velocity_m_per_s * t.temperature_factor for t in trial_results]
    fit = reductions.fit_velocity_gradient(gradients, velocities)
    ks = [t.k_ref_m_per_s for t in trial_results]
    mean = sum(ks) / len(ks)
    spread = max(abs(k / mean - 1.0) for k in ks)
    series = GradientSeries(
        k_through_origin_m_per_s=fit.k_through_origin_m_per_s,
        slope_m_per_s=fit.slope_m_per_s,
        intercept_m_per_s=fit.intercept_m_per_s,
        r_squared=fit.r_squared,
        k_change=fit.k_change,
        non_darcy=spread > 0.25 or fit.k_change < -0.10,
    )
    return series, spread, distinct


def result_to_dict(res: ReductionResult) -> dict[str, Any]:
    """The contract's response JSON for ``POST /api/v1/reductions`` (plus added fields).

    Contract fields keep their names; additions: ``method``, ``standard``, per-trial
    ``discharge_velocity_m_per_s``, ``intrinsic_permeability_m2``, ``slope_std_error_rel``,
    ``head_final_m``, ``u_contributions``; in ``result`` the k in cm/s, m/day and ft/day,
    K in darcy and ``u_rel_type_a``; the water-density convention in ``specimen``;
    ``gradient_series``; ``cautions``.
    """
    s = res.summary
    k = s.k_ref_m_per_s
    return {
        "engine_version": res.engine_version,
        "method": res.method,
        "standard": res.standard,
        "reference_temperature_c": res.reference_temperature_c,
        "temperature_correction": res.temperature_correction,
        "trials": [
            {
                "k_m_per_s": t.k_m_per_s,
                "k_ref_m_per_s": t.k_ref_m_per_s,
                "temperature_factor": t.temperature_factor,
                "gradient": t.gradient,
                "flow_ratio": t.flow_ratio,
                "r_squared": t.r_squared,
                "u_rel": t.u_rel,
                "discharge_velocity_m_per_s": t.discharge_velocity_m_per_s,
                "intrinsic_permeability_m2": t.intrinsic_permeability_m2,
                "slope_std_error_rel": t.slope_std_error_rel,
                "head_final_m": t.head_final_m,
                "u_contributions": dict(t.u_contributions)
                if t.u_contributions is not None
                else None,
            }
            for t in res.trials
        ],
        "result": {
            "k_ref_m_per_s": k,
            "trials_used": list(s.trials_used),
            "u_rel": s.u_rel,
            "expanded_u_rel": s.expanded_u_rel,
            "intrinsic_permeability_m2": s.intrinsic_permeability_m2,
            "k_ref_cm_per_s": conversions.k_to_cm_per_s(k),
            "k_ref_m_per_day": conversions.k_to_m_per_day(k),
            "k_ref_ft_per_day": conversions.k_to_ft_per_day(k),
            "intrinsic_permeability_darcy": conversions.m2_to_darcy(s.intrinsic_permeability_m2),
            "u_rel_type_a": s.u_rel_type_a,
        },
        "specimen": asdict(res.specimen),
        "flow": asdict(res.flow),
        "plausibility": {
            "hazen_k_m_per_s": res.hazen_k_m_per_s,
            "kozeny_carman_k_m_per_s": res.kozeny_carman_k_m_per_s,
        },
        "gradient_series": asdict(res.gradient_series) if res.gradient_series is not None else None,
        "checks": [asdict(c) for c in res.checks],
        "cautions": list(CAUTIONS),
    }
