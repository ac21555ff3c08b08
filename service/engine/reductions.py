"""Reductions of permeameter trials to hydraulic conductivity (Darcy's law and continuity)."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass


def constant_head_k(
    volume_m3: float, length_m: float, area_m2: float, head_m: float, duration_s: float
) -> float:
    """Hydraulic conductivity from a constant-head trial.

    Parameters
    ----------
    volume_m3 : float
        Volume of flow Q collected in the interval [m³].
    length_m : float
        Flow length L [m]: specimen length, or the manometer port spacing.
    area_m2 : float
        Specimen cross-section A [m²].
    head_m : float
        Head difference Δh across L [m of water].
    duration_s : float
        Collection interval t [s].

    Returns
    -------
    float
        k_T at the test temperature [m/s].

    Notes
    -----
    k_T = Q·L / (A·Δh·t). Source: Darcy's law (docs/methods.md §2.1; ASTM D2434-68
    and D5084 Method A use the same expression, from memory).
    """
    return volume_m3 * length_m / (area_m2 * head_m * duration_s)


def falling_head_k(
    standpipe_area_m2: float,
    length_m: float,
    area_m2: float,
    head_initial_m: float,
    head_final_m: float,
    duration_s: float,
) -> float:
    """Hydraulic conductivity from a falling-head trial with constant tailwater.

    Parameters
    ----------
    standpipe_area_m2 : float
        Standpipe cross-section a [m²].
    length_m : float
        Flow length L [m].
    area_m2 : float
        Specimen cross-section A [m²].
    head_initial_m, head_final_m : float
        Head differences h1 > h2 across the specimen [m].
    duration_s : float
        Interval Δt between the two readings [s].

    Notes
    -----
    k_T = a·L/(A·Δt)·ln(h1/h2). Source: continuity −a·dh/dt = k·(h/L)·A integrated
    (docs/methods.md §3.1; ASTM D5084 / D5856 Method B).
    """
    return (
        standpipe_area_m2
        * length_m
        / (area_m2 * duration_s)
        * math.log(head_initial_m / head_final_m)
    )


def rising_tail_effective_area(headwater_area_m2: float, tailwater_area_m2: float) -> float:
    """Effective burette area a_in·a_out/(a_in + a_out) of a rising-tailwater system [m²].

    Notes
    -----
    From dΔh/dt = −q·(1/a_in + 1/a_out) (docs/methods.md §3.2).
    """
    return headwater_area_m2 * tailwater_area_m2 / (headwater_area_m2 + tailwater_area_m2)


def falling_head_rising_tail_k(
    headwater_area_m2: float,
    tailwater_area_m2: float,
    length_m: float,
    area_m2: float,
    head_initial_m: float,
    head_final_m: float,
    duration_s: float,
) -> float:
    """Hydraulic conductivity from a falling-headwater, rising-tailwater trial.

    Parameters
    ----------
    headwater_area_m2, tailwater_area_m2 : float
        Inflow and outflow burette cross-sections a_in, a_out [m²].
    length_m : float
        Flow length L [m].
    area_m2 : float
        Specimen cross-section A [m²].
    head_initial_m, head_final_m : float
        Head differences Δh1 > Δh2 between the burettes [m].
    duration_s : float
        Interval Δt [s].

    Notes
    -----
    k_T = (a_in·a_out·L) / ((a_in + a_out)·A·Δt) · ln(Δh1/Δh2).
    Source: docs/methods.md §3.2 (ASTM D5084 / D5856 Method C).
    """
    a_eff = rising_tail_effective_area(headwater_area_m2, tailwater_area_m2)
    return a_eff * length_m / (area_m2 * duration_s) * math.log(head_initial_m / head_final_m)


def rising_tail_final_head(
    head_initial_m: float,
    inflow_volume_m3: float,
    outflow_volume_m3: float,
    headwater_area_m2: float,
    tailwater_area_m2: float,
) -> float:
    """Compute the final head difference of a rising-tailwater interval from its volumes [m].

    Notes
    -----
    Δh2 = Δh1 − V_in/a_in − V_out/a_out (docs/methods.md §3.2).
    """
    return (
        head_initial_m
        - inflow_volume_m3 / headwater_area_m2
        - outflow_volume_m3 / tailwater_area_m2
    )


def constant_rate_k(
    flow_rate_m3_per_s: float, length_m: float, area_m2: float, head_m: float
) -> float:
    """Hydraulic conductivity from a constant-rate-of-flow trial.

    Parameters
    ----------
    flow_rate_m3_per_s : float
        Imposed flow rate q [m³/s].
    length_m : float
        Flow length L [m].
    area_m2 : float
        Specimen cross-section A [m²].
    head_m : float
        Steady head loss Δh [m].

    Notes
    -----
    k_T = q·L/(A·Δh). Source: docs/methods.md §3.4 (ASTM D5084 Method D).
    """
    return flow_rate_m3_per_s * length_m / (area_m2 * head_m)


def head_from_pressure(pressure_pa: float, unit_weight_n_per_m3: float) -> float:
    """Head of water equivalent to a pressure difference [m].

    Parameters
    ----------
    pressure_pa : float
        Pressure difference Δu [Pa].
    unit_weight_n_per_m3 : float
        γ_w = ρ_w·g [N/m³].

    Notes
    -----
    Δh = Δu/(ρ_w·g) (docs/methods.md §3.5).
    """
    return pressure_pa / unit_weight_n_per_m3


@dataclass(frozen=True, slots=True)
class LogHeadFit:
    """Least-squares line ln h = intercept + slope·t through a falling-head run.

    Attributes
    ----------
    slope : float
        [1/s], negative for a falling head.
    intercept : float
        ln of the fitted initial head [ln m].
    r_squared : float
        Coefficient of determination [-].
    slope_std_error : float or None
        Standard error of the slope [1/s]; None with only two readings.
    """

    slope: float
    intercept: float
    r_squared: float
    slope_std_error: float | None


def fit_log_head(times_s: Sequence[float], heads_m: Sequence[float]) -> LogHeadFit:
    """Unweighted least squares of ln h on t for one multi-reading falling-head run.

    Parameters
    ----------
    times_s : sequence of float
        Reading times t_i [s], strictly increasing.
    heads_m : sequence of float
        Head differences h_i [m], positive.

    Notes
    -----
    ln h(t) = ln h0 − c·t, c = −slope; k = c·a·L/A (Method B) or
    c·L·a_in·a_out/(A·(a_in + a_out)) (Method C). Standard error of the slope
    s_b = √(Σr²/(n − 2) / Σ(t − t̄)²). Source: docs/methods.md §3.3.
    """
    n = len(times_s)
    ys = [math.log(h) for h in heads_m]
    t_mean = sum(times_s) / n
    y_mean = sum(ys) / n
    sxx = sum((t - t_mean) ** 2 for t in times_s)
    sxy = sum((t - t_mean) * (y - y_mean) for t, y in zip(times_s, ys, strict=True))
    syy = sum((y - y_mean) ** 2 for y in ys)
    slope = sxy / sxx
    intercept = y_mean - slope * t_mean
    ss_res = sum((y - (intercept + slope * t)) ** 2 for t, y in zip(times_s, ys, strict=True))
    r_squared = 1.0 - ss_res / syy if syy > 0.0 else 1.0
    se = math.sqrt(ss_res / (n - 2) / sxx) if n > 2 else None
    return LogHeadFit(slope=slope, intercept=intercept, r_squared=r_squared, slope_std_error=se)


@dataclass(frozen=True, slots=True)
class GradientFit:
    """Discharge velocity against gradient for a constant-head series.

    Attributes
    ----------
    k_through_origin_m_per_s : float
        Slope of v = k·i through the origin [m/s].
    slope_m_per_s, intercept_m_per_s : float
        Line v = slope·i + intercept, the intercept a diagnostic [m/s].
    r_squared : float
        Of the line with intercept [-].
    k_change : float
        k of the run at the highest gradient over k of the run at the lowest, minus 1 [-];
        negative when k falls as i rises (non-Darcy flow).
    """

    k_through_origin_m_per_s: float
    slope_m_per_s: float
    intercept_m_per_s: float
    r_squared: float
    k_change: float


def fit_velocity_gradient(
    gradients: Sequence[float], velocities_m_per_s: Sequence[float]
) -> GradientFit:
    """Fit v against i for runs at increasing gradient (laminar-flow check).

    Parameters
    ----------
    gradients : sequence of float
        Hydraulic gradients i_j [-], at least two distinct values.
    velocities_m_per_s : sequence of float
        Discharge velocities v_j = q_j/A [m/s], temperature-corrected to the reference.

    Notes
    -----
    v = k·i through the origin: k = Σ v·i / Σ i²; with intercept by ordinary least squares.
    Source: ASTM D2434-68 procedure (v vs i, linear part only, memory); ASTM D5856 §4.4
    (read); docs/methods.md §2.5.
    """
    n = len(gradients)
    k0 = sum(v * i for i, v in zip(gradients, velocities_m_per_s, strict=True)) / sum(
        i * i for i in gradients
    )
    i_mean = sum(gradients) / n
    v_mean = sum(velocities_m_per_s) / n
    sxx = sum((i - i_mean) ** 2 for i in gradients)
    sxy = sum(
        (i - i_mean) * (v - v_mean) for i, v in zip(gradients, velocities_m_per_s, strict=True)
    )
    syy = sum((v - v_mean) ** 2 for v in velocities_m_per_s)
    slope = sxy / sxx
    intercept = v_mean - slope * i_mean
    ss_res = sum(
        (v - (intercept + slope * i)) ** 2
        for i, v in zip(gradients, velocities_m_per_s, strict=True)
    )
    r_squared = 1.0 - ss_res / syy if syy > 0.0 else 1.0
    lo = min(range(n), key=lambda j: gradients[j])
    hi = max(range(n), key=lambda j: gradients[j])
    k_lo = velocities_m_per_s[lo] / gradients[lo]
    k_hi = velocities_m_per_s[hi] / gradients[hi]
    return GradientFit(
        k_through_origin_m_per_s=k0,
        slope_m_per_s=slope,
        intercept_m_per_s=intercept,
        r_squared=r_squared,
        k_change=k_hi / k_lo - 1.0,
    )


def reynolds_number(
    density_kg_per_m3: float, velocity_m_per_s: float, grain_size_m: float, viscosity_pa_s: float
) -> float:
    """Reynolds number of flow through a porous medium [-].

    Parameters
    ----------
    density_kg_per_m3 : float
        ρ_w [kg/m³].
    velocity_m_per_s : float
        Discharge velocity v [m/s].
    grain_size_m : float
        Representative grain size d [m] (D10 here).
    viscosity_pa_s : float
        η [Pa·s].

    Notes
    -----
    Re = ρ_w·v·d/η. Source: Bear (1972); Freeze & Cherry (1979) (docs/methods.md §2.6).
    """
    return density_kg_per_m3 * velocity_m_per_s * grain_size_m / viscosity_pa_s


def hazen_k(d10_m: float) -> float:
    """Hazen estimate of hydraulic conductivity of a clean filter sand [m/s].

    Parameters
    ----------
    d10_m : float
        Effective grain size D10 [m]; applicable 0.1 mm to 3 mm.

    Notes
    -----
    k (cm/s) ≈ C_H·D10² with D10 in cm and C_H = 100 (water at about 10 °C).
    Source: Carrier (2003), J. Geotech. Geoenviron. Eng. 129(11):1054 (docs/methods.md §10.1).
    """
    d10_cm = d10_m * 100.0
    return 100.0 * d10_cm * d10_cm / 100.0


def kozeny_carman_k(
    grain_size_m: float, porosity: float, unit_weight_n_per_m3: float, viscosity_pa_s: float
) -> float:
    """Kozeny–Carman estimate of hydraulic conductivity for uniform spheres [m/s].

    Parameters
    ----------
    grain_size_m : float
        Sphere diameter d [m] (D10 is used as d here; label says so).
    porosity : float
        n [-].
    unit_weight_n_per_m3 : float
        γ_w [N/m³].
    viscosity_pa_s : float
        η [Pa·s].

    Notes
    -----
    K = d²·n³ / (180·(1 − n)²); k = K·γ_w/η. Source: Carman (1937); docs/methods.md §10.2.
    """
    permeability = grain_size_m**2 * porosity**3 / (180.0 * (1.0 - porosity) ** 2)
    return permeability * unit_weight_n_per_m3 / viscosity_pa_s
