"""Acceptance, plausibility and compliance checks, each with its measured value, limit and source.

Statuses: ``pass``, ``warn``, ``fail``, ``not_applicable``. Rules the domain reference
marks as recalled rather than read carry '[from memory]' in their source text.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

PASS = "pass"
WARN = "warn"
FAIL = "fail"
NOT_APPLICABLE = "not_applicable"

D5084 = "ASTM D5084"
D2434 = "ASTM D2434"
D5856 = "ASTM D5856"
ISO = "ISO 17892-11"
STANDARDS = (D5084, D2434, D5856, ISO)

CHECK_IDS = (
    "steady_state",
    "flow_ratio",
    "gradient_limit",
    "saturation",
    "specimen_size",
    "laminar_flow",
    "temperature_range",
    "specification",
    "hazen",
    "darcy_linearity",
)

SOURCES = {
    "steady_state_d5084": (
        "ASTM D5084 termination criteria: at least four consecutive determinations, each "
        "within ±25 % of their mean (±50 % below 1e-10 m/s) [from memory; verify against "
        "the edition in use]"
    ),
    "steady_state_rigid": (
        "ASTM D5856 §4.4: k at three gradients within 25 % (read); applied to ASTM D2434 "
        "runs as common practice"
    ),
    "steady_state_general": (
        "Repeated determinations within ±25 % of their mean: common practice, no source"
    ),
    "flow_ratio": (
        "ASTM D5084 termination criteria: outflow/inflow between 0.75 and 1.25 [from memory]"
    ),
    "gradient_d5084": (
        "ASTM D5084 table of recommended maximum hydraulic gradient by k [from memory; verify]"
    ),
    "gradient_d2434": (
        "ASTM D2434-68 note: laminar flow needs gradients of about 0.2 to 0.5 [from memory; verify]"
    ),
    "saturation": (
        "ASTM D5084: B ≥ 0.95, or for stiff materials a B that no longer changes as back "
        "pressure rises [from memory; verify clause]; change tolerance 0.01 common practice"
    ),
    "specimen_size_d2434": (
        "ASTM D2434-68 Table 1, minimum permeameter diameter by maximum particle size "
        "(8 or 12 times; table values [from memory])"
    ),
    "specimen_size_d5084": (
        "ASTM D5084: diameter and height at least 25 mm, largest particle at most 1/6 of the "
        "diameter [from memory, lower confidence]"
    ),
    "laminar_flow": (
        "Darcy's law holds for Re < 1 and often up to Re ≈ 10: Bear (1972), Freeze & Cherry "
        "(1979) [from memory]; pass/warn/fail thresholds common practice; d = D10"
    ),
    "temperature_range": "ASTM D5084 scope: tests between about 15 °C and 30 °C (read)",
    "temperature_missing": "Temperature correction by the viscosity ratio (domain-reference §4.1)",
    "specification": (
        "Project specification limit, compared with the mean of the accepted determinations "
        "(common practice, no source)"
    ),
    "hazen": (
        "Hazen: k (cm/s) ≈ 100·D10² (D10 in cm) for clean filter sands, 0.1 mm ≤ D10 ≤ 3 mm: "
        "Carrier (2003), J. Geotech. Geoenviron. Eng. 129(11):1054; 0.1–10 band common practice"
    ),
    "darcy_linearity": (
        "ASTM D5856 §4.4: Darcy's law valid if k at three gradients agrees within 25 % (read); "
        "a fall of k by more than 10 % as the gradient rises flagged as common practice"
    ),
}


@dataclass(frozen=True, slots=True)
class Check:
    """Outcome of one rule."""

    id: str
    status: str
    measured: float | None
    limit: float | None
    message: str
    source: str


def _na(check_id: str, message: str) -> Check:
    return Check(check_id, NOT_APPLICABLE, None, None, message, "")


def steady_state(k_values: Sequence[float], standard: str | None) -> Check:
    """Repeatability of the determinations of k_ref [m/s].

    Notes
    -----
    ASTM D5084: last four within ±25 % of their mean (±50 % when the mean is below
    1e-10 m/s) [memory]. ASTM D2434/D5856: all runs, at least three, within 25 %.
    Otherwise ±25 % advisory. Source: domain-reference §6.1.3, §6.2.
    """
    n = len(k_values)
    if standard == D5084:
        if n < 4:
            return Check(
                "steady_state",
                FAIL,
                float(n),
                4.0,
                f"ASTM D5084 needs at least four consecutive determinations; {n} given.",
                SOURCES["steady_state_d5084"],
            )
        last = list(k_values[-4:])
        source = SOURCES["steady_state_d5084"]
        fail_status = FAIL
        what = "last four determinations"
    else:
        if n < 2:
            return _na("steady_state", "A single determination: repeatability cannot be judged.")
        last = list(k_values)
        rigid = standard in (D2434, D5856)
        source = SOURCES["steady_state_rigid"] if rigid else SOURCES["steady_state_general"]
        fail_status = FAIL if rigid else WARN
        what = "determinations"
        if rigid and n < 3:
            return Check(
                "steady_state",
                WARN,
                float(n),
                3.0,
                f"{standard}: at least three runs are expected; {n} given.",
                source,
            )
    mean = sum(last) / len(last)
    band = 0.50 if (standard == D5084 and mean < 1e-10) else 0.25
    deviation = max(abs(k / mean - 1.0) for k in last)
    ok = deviation <= band
    message = (
        f"The {what} lie within {deviation:.1%} of their mean {mean:.3g} m/s (limit ±{band:.0%})."
        if ok
        else f"One of the {what} is {deviation:.1%} from their mean {mean:.3g} m/s, "
        f"outside ±{band:.0%}: the test has not reached a steady state."
    )
    return Check("steady_state", PASS if ok else fail_status, deviation, band, message, source)


def flow_ratio(ratios: Sequence[float | None], standard: str | None) -> Check:
    """Outflow/inflow volume ratio of the trials that measured both [-].

    Notes
    -----
    Accept 0.75 ≤ V_out/V_in ≤ 1.25 (ASTM D5084 termination criteria, memory;
    domain-reference §6.1.3). A failure under D5084, a warning otherwise.
    """
    known = [r for r in ratios if r is not None]
    if not known:
        return _na("flow_ratio", "No trial gives both inflow and outflow volumes.")
    worst = max(known, key=lambda r: abs(r - 1.0))
    ok = all(0.75 <= r <= 1.25 for r in known)
    limit = 1.25 if worst >= 1.0 else 0.75
    if ok:
        message = f"Outflow/inflow ratios lie between 0.75 and 1.25 (furthest from 1: {worst:.3f})."
        status = PASS
    else:
        message = (
            f"An outflow/inflow ratio of {worst:.3f} lies outside 0.75–1.25: look for leaks, "
            "air or volume change of the specimen."
        )
        status = FAIL if standard == D5084 else WARN
    return Check("flow_ratio", status, worst, limit, message, SOURCES["flow_ratio"])


def d5084_max_gradient(k_m_per_s: float) -> float:
    """Recommended maximum hydraulic gradient for a given k [-] (ASTM D5084 table, memory).

    Notes
    -----
    1e-5 to 1e-6 m/s: 2; 1e-6 to 1e-7: 5; 1e-7 to 1e-8: 10; 1e-8 to 1e-9: 20; below 1e-9: 30
    (domain-reference §6.1.2).
    """
    if k_m_per_s >= 1e-6:
        return 2.0
    if k_m_per_s >= 1e-7:
        return 5.0
    if k_m_per_s >= 1e-8:
        return 10.0
    if k_m_per_s >= 1e-9:
        return 20.0
    return 30.0


def gradient_limit(k_ref_m_per_s: float, max_gradient: float, standard: str | None) -> Check:
    """Largest gradient used against the standard's recommendation [-].

    Notes
    -----
    ASTM D5084: table of domain-reference §6.1.2 by k₂₀, a warning (recommendation).
    ASTM D2434: about 0.5 at most for laminar flow (§2.3, memory), a warning.
    """
    if standard == D5084:
        limit = d5084_max_gradient(k_ref_m_per_s)
        beyond = " (k is above the D5084 range)" if k_ref_m_per_s > 1e-5 else ""
        source = SOURCES["gradient_d5084"]
    elif standard == D2434:
        limit = 0.5
        beyond = ""
        source = SOURCES["gradient_d2434"]
    else:
        return _na("gradient_limit", "No gradient limit is set for this standard.")
    if max_gradient <= limit:
        message = (
            f"The largest gradient, {max_gradient:.3g}, is within the recommended "
            f"{limit:g}{beyond}."
        )
        return Check("gradient_limit", PASS, max_gradient, limit, message, source)
    message = (
        f"The largest gradient, {max_gradient:.3g}, exceeds the recommended {limit:g} for "
        f"k = {k_ref_m_per_s:.3g} m/s{beyond}: consolidation or seepage forces may bias k."
    )
    return Check("gradient_limit", WARN, max_gradient, limit, message, source)


def saturation(
    b_values: Sequence[float], stiff_material: bool, standard: str | None, tolerance: float = 0.01
) -> Check:
    """Degree of saturation from the B-value series [-].

    Notes
    -----
    Pass if the last B ≥ 0.95; for a declared stiff material, a conditional pass (warning)
    if B changed by at most ``tolerance`` over the last back-pressure step; otherwise fail.
    Source: ASTM D5084 (memory), domain-reference §6.1.1.
    """
    source = SOURCES["saturation"]
    if not b_values:
        if standard == D5084:
            return Check(
                "saturation",
                WARN,
                None,
                0.95,
                "No B-value was recorded; ASTM D5084 requires a saturation check.",
                source,
            )
        return _na("saturation", "No B-value was recorded.")
    last = b_values[-1]
    if last >= 0.95:
        return Check("saturation", PASS, last, 0.95, f"B = {last:.2f} reaches 0.95.", source)
    if stiff_material and len(b_values) >= 2:
        change = abs(last - b_values[-2])
        if change <= tolerance:
            return Check(
                "saturation",
                WARN,
                last,
                0.95,
                f"Conditional pass: B = {last:.2f} is below 0.95 but changed by only "
                f"{change:.3f} with the last back-pressure step, on a material declared stiff.",
                source,
            )
    hint = (
        ""
        if stiff_material
        else " (the stiff-material allowance needs the material declared stiff)"
    )
    return Check(
        "saturation",
        FAIL,
        last,
        0.95,
        f"B = {last:.2f} is below 0.95: the specimen is not shown to be saturated{hint}.",
        source,
    )


def d2434_min_diameter(max_particle_m: float, retained_fraction: float | None) -> float | None:
    """Minimum permeameter diameter of ASTM D2434-68 Table 1 [m], or None beyond 19 mm.

    Notes
    -----
    Up to 9.5 mm: 76 mm if < 35 % retained on 2.00 mm, else 114 mm; 9.5–19.0 mm: 152 mm
    if < 35 % retained on 9.5 mm, else 229 mm. Retained unknown: the larger. Table values
    from memory (domain-reference §6.2). Below 2.00 mm the first row is applied.
    """
    coarse = retained_fraction is None or retained_fraction >= 0.35
    if max_particle_m <= 0.0095:
        return 0.114 if coarse else 0.076
    if max_particle_m <= 0.019:
        return 0.229 if coarse else 0.152
    return None


def specimen_size(
    standard: str | None,
    diameter_m: float | None,
    length_m: float | None,
    max_particle_m: float | None,
    retained_fraction: float | None,
) -> Check:
    """Specimen or permeameter size against the largest particle.

    Notes
    -----
    ASTM D2434-68 Table 1 (memory); ASTM D5084 25 mm minimum and 1/6 rule (memory).
    Source: domain-reference §6.1.5 and §6.2.
    """
    if standard == D2434:
        source = SOURCES["specimen_size_d2434"]
        if diameter_m is None or max_particle_m is None:
            return _na(
                "specimen_size", "Needs the specimen diameter and the maximum particle size."
            )
        need = d2434_min_diameter(max_particle_m, retained_fraction)
        if need is None:
            return Check(
                "specimen_size",
                FAIL,
                max_particle_m * 1000,
                19.0,
                f"Maximum particle size {max_particle_m * 1000:.1f} mm exceeds 19 mm: "
                "remove and record the coarser particles before testing.",
                source,
            )
        assumed = (
            " (retained percentage not given: the stricter column assumed)"
            if retained_fraction is None
            else ""
        )
        measured = diameter_m * 1000
        if diameter_m + 1e-12 >= need:
            return Check(
                "specimen_size",
                PASS,
                measured,
                need * 1000,
                f"Permeameter diameter {measured:.0f} mm meets the {need * 1000:.0f} mm "
                f"minimum{assumed}.",
                source,
            )
        return Check(
            "specimen_size",
            WARN if retained_fraction is None else FAIL,
            measured,
            need * 1000,
            f"Permeameter diameter {measured:.0f} mm is below the {need * 1000:.0f} mm minimum "
            f"for a {max_particle_m * 1000:.1f} mm maximum particle size{assumed}.",
            source,
        )
    if standard == D5084:
        source = SOURCES["specimen_size_d5084"]
        if diameter_m is None or length_m is None:
            return _na("specimen_size", "Needs the specimen diameter and height.")
        smallest = min(diameter_m, length_m) * 1000
        if smallest < 25.0:
            return Check(
                "specimen_size",
                FAIL,
                smallest,
                25.0,
                f"The specimen's smallest dimension, {smallest:.1f} mm, is below 25 mm.",
                source,
            )
        if max_particle_m is not None:
            ratio = diameter_m / max_particle_m
            if ratio < 6.0:
                return Check(
                    "specimen_size",
                    FAIL,
                    ratio,
                    6.0,
                    f"Diameter is {ratio:.1f} times the largest particle; at least 6 needed.",
                    source,
                )
            return Check(
                "specimen_size",
                PASS,
                ratio,
                6.0,
                f"Diameter is {ratio:.1f} times the largest particle and dimensions are ≥ 25 mm.",
                source,
            )
        return Check(
            "specimen_size",
            PASS,
            smallest,
            25.0,
            f"Smallest dimension {smallest:.1f} mm ≥ 25 mm (largest particle not given).",
            source,
        )
    return _na("specimen_size", "No specimen-size rule is set for this standard.")


def laminar_flow(reynolds: float | None) -> Check:
    """Reynolds-number check of laminar (Darcy) flow [-].

    Notes
    -----
    Pass Re < 1, warn 1 ≤ Re < 10, fail Re ≥ 10 (domain-reference §2.4).
    """
    if reynolds is None:
        return _na("laminar_flow", "Needs D10 of the soil to compute a Reynolds number.")
    source = SOURCES["laminar_flow"]
    if reynolds < 1.0:
        return Check(
            "laminar_flow", PASS, reynolds, 1.0, f"Re = {reynolds:.3g} < 1: laminar flow.", source
        )
    if reynolds < 10.0:
        return Check(
            "laminar_flow",
            WARN,
            reynolds,
            1.0,
            f"Re = {reynolds:.3g} lies between 1 and 10: Darcy's law may start to fail.",
            source,
        )
    return Check(
        "laminar_flow",
        FAIL,
        reynolds,
        10.0,
        f"Re = {reynolds:.3g} ≥ 10: flow is not laminar; k from this test is not a Darcy k.",
        source,
    )


def temperature_range(
    temperatures_c: Sequence[float | None], standard: str | None, correction: str
) -> Check:
    """Test temperatures against the 15–30 °C range of ASTM D5084 [°C].

    Notes
    -----
    Missing temperatures: no correction made (factor 1), a warning. Outside 15–30 °C: a
    warning under ASTM D5084 or with its R_T formula. Source: D5084 scope (read).
    """
    missing = [j for j, t in enumerate(temperatures_c) if t is None]
    if missing:
        which = ", ".join(str(j) for j in missing)
        return Check(
            "temperature_range",
            WARN,
            None,
            None,
            f"No temperature for trial(s) {which}: k was not corrected to the reference "
            "temperature.",
            SOURCES["temperature_missing"],
        )
    temps = [t for t in temperatures_c if t is not None]
    if not temps:
        return _na("temperature_range", "No trials.")
    if standard != D5084 and correction != "astm_d5084":
        return _na("temperature_range", "No temperature range is set for this standard.")
    worst = max(temps, key=lambda t: max(15.0 - t, t - 30.0))
    limit = 15.0 if worst < 15.0 else 30.0
    if all(15.0 <= t <= 30.0 for t in temps):
        return Check(
            "temperature_range",
            PASS,
            worst,
            limit,
            "All test temperatures lie within 15–30 °C.",
            SOURCES["temperature_range"],
        )
    return Check(
        "temperature_range",
        WARN,
        worst,
        limit,
        f"A test temperature of {worst:.1f} °C lies outside 15–30 °C, the range of ASTM D5084.",
        SOURCES["temperature_range"],
    )


def specification(
    k_ref_m_per_s: float, k_max_m_per_s: float | None, expanded_u_rel: float | None
) -> Check:
    """Compliance of the representative k_ref with the project's limit [m/s].

    Notes
    -----
    Pass if k_ref ≤ k_max (domain-reference §7.4, practice).
    """
    if k_max_m_per_s is None:
        return _na("specification", "No specification limit was given.")
    source = SOURCES["specification"]
    if k_ref_m_per_s <= k_max_m_per_s:
        note = ""
        if expanded_u_rel is not None and k_ref_m_per_s * (1 + expanded_u_rel) > k_max_m_per_s:
            note = " The limit lies within the expanded uncertainty of the result."
        return Check(
            "specification",
            PASS,
            k_ref_m_per_s,
            k_max_m_per_s,
            f"k = {k_ref_m_per_s:.3g} m/s meets the limit of {k_max_m_per_s:.3g} m/s.{note}",
            source,
        )
    return Check(
        "specification",
        FAIL,
        k_ref_m_per_s,
        k_max_m_per_s,
        f"k = {k_ref_m_per_s:.3g} m/s exceeds the limit of {k_max_m_per_s:.3g} m/s.",
        source,
    )


def hazen(k_ref_m_per_s: float, hazen_k_m_per_s: float | None) -> Check:
    """Measured k against the Hazen estimate (advisory) [-].

    Notes
    -----
    Ratio k/k_Hazen outside 0.1–10 is a warning (domain-reference §7.1, practice band).
    """
    if hazen_k_m_per_s is None:
        return _na("hazen", "Needs D10 between 0.1 mm and 3 mm (clean sands only).")
    ratio = k_ref_m_per_s / hazen_k_m_per_s
    if 0.1 <= ratio <= 10.0:
        return Check(
            "hazen",
            PASS,
            ratio,
            10.0 if ratio >= 1 else 0.1,
            f"Measured k is {ratio:.3g} times the Hazen estimate {hazen_k_m_per_s:.3g} m/s.",
            SOURCES["hazen"],
        )
    return Check(
        "hazen",
        WARN,
        ratio,
        10.0 if ratio > 1 else 0.1,
        f"Measured k is {ratio:.3g} times the Hazen estimate {hazen_k_m_per_s:.3g} m/s: "
        "check the gradation, the specimen and the test (advisory only).",
        SOURCES["hazen"],
    )


def darcy_linearity(k_change: float | None, spread: float | None, n_gradients: int) -> Check:
    """Departure from Darcy's law in a constant-head series at increasing gradient [-].

    Parameters
    ----------
    k_change : float or None
        k at the highest gradient over k at the lowest, minus 1.
    spread : float or None
        Largest |k_j/k̄ − 1| over the runs.
    n_gradients : int
        Number of distinct gradients.

    Notes
    -----
    Fail if the runs disagree by more than 25 % (ASTM D5856 §4.4, read); warn if k falls
    by more than 10 % as i rises (practice). Source: domain-reference §2.3.
    """
    if k_change is None or spread is None or n_gradients < 2:
        return _na("darcy_linearity", "Needs constant-head runs at two or more gradients.")
    source = SOURCES["darcy_linearity"]
    if spread > 0.25:
        return Check(
            "darcy_linearity",
            FAIL,
            spread,
            0.25,
            f"k differs by up to {spread:.1%} between gradients: flow is not Darcian over the "
            "range; use the runs on the linear part only.",
            source,
        )
    if k_change < -0.10:
        return Check(
            "darcy_linearity",
            WARN,
            k_change,
            -0.10,
            f"k falls by {-k_change:.1%} from the lowest to the highest gradient: a sign of "
            "non-Darcy (non-laminar) flow.",
            source,
        )
    status = PASS if n_gradients >= 3 else WARN
    extra = "" if n_gradients >= 3 else " Three gradients are needed to confirm linearity."
    return Check(
        "darcy_linearity",
        status,
        spread,
        0.25,
        f"k agrees within {spread:.1%} over {n_gradients} gradients.{extra}",
        source,
    )
