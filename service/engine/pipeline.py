"""Reduce a validated test to k, flow figures, phase relations, uncertainty and checks."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field, fields, is_dataclass
from functools import partial
from typing import Any

from service.engine import checks, compliance, conversions, plausibility, reductions, water
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
from service.engine.phase import PhaseRelations, phase_relations
from service.engine.rules import (
    BUILT_IN,
    D5084,
    DARCY_LINEARITY,
    HAZEN,
    HEAD_CHANGE,
    Rule,
    RuleBook,
    RuleSet,
)
from service.engine.uncertainty import (
    coverage_factor,
    head_term,
    regression_terms,
    sensitivities,
    standard_uncertainty_from_resolution,
    type_a_of_mean,
    welch_satterthwaite,
)
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
READING_HEADS = "readings: head"
READING_TIMES = "readings: time"
SLOPE_ERROR = "readings (slope standard error)"
FALLING_METHODS = ("falling_head", "falling_head_rising_tail")
# Specimen inputs of the degree of saturation whose stated u propagate to u(S).
PHASE_INPUTS = (
    "area_m2",
    "length_m",
    "wet_mass_kg",
    "water_content",
    "specific_gravity",
    "void_ratio",
)


@dataclass(frozen=True, slots=True)
class _Context:
    """One reduction's input with the rule set it runs under and its reference temperature."""

    inp: ReductionInput
    book: RuleBook
    rule_set: RuleSet
    reference_c: float


@dataclass(frozen=True, slots=True)
class _Core:
    """Per-trial figures computed from a flat mapping of inputs."""

    k_t: float
    r_factor: float
    gradient: float
    flow_rate: float
    head_final: float | None


@dataclass(slots=True)
class _Budget:
    """A trial's uncertainty: signed Type B contributions c_i·u_i [m/s] and its Type A term."""

    signed: dict[str, float] = field(default_factory=dict)
    type_a: float | None = None
    type_a_dof: int | None = None


def _unit_weight(ctx: _Context, temperature_c: float | None) -> float:
    opts = ctx.inp.options
    if opts.unit_weight_n_per_m3 is not None:
        return opts.unit_weight_n_per_m3
    t = ctx.reference_c if temperature_c is None else temperature_c
    return water.water_density(t, opts.water_density) * water.STANDARD_GRAVITY


def _viscosity(ctx: _Context, temperature_c: float | None) -> float:
    opts = ctx.inp.options
    if opts.viscosity_pa_s is not None:
        return opts.viscosity_pa_s
    t = ctx.reference_c if temperature_c is None else temperature_c
    return water.water_viscosity(t)


def _factor(ctx: _Context, temperature_c: float | None) -> float:
    """R = η_T/η(T_ref): from the stated viscosity when given (docs/methods.md §4.4)."""
    opts = ctx.inp.options
    if opts.viscosity_pa_s is not None:
        return opts.viscosity_pa_s / water.water_viscosity(ctx.reference_c)
    return water.temperature_factor(temperature_c, ctx.reference_c, opts.temperature_correction)


def _core(ctx: _Context, trial: Trial, x: Mapping[str, float]) -> _Core:
    """k_T, R, gradient and flow rate of one trial from the flat inputs ``x`` (SI floats)."""
    method = ctx.inp.method
    length = x["flow_length_m"]
    area = x["area_m2"]
    temperature = x.get("temperature_c")
    r_factor = _factor(ctx, temperature)
    if method in ("constant_head", "constant_rate"):
        if "pressure_difference_pa" in x:
            head = reductions.head_from_pressure(
                x["pressure_difference_pa"], _unit_weight(ctx, temperature)
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
                    ctx.reference_c if temperature is None else temperature,
                    ctx.inp.options.water_density,
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


def _k_ref_of(ctx: _Context, trial: Trial, x: Mapping[str, float]) -> float:
    core = _core(ctx, trial, x)
    return core.k_t * core.r_factor


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


def reduce(inp: ReductionInput, rules: RuleBook | None = None) -> ReductionResult:
    """Reduce one test: every trial, the representative k, phase relations, flow and checks.

    Parameters
    ----------
    inp : ReductionInput
        Validated test in SI (from :func:`service.engine.parse.parse_request`).
    rules : RuleBook, optional
        The rule sets to judge the test by; the engine's built-in book by default. A
        laboratory passes the book of its accredited scope; the result records its version.

    Returns
    -------
    ReductionResult

    Notes
    -----
    k_ref = R·k_T per trial (docs/methods.md §4.1). The representative value is the mean of
    the last N determinations or of all trials, as the rule set says (§7). Uncertainty:
    instrument terms correlated across trials, scatter once as s/√n, Welch–Satterthwaite
    degrees of freedom and a Student t coverage factor at 95.45 % (§6).

    Raises
    ------
    EngineInputError
        When the inputs cannot give a finite positive k, or any figure would not be finite.
    """
    book = BUILT_IN if rules is None else rules
    try:
        result = _reduce(_context(inp, book))
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
    if not _all_finite(result):
        raise EngineInputError.single(
            ("trials",),
            None,
            "entries of a size a permeability test can have",
            "give a figure too large or too small to represent",
            "impossible_test",
        )
    return result


def _context(inp: ReductionInput, book: RuleBook) -> _Context:
    rule_set = book.for_standard(inp.standard)
    reference = inp.options.reference_temperature_c
    if reference is None:
        reference = rule_set.reference_temperature_c
    if inp.options.temperature_correction == "astm_d5084" and abs(reference - 20.0) > 1e-9:
        raise EngineInputError.single(
            ("options", "temperature_correction"),
            inp.options.temperature_correction,
            f"'iapws' for the reference temperature of {reference:g} °C",
            "the ASTM D5084 R_T formula corrects to 20 °C only",
            "incompatible_options",
        )
    return _Context(inp=inp, book=book, rule_set=rule_set, reference_c=reference)


def _all_finite(value: Any) -> bool:
    if isinstance(value, float):
        return math.isfinite(value)
    if is_dataclass(value) and not isinstance(value, type):
        return all(_all_finite(getattr(value, f.name)) for f in fields(value))
    if isinstance(value, Mapping):
        return all(_all_finite(v) for v in value.values())
    if isinstance(value, tuple | list):
        return all(_all_finite(v) for v in value)
    return True


def _default_head_u(rule_set: RuleSet) -> float:
    rule = rule_set.rule("head_change") or HEAD_CHANGE
    return standard_uncertainty_from_resolution(rule.value("default_resolution"))


def _trial(
    ctx: _Context,
    j: int,
    trial: Trial,
    geometry: tuple[dict[str, float], dict[str, float], dict[str, str]],
) -> tuple[TrialResult, _Budget]:
    geom, geom_u, labels = geometry
    tvalues, tu = _flat_trial(trial)
    x = {**geom, **tvalues}
    core = _core(ctx, trial, x)
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
    budget = _Budget()
    u_map = {**geom_u, **tu}
    if u_map:
        sens = sensitivities(partial(_k_ref_of, ctx, trial), x, list(u_map), u_map)
        for name, u in u_map.items():
            budget.signed[labels.get(name) or TRIAL_LABELS[name]] = sens[name] * u
    r_squared = None
    se_rel = None
    head_rel = None
    default_u = _default_head_u(ctx.rule_set)
    if trial.readings is not None:
        times = [r.time_s for r in trial.readings]
        heads = [r.head_m for r in trial.readings]
        fit = reductions.fit_log_head(times, heads)
        r_squared = fit.r_squared
        if fit.slope_std_error is not None:
            se_rel = fit.slope_std_error / abs(fit.slope)
            budget.type_a = se_rel * k_ref
            budget.type_a_dof = len(times) - 2
        heads_rel, times_rel = regression_terms(
            times,
            heads,
            [r.head_u_m for r in trial.readings],
            [r.time_u_s for r in trial.readings],
        )
        if heads_rel:
            budget.signed[READING_HEADS] = heads_rel * k_ref
        if times_rel:
            budget.signed[READING_TIMES] = times_rel * k_ref
        head_rel, _ = regression_terms(
            times, heads, [r.head_u_m or default_u for r in trial.readings], [None] * len(times)
        )
    elif ctx.inp.method in FALLING_METHODS and core.head_final is not None:
        head_rel = head_term(
            x["head_initial_m"],
            core.head_final,
            tu.get("head_initial_m", default_u),
            tu.get("head_final_m", default_u),
        )
    contributions: dict[str, float] | None = None
    if budget.signed or se_rel is not None:
        contributions = {label: abs(v) / k_ref for label, v in budget.signed.items()}
        if se_rel is not None:
            contributions[SLOPE_ERROR] = se_rel
    u_rel = math.sqrt(sum(c * c for c in contributions.values())) if contributions else None
    flow_ratio = None
    if trial.inflow_volume_m3 is not None and trial.outflow_volume_m3 is not None:
        flow_ratio = trial.outflow_volume_m3 / trial.inflow_volume_m3
    t_c = trial.temperature_c
    permeability = conversions.intrinsic_permeability(
        k_t, _viscosity(ctx, t_c), unit_weight_n_per_m3=_unit_weight(ctx, t_c)
    )
    derived_h2 = (
        core.head_final if (trial.head_final_m is None and trial.readings is None) else None
    )
    result = TrialResult(
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
        head_term_rel=head_rel,
    )
    return result, budget


def _reduce(ctx: _Context) -> ReductionResult:
    inp, rule_set = ctx.inp, ctx.rule_set
    opts = inp.options
    geometry = _geometry(inp)
    pairs = [_trial(ctx, j, trial, geometry) for j, trial in enumerate(inp.trials)]
    trial_results = [p[0] for p in pairs]
    budgets = [p[1] for p in pairs]

    n = len(trial_results)
    last = rule_set.representative == "last" and n >= rule_set.determinations
    used = tuple(range(n - rule_set.determinations, n)) if last else tuple(range(n))
    k_used = [trial_results[j].k_ref_m_per_s for j in used]
    k_mean = sum(k_used) / len(k_used)
    summary = _summary(trial_results, budgets, used, k_mean)

    spec = inp.specimen
    rho_phase = water.water_density(20.0, opts.water_density)
    phase_values = {name: getattr(spec, name) for name in PHASE_INPUTS}
    phase = _phase(phase_values, spec.max_dry_density_kg_per_m3, rho_phase)
    saturation_u = _saturation_u(phase, phase_values, spec.u, rho_phase)
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
        rho = _unit_weight(ctx, t_fast) / water.STANDARD_GRAVITY
        reynolds = reductions.reynolds_number(rho, v, spec.d10_m, _viscosity(ctx, t_fast))
    flow = Flow(
        discharge_velocity_m_per_s=v,
        seepage_velocity_m_per_s=v / phase.porosity if phase.porosity else None,
        reynolds_number=reynolds,
    )

    hazen_rule = rule_set.rule("hazen") or HAZEN
    hazen = None
    kozeny = None
    if spec.d10_m is not None:
        low, high = hazen_rule.value("d10_min"), hazen_rule.value("d10_max")
        if low - 1e-12 <= spec.d10_m <= high + 1e-12:
            hazen = reductions.hazen_k(spec.d10_m)
        if phase.porosity is not None and phase.porosity < 1.0:
            kozeny = reductions.kozeny_carman_k(
                spec.d10_m,
                phase.porosity,
                water.water_density(ctx.reference_c, opts.water_density) * water.STANDARD_GRAVITY,
                water.water_viscosity(ctx.reference_c),
            )

    linearity_rule = rule_set.rule("darcy_linearity") or DARCY_LINEARITY
    series, spread, distinct = _gradient_series(inp, trial_results, linearity_rule)
    decision_rule = inp.decision_rule or rule_set.decision_rule
    permeameter = inp.permeameter or rule_set.permeameter
    temperature_rule = rule_set.rule("temperature_range")
    if temperature_rule is None and opts.temperature_correction == "astm_d5084":
        temperature_rule = ctx.book.for_standard(D5084).rule("temperature_range")
    diameter = (
        spec.diameter_m if spec.diameter_m is not None else math.sqrt(4.0 * spec.area_m2 / math.pi)
    )
    head_terms = [
        (j + 1, head) for j in used if (head := trial_results[j].head_term_rel) is not None
    ]
    check_list = (
        checks.steady_state(
            [t.k_ref_m_per_s for t in trial_results],
            rule_set.rule("steady_state"),
            rule_set.determinations,
            last_only=rule_set.representative == "last",
        ),
        checks.flow_ratio([trial_results[j].flow_ratio for j in used], rule_set.rule("flow_ratio")),
        checks.gradient_limit(
            k_mean, max(trial_results[j].gradient for j in used), rule_set.rule("gradient_limit")
        ),
        checks.saturation(
            [s.b_value for s in inp.saturation],
            spec.stiff_material,
            rule_set.rule("saturation"),
            permeameter,
        ),
        checks.specimen_size(
            rule_set.rule("specimen_size"),
            diameter,
            spec.length_m,
            spec.max_particle_size_m,
            spec.retained_on_lower_sieve,
        ),
        plausibility.laminar_flow(reynolds, rule_set.rule("laminar_flow")),
        checks.temperature_range(
            [t.temperature_c for t in inp.trials],
            temperature_rule,
            viscosity_given=opts.viscosity_pa_s is not None,
        ),
        compliance.specification(
            k_mean, inp.k_max_m_per_s, summary.expanded_u_rel, decision_rule, ctx.reference_c
        ),
        plausibility.hazen(k_mean, hazen, rule_set.rule("hazen")),
        checks.darcy_linearity(
            series.k_change if series else None, spread, distinct, rule_set.rule("darcy_linearity")
        ),
        checks.trend(k_used, rule_set.rule("trend")),
        checks.head_change(head_terms, rule_set.rule("head_change")),
        plausibility.phase_relations(
            phase.degree_of_saturation,
            saturation_u,
            phase.void_ratio,
            rule_set.rule("phase_relations"),
        ),
    )
    return ReductionResult(
        engine_version=ENGINE_VERSION,
        method=inp.method,
        standard=inp.standard,
        reference_temperature_c=ctx.reference_c,
        temperature_correction=opts.temperature_correction,
        trials=tuple(trial_results),
        summary=summary,
        specimen=specimen_result,
        flow=flow,
        hazen_k_m_per_s=hazen,
        kozeny_carman_k_m_per_s=kozeny,
        gradient_series=series,
        checks=check_list,
        rules_version=ctx.book.version,
        permeameter=permeameter,
        decision_rule=decision_rule,
    )


def _phase(
    values: Mapping[str, float | None], max_dry_density: float | None, rho_w: float
) -> PhaseRelations:
    area = values["area_m2"]
    assert area is not None
    return phase_relations(
        area_m2=area,
        length_m=values["length_m"],
        wet_mass_kg=values["wet_mass_kg"],
        water_content=values["water_content"],
        specific_gravity=values["specific_gravity"],
        max_dry_density_kg_per_m3=max_dry_density,
        void_ratio=values["void_ratio"],
        water_density_kg_per_m3=rho_w,
    )


def _saturation_u(
    phase: PhaseRelations,
    values: Mapping[str, float | None],
    u: Mapping[str, float],
    rho_w: float,
) -> float | None:
    """u(S) from the stated u of its inputs (GUM §5.1.2; docs/methods.md §8.10)."""
    if phase.degree_of_saturation is None:
        return None
    given = {name: u[name] for name in PHASE_INPUTS if values[name] is not None and u.get(name)}
    if not given:
        return None
    point = {name: value for name, value in values.items() if value is not None}

    def degree(x: Mapping[str, float]) -> float:
        merged = {name: x.get(name) for name in PHASE_INPUTS}
        s = _phase(merged, None, rho_w).degree_of_saturation
        assert s is not None
        return s

    sens = sensitivities(degree, point, list(given), given)
    return math.sqrt(sum((sens[name] * given[name]) ** 2 for name in given))


def _summary(
    trial_results: list[TrialResult],
    budgets: list[_Budget],
    used: tuple[int, ...],
    k_mean: float,
) -> Summary:
    """Average the used trials into k_ref and state its uncertainty (docs/methods.md §6.2–§6.5).

    Each instrument's contribution is averaged over the trials with its sign (fully
    correlated, so averaging does not shrink it); the scatter of the trials enters once as
    s/√n with n − 1 degrees of freedom (a single multi-reading trial: its slope's standard
    error with n_readings − 2); ν_eff by Welch–Satterthwaite; k_p = t_95.45(ν_eff).
    """
    m = len(used)
    names: list[str] = []
    for j in used:
        names.extend(name for name in budgets[j].signed if name not in names)
    type_b = math.sqrt(
        sum((sum(budgets[j].signed.get(name, 0.0) for j in used) / m) ** 2 for name in names)
    )
    type_a: float | None = None
    dof = math.inf
    if m >= 2:
        type_a = type_a_of_mean([trial_results[j].k_ref_m_per_s for j in used])
        dof = m - 1
    elif budgets[used[0]].type_a is not None:
        type_a = budgets[used[0]].type_a
        dof = budgets[used[0]].type_a_dof or math.inf
    u_rel = expanded = coverage = nu_out = None
    if names:
        combined = math.hypot(type_b, type_a or 0.0)
        nu = welch_satterthwaite([(type_b, math.inf), (type_a or 0.0, dof)])
        coverage = coverage_factor(nu)
        u_rel = combined / k_mean
        expanded = coverage * u_rel
        nu_out = nu if math.isfinite(nu) else None
    permeability = sum(trial_results[j].intrinsic_permeability_m2 for j in used) / m
    return Summary(
        k_ref_m_per_s=k_mean,
        trials_used=used,
        u_rel=u_rel,
        expanded_u_rel=expanded,
        u_rel_type_a=type_a / k_mean if type_a is not None else None,
        intrinsic_permeability_m2=permeability,
        coverage_factor=coverage,
        effective_degrees_of_freedom=nu_out,
    )


def _gradient_series(
    inp: ReductionInput, trial_results: list[TrialResult], rule: Rule
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
        non_darcy=spread > rule.value("spread") or fit.k_change < -rule.value("fall"),
    )
    return series, spread, distinct


def result_to_dict(res: ReductionResult) -> dict[str, Any]:
    """Render a result as the contract's JSON for ``POST /api/v1/reductions`` (and additions).

    Contract fields keep their names; additions: ``method``, ``standard``, ``rules_version``,
    ``permeameter``, per-trial ``discharge_velocity_m_per_s``, ``intrinsic_permeability_m2``,
    ``slope_std_error_rel``, ``head_final_m``, ``u_contributions``, ``head_term_rel``; in
    ``result`` the k in cm/s, m/day and ft/day, K in darcy, ``u_rel_type_a``,
    ``coverage_factor``, ``effective_degrees_of_freedom`` (null when infinite) and
    ``decision_rule``; the water-density convention in ``specimen``; ``gradient_series``;
    ``limit_confirmed`` on each check; ``cautions``.
    """
    s = res.summary
    k = s.k_ref_m_per_s
    return {
        "engine_version": res.engine_version,
        "rules_version": res.rules_version,
        "method": res.method,
        "standard": res.standard,
        "permeameter": res.permeameter,
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
                "head_term_rel": t.head_term_rel,
            }
            for t in res.trials
        ],
        "result": {
            "k_ref_m_per_s": k,
            "trials_used": list(s.trials_used),
            "u_rel": s.u_rel,
            "expanded_u_rel": s.expanded_u_rel,
            "coverage_factor": s.coverage_factor,
            "effective_degrees_of_freedom": s.effective_degrees_of_freedom,
            "decision_rule": res.decision_rule,
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
        "checks": [checks.as_record(c) for c in res.checks],
        "cautions": list(CAUTIONS),
    }
