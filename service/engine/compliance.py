"""Compliance of the result with the project's specification limit under a decision rule.

ILAC-G8:09/2019 simple or guarded acceptance (docs/methods.md §9).
"""

from __future__ import annotations

from service.engine.check_figures import Figure, distinct, quoted
from service.engine.checks import FAIL, PASS, WARN, Check, not_applicable
from service.engine.rules import GUARD_BAND


def specification(
    k_ref_m_per_s: float,
    k_max_m_per_s: float | None,
    expanded_u_rel: float | None,
    decision_rule: str,
    reference_temperature_c: float,
) -> Check:
    """Compliance of the representative k_ref with the project's limit under a decision rule.

    Parameters
    ----------
    k_ref_m_per_s : float
        Representative k at the reference temperature [m/s].
    k_max_m_per_s : float or None
        Specification limit [m/s]; None when there is none.
    expanded_u_rel : float or None
        Expanded relative uncertainty U/k of k_ref [-].
    decision_rule : {"simple", "guard_band"}
        ILAC-G8:09/2019 simple acceptance (w = 0) or guarded acceptance (w = U).
    reference_temperature_c : float
        Reference temperature, named in the message [°C].

    Returns
    -------
    Check
        simple: pass when k ≤ k_max, else fail. guard_band: pass when k + U ≤ k_max, fail
        when k − U > k_max, otherwise warn (not decidable at this uncertainty). Figures are
        shown with enough digits to differ when they differ (docs/methods.md §9).
    """
    if k_max_m_per_s is None:
        return not_applicable("specification", "No specification limit was given.")
    what = f"k at {reference_temperature_c:g} °C"
    k = k_ref_m_per_s
    if decision_rule != GUARD_BAND:
        source = "ILAC-G8:09/2019, simple acceptance (w = 0)"
        shown_k, shown_max = (f"{text} m/s" for text in distinct(k, k_max_m_per_s))
        figures = _figures((shown_k, k), (shown_max, k_max_m_per_s))
        if k <= k_max_m_per_s:
            note = ""
            if expanded_u_rel is not None and k * (1 + expanded_u_rel) > k_max_m_per_s:
                note = " The limit lies within the expanded uncertainty of the result."
            return Check(
                "specification",
                PASS,
                k,
                k_max_m_per_s,
                f"{what} = {shown_k} meets the limit of {shown_max}.{note}",
                source,
                kind="k",
                figures=figures,
            )
        return Check(
            "specification",
            FAIL,
            k,
            k_max_m_per_s,
            f"{what} = {shown_k} exceeds the limit of {shown_max}.",
            source,
            kind="k",
            figures=figures,
        )
    source = "ILAC-G8:09/2019, guarded acceptance (w = U)"
    if expanded_u_rel is None:
        return Check(
            "specification",
            WARN,
            k,
            k_max_m_per_s,
            "Guarded acceptance needs the expanded uncertainty of k, and none could be "
            "computed: give the instruments' uncertainties.",
            source,
            kind="k",
        )
    expanded = expanded_u_rel * k
    upper, lower = k + expanded, k - expanded
    values = (upper, lower, k_max_m_per_s, k, expanded)
    texts = [f"{text} m/s" for text in distinct(*values)]
    shown_upper, shown_lower, shown_max, shown_k, shown_u = texts
    figures = _figures(*zip(texts, values, strict=True))
    stated = f"({what} = {shown_k}, U = {shown_u})"
    if upper <= k_max_m_per_s:
        return Check(
            "specification",
            PASS,
            k,
            k_max_m_per_s,
            f"k + U = {shown_upper} is within the limit of {shown_max} {stated}.",
            source,
            kind="k",
            figures=figures,
        )
    if lower > k_max_m_per_s:
        return Check(
            "specification",
            FAIL,
            k,
            k_max_m_per_s,
            f"k − U = {shown_lower} exceeds the limit of {shown_max} {stated}.",
            source,
            kind="k",
            figures=figures,
        )
    return Check(
        "specification",
        WARN,
        k,
        k_max_m_per_s,
        f"The limit of {shown_max} lies between k − U = {shown_lower} and k + U = "
        f"{shown_upper} {stated}: compliance cannot be decided at this uncertainty.",
        source,
        kind="k",
        figures=figures,
    )


def _figures(*pairs: tuple[str, float]) -> tuple[Figure, ...]:
    """Keep the conductivities quoted in a message as values [m/s]."""
    return tuple(quoted(text, value, "k") for text, value in pairs)
