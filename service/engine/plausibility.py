"""Plausibility checks: laminar flow, Hazen's estimate and the specimen's phase relations.

Advisory physics around the measured k (docs/methods.md §8.7, §8.10, §10.1); each reports a
:class:`~service.engine.checks.Check` judged by the rule of the test's rule set.
"""

from __future__ import annotations

from service.engine.check_figures import k_text, mm, mm_text, pct, quoted
from service.engine.checks import PASS, WARN, Check, judged, not_applicable
from service.engine.rules import Rule


def laminar_flow(reynolds: float | None, rule: Rule | None) -> Check:
    """Reynolds-number check of laminar (Darcy) flow [-].

    Parameters
    ----------
    reynolds : float or None
        Re = ρ_w·v·D10/η of the fastest accepted trial.
    rule : Rule or None
        ``warn_from`` and ``fail_from``.

    Returns
    -------
    Check
        Pass below warn_from, warn below fail_from, fail above (docs/methods.md §8.7).
    """
    if rule is None:
        return not_applicable("laminar_flow", "No laminar-flow rule is set.")
    if reynolds is None:
        return not_applicable("laminar_flow", "Needs D10 of the soil to compute a Reynolds number.")
    warn_from, fail_from = rule.value("warn_from"), rule.value("fail_from")
    if reynolds < warn_from:
        return judged(
            rule,
            PASS,
            reynolds,
            warn_from,
            f"Re = {reynolds:.3g} < {warn_from:g}: laminar flow.",
        )
    if reynolds < fail_from:
        return judged(
            rule,
            WARN,
            reynolds,
            warn_from,
            f"Re = {reynolds:.3g} lies between {warn_from:g} and {fail_from:g}: Darcy's law may "
            "start to fail.",
        )
    return judged(
        rule,
        rule.failure,
        reynolds,
        fail_from,
        f"Re = {reynolds:.3g} ≥ {fail_from:g}: flow is not laminar; k from this test is not a "
        "Darcy k.",
    )


def phase_relations(
    saturation_degree: float | None,
    saturation_u: float | None,
    void_ratio: float | None,
    rule: Rule | None,
) -> Check:
    """Degree of saturation and void ratio of the specimen against what is possible [-].

    Parameters
    ----------
    saturation_degree : float or None
        S [-] (1.0 for 100 %).
    saturation_u : float or None
        Standard uncertainty of S from the inputs' stated uncertainties [-].
    void_ratio : float or None
        e [-].
    rule : Rule or None
        ``tolerance_without_u`` and ``coverage``.

    Returns
    -------
    Check
        Warn when e ≤ 0 or S > 1 + tolerance, tolerance = coverage·u(S) when known,
        else tolerance_without_u (docs/methods.md §8.10).
    """
    if rule is None:
        return not_applicable("phase_relations", "No phase-relations rule is set.")
    if void_ratio is not None and void_ratio <= 0.0:
        return judged(
            rule,
            rule.failure,
            void_ratio,
            0.0,
            f"The void ratio {void_ratio:.3f} is not above zero: a specimen entry is wrong.",
        )
    if saturation_degree is None:
        return not_applicable(
            "phase_relations",
            "Needs the wet mass, dimensions, water content and specific gravity of the specimen.",
        )
    if saturation_u is not None:
        tolerance = rule.value("coverage") * saturation_u
        why = f"its uncertainty (±{pct(tolerance, 1)})"
    else:
        tolerance = rule.value("tolerance_without_u")
        why = f"the {pct(tolerance, 0)} allowed when the entries carry no uncertainty"
    limit = 1.0 + tolerance
    if saturation_degree > limit:
        return judged(
            rule,
            rule.failure,
            saturation_degree,
            limit,
            f"Degree of saturation {pct(saturation_degree, 1)} is above 100 % by more than {why}: "
            "check the wet mass, dimensions, water content and specific gravity.",
        )
    return judged(
        rule,
        PASS,
        saturation_degree,
        limit,
        f"Degree of saturation {pct(saturation_degree, 1)} is possible (at most 100 % within "
        f"{why}).",
    )


def hazen(k_ref_m_per_s: float, hazen_k_m_per_s: float | None, rule: Rule | None) -> Check:
    """Measured k against the Hazen estimate (advisory) [-].

    Parameters
    ----------
    k_ref_m_per_s : float
        Representative k at the reference temperature [m/s].
    hazen_k_m_per_s : float or None
        Hazen's estimate; None when D10 is unknown or outside the formula's range.
    rule : Rule or None
        ``ratio_low`` and ``ratio_high``.

    Returns
    -------
    Check
        The ratio k/k_Hazen against its band (docs/methods.md §10.1).
    """
    if rule is None:
        return not_applicable("hazen", "No Hazen rule is set.")
    if hazen_k_m_per_s is None:
        low, high = rule.value("d10_min"), rule.value("d10_max")
        return not_applicable(
            "hazen",
            f"Needs D10 between {mm_text(low, 'g')} and {mm_text(high, 'g')} (clean sands only).",
            (mm(low, "g"), mm(high, "g")),
        )
    ratio = k_ref_m_per_s / hazen_k_m_per_s
    low, high = rule.value("ratio_low"), rule.value("ratio_high")
    limit = high if ratio >= 1 else low
    estimate = k_text(hazen_k_m_per_s)
    figures = (quoted(estimate, hazen_k_m_per_s, "k"),)
    if low <= ratio <= high:
        return judged(
            rule,
            PASS,
            ratio,
            limit,
            f"Measured k is {ratio:.3g} times the Hazen estimate {estimate}.",
            figures=figures,
        )
    return judged(
        rule,
        rule.failure,
        ratio,
        limit,
        f"Measured k is {ratio:.3g} times the Hazen estimate {estimate}: "
        "check the gradation, the specimen and the test (advisory only).",
        figures=figures,
    )
