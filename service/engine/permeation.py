"""Flexible-wall permeation from raw burette readings and panel pressures (ASTM D5084 A, B, C).

A pressure panel drives flow with air pressure on a headwater and a tailwater burette. The
head across the specimen at each reading is the pressure head of the pressure difference plus
the difference of the burette levels, less the zero-flow head measured with the specimen
bypassed. Each pair of readings within a run gives one determination of k; the
determinations carry their times and pore volumes of flow, and can be sent to the reduction
pipeline as ordinary trials so its termination checks evaluate on them.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from service.engine import reductions, water
from service.engine.errors import EngineInputError, InputProblem, Loc

CONSTANT_HEAD = "constant_head"
FALLING_HEAD = "falling_head"
RISING_TAIL = "falling_head_rising_tail"
PERMEATION_METHODS = (CONSTANT_HEAD, FALLING_HEAD, RISING_TAIL)
"""Hydraulic systems of ASTM D5084 read from burettes: A constant head, B falling head with
constant tailwater, C falling headwater with rising tailwater (the engine's method names)."""

GRADUATIONS = ("volume", "length")


@dataclass(frozen=True, slots=True)
class Burette:
    """One burette of a pressure panel.

    Attributes
    ----------
    area_m2 : float
        Bore cross-section a [m²], best calibrated as volume per length of scale.
    graduation : {"volume", "length"}
        What the scale reads: volume marks (mL) or a length scale (cm).
    increases_downward : bool
        True when readings grow as the level falls (burettes numbered from the top).
    zero_elevation_m : float
        Elevation of the scale's zero above the panel datum [m]. Any offset between the two
        burettes' zeros that is not entered here is removed by the zero-flow head.
    bore_diameter_m : float or None
        Inner diameter [m], only for the capillary-rise estimate.
    """

    area_m2: float
    graduation: str = "volume"
    increases_downward: bool = True
    zero_elevation_m: float = 0.0
    bore_diameter_m: float | None = None


@dataclass(frozen=True, slots=True)
class PanelReading:
    """One reading of the permeation panel.

    Attributes
    ----------
    time_s : float
        Elapsed time since permeation started [s].
    headwater_reading : float
        Headwater burette reading in SI of its graduation: volume [m³] or length [m].
    tailwater_reading : float or None
        Tailwater burette reading, likewise; None with a constant tailwater and no burette.
    headwater_pressure_pa, tailwater_pressure_pa : float
        Air pressures applied to the burettes [Pa], both gauge or both absolute.
    temperature_c : float or None
        Permeant temperature [°C].
    new_run : bool
        The burettes were refilled or reset just before this reading: no interval spans it.
    """

    time_s: float
    headwater_reading: float
    tailwater_reading: float | None
    headwater_pressure_pa: float
    tailwater_pressure_pa: float
    temperature_c: float | None = None
    new_run: bool = False


@dataclass(frozen=True, slots=True)
class Determination:
    """One interval between two readings of a run, reduced to k.

    Attributes
    ----------
    run : int
        Run number, 1 for the readings before the first refill.
    time_start_s, time_end_s, duration_s : float
        Interval bounds since permeation started, and Δt [s].
    head_initial_m, head_final_m : float
        Head across the specimen at the two readings [m].
    gradient : float
        h1/L for the falling-head methods, the mean head over L for constant head [-].
    inflow_volume_m3 : float
        Water that left the headwater burette [m³].
    outflow_volume_m3 : float or None
        Water that entered the tailwater burette [m³]; None without a tailwater burette.
    flow_ratio : float or None
        V_out/V_in [-].
    temperature_c : float or None
        Mean of the readings' temperatures [°C].
    k_m_per_s, temperature_factor, k_ref_m_per_s : float
        k at the test temperature [m/s], R [-] and k at the reference temperature [m/s].
    cumulative_flow_m3 : float
        Outflow (inflow without a tailwater burette) since permeation started [m³].
    pore_volumes : float or None
        cumulative_flow_m3 over the specimen's pore volume [-].
    """

    run: int
    time_start_s: float
    time_end_s: float
    duration_s: float
    head_initial_m: float
    head_final_m: float
    gradient: float
    inflow_volume_m3: float
    outflow_volume_m3: float | None
    flow_ratio: float | None
    temperature_c: float | None
    k_m_per_s: float
    temperature_factor: float
    k_ref_m_per_s: float
    cumulative_flow_m3: float
    pore_volumes: float | None


def burette_level(reading: float, burette: Burette) -> float:
    """Elevation of a burette's water level above the panel datum [m].

    Parameters
    ----------
    reading : float
        Scale reading: volume [m³] for a volume graduation, length [m] for a length scale.
    burette : Burette
        The burette read.

    Notes
    -----
    z = z0 ± x, with x = reading/a for volume marks and x = reading for a length scale;
    minus when the scale grows downward. Source: geometry of a uniform bore (derived).
    """
    x = reading / burette.area_m2 if burette.graduation == "volume" else reading
    return (
        burette.zero_elevation_m - x if burette.increases_downward else burette.zero_elevation_m + x
    )


def burette_volume_change(reading_from: float, reading_to: float, burette: Burette) -> float:
    """Volume of water gained by a burette between two readings [m³].

    Parameters
    ----------
    reading_from, reading_to : float
        Scale readings at the start and end of the interval (SI of the graduation).
    burette : Burette
        The burette read.

    Notes
    -----
    ΔV = a·(z_to − z_from): positive when the level rises. Inflow to the specimen is
    V_in = −ΔV of the headwater burette; outflow V_out = ΔV of the tailwater burette.
    Source: continuity in a uniform bore (docs/methods.md §14.1, derived).
    """
    return burette.area_m2 * (
        burette_level(reading_to, burette) - burette_level(reading_from, burette)
    )


def apparent_head(
    headwater_pressure_pa: float,
    tailwater_pressure_pa: float,
    headwater_level_m: float,
    tailwater_level_m: float,
    water_density_kg_per_m3: float,
) -> float:
    """Head difference between the burettes as read, before the zero-flow correction [m].

    Parameters
    ----------
    headwater_pressure_pa, tailwater_pressure_pa : float
        Air pressures on the headwater and tailwater burettes [Pa].
    headwater_level_m, tailwater_level_m : float
        Water-level elevations above the panel datum [m].
    water_density_kg_per_m3 : float
        ρ_w of the permeant [kg/m³].

    Notes
    -----
    Δh' = (p_hw − p_tw)/(ρ_w·g) + (z_hw − z_tw), g = 9.80665 m/s² (standard gravity).
    Source: Bernoulli's total head with zero velocity, pressure head p/(ρ_w·g) plus
    elevation (derived; docs/methods.md §14.1). Water's compressibility changes ρ_w by about
    0.02 % at 500 kPa (IAPWS-95), which is neglected.
    """
    unit_weight = water_density_kg_per_m3 * water.STANDARD_GRAVITY
    pressure_head = reductions.head_from_pressure(
        headwater_pressure_pa - tailwater_pressure_pa, unit_weight
    )
    return pressure_head + headwater_level_m - tailwater_level_m


def head_across_specimen(apparent_head_m: float, zero_flow_head_m: float) -> float:
    """Head lost across the specimen [m].

    Parameters
    ----------
    apparent_head_m : float
        Head difference as read, from :func:`apparent_head` [m].
    zero_flow_head_m : float
        The same quantity read with the specimen bypassed and no flow [m]
        (:func:`zero_flow_head`); 0 when not measured.

    Notes
    -----
    Δh = Δh' − Δh'₀. With the specimen bypassed the true head difference is zero, so
    whatever is read then — capillary rise that differs between burettes of unequal bore,
    and any offset between their scales — is subtracted from every later reading.
    Source: common practice, no source (docs/methods.md §14.1).
    """
    return apparent_head_m - zero_flow_head_m


def zero_flow_head(
    bypass: PanelReading,
    headwater: Burette,
    tailwater: Burette,
    water_convention: str = "temperature",
) -> float:
    """Zero-flow (capillary) head difference read with the specimen bypassed [m].

    Parameters
    ----------
    bypass : PanelReading
        Burettes connected to each other, bypassing the specimen, levels at rest.
    headwater, tailwater : Burette
        The two burettes.
    water_convention : {"temperature", "nominal"}
        ρ_w at the reading's temperature (Tanaka et al. 2001; 20 °C if none) or 1000 kg/m³.

    Notes
    -----
    Δh'₀ = (p_hw − p_tw)/(ρ_w·g) + (z_hw − z_tw) at rest; see :func:`head_across_specimen`.
    Source: common practice, no source.
    """
    if bypass.tailwater_reading is None:
        raise EngineInputError.single(
            ("zero_flow", "tailwater_reading"),
            None,
            "the tailwater burette reading taken with the specimen bypassed",
            "is required",
            "missing",
        )
    return apparent_head(
        bypass.headwater_pressure_pa,
        bypass.tailwater_pressure_pa,
        burette_level(bypass.headwater_reading, headwater),
        burette_level(bypass.tailwater_reading, tailwater),
        water.water_density(bypass.temperature_c, water_convention),
    )


# IAPWS R1-76(2014) surface tension of ordinary water (vapour–liquid interface).
_SIGMA_B = 235.8e-3  # N/m
_SIGMA_b = -0.625
_SIGMA_MU = 1.256
_T_CRITICAL_K = 647.096


def surface_tension(temperature_c: float) -> float:
    """Surface tension of water against its vapour [N/m].

    Parameters
    ----------
    temperature_c : float
        Temperature t [°C].

    Notes
    -----
    σ = B·τ^μ·(1 + b·τ), τ = 1 − T/647.096 K, B = 235.8 mN/m, b = −0.625, μ = 1.256.
    Source: IAPWS R1-76(2014), Revised Release on Surface Tension of Ordinary Water
    Substance (coefficients from memory; the test compares with the ``iapws`` package).
    """
    tau = 1.0 - (temperature_c + water.KELVIN_OFFSET) / _T_CRITICAL_K
    return float(_SIGMA_B * tau**_SIGMA_MU * (1.0 + _SIGMA_b * tau))


def capillary_rise(
    bore_diameter_m: float, temperature_c: float = 20.0, contact_angle_deg: float = 0.0
) -> float:
    """Capillary rise of water in a round bore, an estimate of a burette's meniscus error [m].

    Parameters
    ----------
    bore_diameter_m : float
        Inner diameter d [m].
    temperature_c : float
        Water temperature [°C].
    contact_angle_deg : float
        Contact angle θ [°]; 0 for clean glass.

    Notes
    -----
    h_c = 4·σ·cos θ / (ρ_w·g·d) (Jurin's law). The difference of h_c between two burettes
    of unequal bore estimates the zero-flow head; the measured value governs, since dirt
    and wetting change θ. Source: Jurin's law (any fluid-mechanics text); σ from
    :func:`surface_tension`, ρ_w from Tanaka et al. (2001).
    """
    sigma = surface_tension(temperature_c)
    rho = water.density_tanaka(temperature_c)
    return (
        4.0
        * sigma
        * math.cos(math.radians(contact_angle_deg))
        / (rho * water.STANDARD_GRAVITY * bore_diameter_m)
    )


def _mean(a: float | None, b: float | None) -> float | None:
    if a is None:
        return b
    if b is None:
        return a
    return 0.5 * (a + b)


def _check_setup(
    readings: Sequence[PanelReading],
    method: str,
    headwater: Burette,
    tailwater: Burette | None,
    length_m: float,
    area_m2: float,
    pore_volume_m3: float | None,
) -> list[InputProblem]:
    problems: list[InputProblem] = []

    def add(loc: Loc, value: Any, accepted: str, reason: str, kind: str = "value_error") -> None:
        problems.append(InputProblem(loc, reason, value, accepted, kind))

    if method not in PERMEATION_METHODS:
        add(("method",), method, ", ".join(PERMEATION_METHODS), "is not a burette method")
    if method == RISING_TAIL and tailwater is None:
        add(
            ("tailwater",),
            None,
            "the tailwater burette: a rising-tailwater test reads both burettes",
            "is required",
            "missing",
        )
    for name, burette in (("headwater", headwater), ("tailwater", tailwater)):
        if burette is None:
            continue
        if not (math.isfinite(burette.area_m2) and burette.area_m2 > 0.0):
            add((name, "area"), burette.area_m2, "an area greater than zero", "is not above zero")
        if burette.graduation not in GRADUATIONS:
            add((name, "graduation"), burette.graduation, " or ".join(GRADUATIONS), "is unknown")
    for name, value in (("length", length_m), ("area", area_m2), ("pore_volume", pore_volume_m3)):
        if value is not None and not (math.isfinite(value) and value > 0.0):
            add((name,), value, "a value greater than zero", "must be greater than zero")
    if len(readings) < 2:
        add(("readings",), len(readings), "at least two readings", "too few readings", "too_few")
    with_tail = [r.tailwater_reading is not None for r in readings]
    if tailwater is not None:
        for j, has in enumerate(with_tail):
            if not has:
                add(
                    ("readings", j, "tailwater_reading"),
                    None,
                    "a tailwater burette reading at every reading",
                    "is required",
                    "missing",
                )
    elif any(with_tail):
        j = with_tail.index(True)
        add(
            ("readings", j, "tailwater_reading"),
            readings[j].tailwater_reading,
            "no tailwater reading when no tailwater burette is declared",
            "has no burette to belong to",
            "unexpected",
        )
    for j in range(1, len(readings)):
        if readings[j].time_s <= readings[j - 1].time_s:
            add(
                ("readings", j, "time"),
                readings[j].time_s,
                f"a time after the previous reading's {readings[j - 1].time_s:g} s",
                "does not come after the previous reading",
                "time_order",
            )
    return problems


def permeation_determinations(
    readings: Sequence[PanelReading],
    *,
    method: str,
    headwater: Burette,
    tailwater: Burette | None,
    length_m: float,
    area_m2: float,
    zero_flow_head_m: float = 0.0,
    tailwater_level_m: float = 0.0,
    pore_volume_m3: float | None = None,
    reference_temperature_c: float = 20.0,
    temperature_correction: str = "iapws",
    water_convention: str = "temperature",
) -> tuple[Determination, ...]:
    """Reduce a permeation stage's panel readings to one determination of k per interval.

    Parameters
    ----------
    readings : sequence of PanelReading
        In time order; a reading with ``new_run`` starts a new run after a refill.
    method : {"constant_head", "falling_head", "falling_head_rising_tail"}
        ASTM D5084 hydraulic system A, B or C.
    headwater : Burette
        Inflow burette (area a_in).
    tailwater : Burette or None
        Outflow burette (area a_out); None for a constant tailwater without a burette.
    length_m, area_m2 : float
        Specimen length L [m] and cross-section A [m²] at permeation.
    zero_flow_head_m : float
        Head read with the specimen bypassed [m] (:func:`zero_flow_head`).
    tailwater_level_m : float
        Elevation of a constant tailwater above the datum [m], used when ``tailwater`` is None.
    pore_volume_m3 : float or None
        Pore volume of the specimen V_v = n·V [m³], for pore volumes of flow.
    reference_temperature_c : float
        Reference temperature of k_ref [°C].
    temperature_correction : {"iapws", "astm_d5084"}
        How R is computed (see :func:`service.engine.water.temperature_factor`).
    water_convention : {"temperature", "nominal"}
        ρ_w for the pressure head: at each reading's temperature (Tanaka et al. 2001) or
        1000 kg/m³.

    Returns
    -------
    tuple of Determination
        In time order.

    Notes
    -----
    At each reading: Δh = (p_hw − p_tw)/(ρ_w·g) + (z_hw − z_tw) − Δh'₀. Over an interval:
    V_in = a_in·(z_hw,1 − z_hw,2), V_out = a_out·(z_tw,2 − z_tw,1), and

    * A, constant head: k = Q·L/(A·Δh̄·Δt), Q = (V_in + V_out)/2 (V_in alone without a
      tailwater burette), Δh̄ = (Δh1 + Δh2)/2;
    * B, constant tailwater: k = a_in·L/(A·Δt)·ln(Δh1/Δh2);
    * C, rising tailwater: k = a_in·a_out·L/((a_in + a_out)·A·Δt)·ln(Δh1/Δh2).

    k_ref = R·k with R from the interval's mean temperature. Pore volumes of flow
    = ΣV_out/V_v. Sources: docs/methods.md §2.1, §3.1, §3.2, §14.2 (derived; ASTM D5084 A, B and C,
    Q as the mean of inflow and outflow for A from memory); pore volumes of flow, common
    practice, no source.

    Raises
    ------
    EngineInputError
        Naming the reading (``readings[j].time``...) when times do not rise, the head across
        the specimen is not positive, a falling head does not fall, or no water flows in.
    """
    problems = _check_setup(
        readings, method, headwater, tailwater, length_m, area_m2, pore_volume_m3
    )
    if problems:
        raise EngineInputError(problems)

    def impossible(j: int, field: str, value: Any, accepted: str, reason: str) -> None:
        problems.append(
            InputProblem(("readings", j, field), reason, value, accepted, "impossible_test")
        )

    heads: list[float] = []
    for j, r in enumerate(readings):
        z_tw = (
            burette_level(r.tailwater_reading, tailwater)
            if (tailwater is not None and r.tailwater_reading is not None)
            else tailwater_level_m
        )
        rho = water.water_density(r.temperature_c, water_convention)
        h = head_across_specimen(
            apparent_head(
                r.headwater_pressure_pa,
                r.tailwater_pressure_pa,
                burette_level(r.headwater_reading, headwater),
                z_tw,
                rho,
            ),
            zero_flow_head_m,
        )
        if not (math.isfinite(h) and h > 0.0):
            impossible(
                j,
                "headwater_pressure",
                h,
                "pressures and levels that drive water from headwater to tailwater",
                f"give a head across the specimen of {h:.4g} m, not above zero",
            )
        heads.append(h)
    if problems:
        raise EngineInputError(problems)

    out: list[Determination] = []
    run = 1
    cumulative = 0.0
    for j in range(1, len(readings)):
        prev, cur = readings[j - 1], readings[j]
        if cur.new_run:
            run += 1
            continue
        dt = cur.time_s - prev.time_s
        h1, h2 = heads[j - 1], heads[j]
        v_in = -burette_volume_change(prev.headwater_reading, cur.headwater_reading, headwater)
        v_out = (
            burette_volume_change(prev.tailwater_reading, cur.tailwater_reading, tailwater)
            if (
                tailwater is not None
                and prev.tailwater_reading is not None
                and cur.tailwater_reading is not None
            )
            else None
        )
        if v_in <= 0.0:
            impossible(
                j,
                "headwater_reading",
                cur.headwater_reading,
                "a headwater level that falls as water enters the specimen",
                f"shows no inflow since the previous reading (V_in = {v_in:.4g} m³)",
            )
            continue
        if v_out is not None and v_out <= 0.0:
            impossible(
                j,
                "tailwater_reading",
                cur.tailwater_reading,
                "a tailwater level that rises as water leaves the specimen",
                f"shows no outflow since the previous reading (V_out = {v_out:.4g} m³)",
            )
            continue
        if method == CONSTANT_HEAD:
            q = v_in if v_out is None else 0.5 * (v_in + v_out)
            h_mean = 0.5 * (h1 + h2)
            k = reductions.constant_head_k(q, length_m, area_m2, h_mean, dt)
            gradient = h_mean / length_m
        else:
            if h2 >= h1:
                impossible(
                    j,
                    "headwater_reading",
                    cur.headwater_reading,
                    "a head across the specimen that falls between readings",
                    f"gives a head of {h2:.4g} m, not below the previous {h1:.4g} m",
                )
                continue
            if method == FALLING_HEAD:
                k = reductions.falling_head_k(headwater.area_m2, length_m, area_m2, h1, h2, dt)
            else:
                assert tailwater is not None  # _check_setup
                k = reductions.falling_head_rising_tail_k(
                    headwater.area_m2, tailwater.area_m2, length_m, area_m2, h1, h2, dt
                )
            gradient = h1 / length_m
        temperature = _mean(prev.temperature_c, cur.temperature_c)
        r_factor = water.temperature_factor(
            temperature, reference_temperature_c, temperature_correction
        )
        cumulative += v_in if v_out is None else v_out
        out.append(
            Determination(
                run=run,
                time_start_s=prev.time_s,
                time_end_s=cur.time_s,
                duration_s=dt,
                head_initial_m=h1,
                head_final_m=h2,
                gradient=gradient,
                inflow_volume_m3=v_in,
                outflow_volume_m3=v_out,
                flow_ratio=v_out / v_in if v_out is not None else None,
                temperature_c=temperature,
                k_m_per_s=k,
                temperature_factor=r_factor,
                k_ref_m_per_s=k * r_factor,
                cumulative_flow_m3=cumulative,
                pore_volumes=cumulative / pore_volume_m3 if pore_volume_m3 else None,
            )
        )
    if problems:
        raise EngineInputError(problems)
    if not out:
        raise EngineInputError.single(
            ("readings",),
            len(readings),
            "at least two readings in one run (between refills)",
            "give no interval to reduce",
            "too_few",
        )
    return tuple(out)


def _q(value: float, unit: str) -> dict[str, Any]:
    return {"value": value, "unit": unit}


def trial_entries(determination: Determination, method: str) -> dict[str, Any]:
    """One determination as a trial of the reduction request (``POST /api/v1/reductions``).

    Parameters
    ----------
    determination : Determination
        From :func:`permeation_determinations`.
    method : str
        The same method the determination was reduced with.

    Notes
    -----
    Constant head: the inflow and outflow volumes (their mean is Q) and the mean head;
    falling-head methods: the heads at both readings, the duration and both volumes, so
    the pipeline's k equals the determination's and its flow-ratio check sees the volumes.
    """
    d = determination
    trial: dict[str, Any] = {"duration": _q(d.duration_s, "s")}
    if method == CONSTANT_HEAD:
        trial["head_difference"] = _q(0.5 * (d.head_initial_m + d.head_final_m), "m")
    else:
        trial["head_initial"] = _q(d.head_initial_m, "m")
        trial["head_final"] = _q(d.head_final_m, "m")
    if d.outflow_volume_m3 is None:
        if method == CONSTANT_HEAD:
            trial["volume"] = _q(d.inflow_volume_m3, "m**3")
    else:
        trial["inflow_volume"] = _q(d.inflow_volume_m3, "m**3")
        trial["outflow_volume"] = _q(d.outflow_volume_m3, "m**3")
    if d.temperature_c is not None:
        trial["temperature"] = _q(d.temperature_c, "degC")
    return trial


def permeation_request(
    determinations: Sequence[Determination],
    *,
    method: str,
    headwater: Burette,
    tailwater: Burette | None,
) -> dict[str, Any]:
    """Build the ``method``, ``apparatus`` and ``trials`` of a reduction request.

    One trial per determination, in the order given.

    Parameters
    ----------
    determinations : sequence of Determination
        From :func:`permeation_determinations`, in time order.
    method : str
        The method they were reduced with.
    headwater, tailwater : Burette
        The burettes (areas enter the falling-head formulas).

    Notes
    -----
    Merge with the test's ``specimen`` (dimensions at permeation), ``standard``,
    ``saturation`` and ``specification``: the pipeline then gives the same k per trial and
    evaluates its termination checks (steady state on the last four, flow ratio) on them.
    """
    apparatus: dict[str, Any] = {}
    if method == FALLING_HEAD:
        apparatus["standpipe_area"] = _q(headwater.area_m2, "m**2")
    elif method == RISING_TAIL and tailwater is not None:
        apparatus["headwater_area"] = _q(headwater.area_m2, "m**2")
        apparatus["tailwater_area"] = _q(tailwater.area_m2, "m**2")
    return {
        "method": method,
        "apparatus": apparatus,
        "trials": [trial_entries(d, method) for d in determinations],
    }
