"""Acceptance checks of the test's standard, each with its measured value, limit and source.

Plausibility checks are in :mod:`service.engine.plausibility`, the specification limit in
:mod:`service.engine.compliance`; all report a :class:`Check`.

Statuses: ``pass``, ``warn``, ``fail``, ``not_applicable``. Each check takes the :class:`Rule`
of the test's rule set (docs/methods.md §7–§8); a check whose rule set has no rule for it is
not applicable. Messages are written for the people who read them: figures with units and
sensible precision, never an internal note.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import asdict, dataclass

from service.engine.check_figures import (
    Figure,
    k_text,
    mm,
    mm_text,
    pct,
    quoted,
)
from service.engine.rules import FLEXIBLE_WALL, RIGID_WALL, Rule
from service.engine.uncertainty import student_t_quantile

PASS = "pass"
WARN = "warn"
FAIL = "fail"
NOT_APPLICABLE = "not_applicable"

_COUNT_WORDS = {2: "two", 3: "three", 4: "four", 5: "five", 6: "six"}


@dataclass(frozen=True, slots=True)
class Check:
    """Outcome of one rule.

    Attributes
    ----------
    id : str
        Check id (``"steady_state"``).
    status : {"pass", "warn", "fail", "not_applicable"}
        Outcome.
    measured, limit : float or None
        The figure judged and the limit it was judged against [the check's unit].
    message : str
        What was found, for the people who read the result.
    source : str
        The document and clause of the rule; empty when not applicable.
    limit_confirmed : bool or None
        Whether the laboratory confirmed the rule's limits (docs/methods.md §7.1); None when
        no rule of a standard was applied.
    kind : str
        The quantity ``measured`` and ``limit`` are (a key of the display table of
        service/figures.py), both then in SI; empty for a ratio, a count or a temperature [°C].
    figures : tuple of Figure
        The figures with units quoted in ``message``, as values: the message is written in SI
        and a page shows these in the reader's units.
    """

    id: str
    status: str
    measured: float | None
    limit: float | None
    message: str
    source: str
    limit_confirmed: bool | None = None
    kind: str = ""
    figures: tuple[Figure, ...] = ()


def as_record(check: Check) -> dict[str, object]:
    """Write a check as the stored result keeps it (JSON: its figures as lists)."""
    record = asdict(check)
    record["figures"] = [list(figure) for figure in check.figures]
    return record


def _count(n: int) -> str:
    return _COUNT_WORDS.get(n, str(n))


def not_applicable(check_id: str, message: str, figures: tuple[Figure, ...] = ()) -> Check:
    """Report a check that cannot be judged (no rule, or not enough entries)."""
    return Check(check_id, NOT_APPLICABLE, None, None, message, "", figures=figures)


def judged(
    rule: Rule,
    status: str,
    measured: float | None,
    limit: float | None,
    message: str,
    *,
    kind: str = "",
    figures: tuple[Figure, ...] = (),
) -> Check:
    """Report a check judged by ``rule``, with its source and confirmation."""
    return Check(
        rule.id, status, measured, limit, message, rule.source, rule.confirmed, kind, figures
    )


def _has(rule: Rule, limit_id: str) -> bool:
    return any(item.id == limit_id for item in rule.limits)


def steady_state(
    k_values: Sequence[float], rule: Rule | None, determinations: int, last_only: bool
) -> Check:
    """Repeatability of the determinations of k_ref [-].

    Parameters
    ----------
    k_values : sequence of float
        k_ref of every trial in order [m/s].
    rule : Rule or None
        ``band`` (and, for ASTM D5084, ``band_low_k`` below ``low_k``).
    determinations : int
        Number of determinations the rule set needs.
    last_only : bool
        Judge the last ``determinations`` trials (ASTM D5084), else all trials.

    Returns
    -------
    Check
        Largest |k_j/k̄ − 1| against the band (docs/methods.md §8.1).
    """
    if rule is None:
        return not_applicable("steady_state", "No repeatability rule is set for this standard.")
    n = len(k_values)
    if last_only:
        if n < determinations:
            return judged(
                rule,
                rule.failure,
                float(n),
                float(determinations),
                f"At least {_count(determinations)} consecutive determinations are needed; "
                f"{n} given.",
            )
        window = list(k_values[-determinations:])
        what = f"last {_count(determinations)} determinations"
    else:
        if n < 2:
            return not_applicable(
                "steady_state", "A single determination: repeatability cannot be judged."
            )
        if n < determinations:
            return judged(
                rule,
                WARN,
                float(n),
                float(determinations),
                f"At least {_count(determinations)} determinations are expected; {n} given.",
            )
        window = list(k_values)
        what = "determinations"
    mean = sum(window) / len(window)
    band = rule.value("band")
    if _has(rule, "band_low_k") and mean < rule.value("low_k"):
        band = rule.value("band_low_k")
    deviation = max(abs(k / mean - 1.0) for k in window)
    shown_mean = k_text(mean)
    figures = (quoted(shown_mean, mean, "k"),)
    if deviation <= band:
        return judged(
            rule,
            PASS,
            deviation,
            band,
            f"The {what} lie within {pct(deviation, 1)} of their mean {shown_mean} "
            f"(limit ±{pct(band, 0)}).",
            figures=figures,
        )
    return judged(
        rule,
        rule.failure,
        deviation,
        band,
        f"One of the {what} is {pct(deviation, 1)} from their mean {shown_mean}, outside "
        f"±{pct(band, 0)}: the test has not reached a steady state.",
        figures=figures,
    )


def trend(k_values: Sequence[float], rule: Rule | None) -> Check:
    """Upward or downward trend of the accepted determinations [-].

    Parameters
    ----------
    k_values : sequence of float
        k_ref of the accepted determinations in the order they were made [m/s].
    rule : Rule or None
        ``significance`` (two-sided level of the slope test) and ``max_change``.

    Returns
    -------
    Check
        Measured: the fitted change of k over the determinations relative to their mean,
        b·(n − 1)/k̄. Fail (or the rule's status) when the least-squares slope b of k on the
        determination number differs from zero at the ``significance`` level (t-test with
        n − 2 degrees of freedom); warn when it is not significant but the fitted change
        exceeds ``max_change`` (docs/methods.md §8.2).
    """
    if rule is None:
        return not_applicable("trend", "No trend rule is set for this standard.")
    n = len(k_values)
    if n < 3:
        return not_applicable("trend", "Needs three or more determinations to judge a trend.")
    xs = range(n)
    x_mean = (n - 1) / 2.0
    mean = sum(k_values) / n
    s_xx = sum((x - x_mean) ** 2 for x in xs)
    slope = sum((x - x_mean) * (k - mean) for x, k in zip(xs, k_values, strict=True)) / s_xx
    residual = sum(
        (k - mean - slope * (x - x_mean)) ** 2 for x, k in zip(xs, k_values, strict=True)
    )
    error = math.sqrt(residual / (n - 2) / s_xx)
    change = slope * (n - 1) / mean
    alpha = rule.value("significance")
    critical = student_t_quantile(1.0 - alpha, n - 2)
    direction = "falls" if slope < 0 else "rises"
    limit = rule.value("max_change")
    if error <= 1e-12 * abs(mean):
        statistic = math.inf if slope != 0.0 else 0.0
        shown = "a straight line"
    else:
        statistic = abs(slope) / error
        shown = f"t = {statistic:.2f}"
    if statistic > critical:
        return judged(
            rule,
            rule.failure,
            change,
            limit,
            f"k {direction} steadily over the {_count(n)} determinations (fitted change "
            f"{pct(change, 1, sign=True)}; {shown}, above the {critical:.2f} of a two-sided "
            f"test at {pct(alpha, 0)}): the test has not reached a steady state.",
        )
    if abs(change) > limit:
        return judged(
            rule,
            WARN,
            change,
            limit,
            f"k {direction} by {pct(abs(change), 1)} over the {_count(n)} determinations; the "
            f"slope is not significant at {pct(alpha, 0)} ({shown}, critical {critical:.2f}) "
            f"but the change exceeds ±{pct(limit, 0)}: look at k against time before accepting.",
        )
    return judged(
        rule,
        PASS,
        change,
        limit,
        f"No significant trend: fitted change {pct(change, 1, sign=True)} over the {_count(n)} "
        f"determinations ({shown}, critical {critical:.2f}).",
    )


def flow_ratio(ratios: Sequence[float | None], rule: Rule | None) -> Check:
    """Outflow/inflow volume ratio of the trials that measured both [-].

    Parameters
    ----------
    ratios : sequence of float or None
        V_out/V_in of the accepted trials (None where not measured).
    rule : Rule or None
        ``low`` and ``high``.

    Returns
    -------
    Check
        The ratio furthest from 1 against low ≤ V_out/V_in ≤ high (docs/methods.md §8.3).
    """
    if rule is None:
        return not_applicable("flow_ratio", "No flow-balance rule is set for this standard.")
    known = [r for r in ratios if r is not None]
    if not known:
        return not_applicable("flow_ratio", "No trial gives both inflow and outflow volumes.")
    low, high = rule.value("low"), rule.value("high")
    worst = max(known, key=lambda r: abs(r - 1.0))
    limit = high if worst >= 1.0 else low
    if all(low <= r <= high for r in known):
        return judged(
            rule,
            PASS,
            worst,
            limit,
            f"Outflow/inflow ratios lie between {low:g} and {high:g} "
            f"(furthest from 1: {worst:.3f}).",
        )
    return judged(
        rule,
        rule.failure,
        worst,
        limit,
        f"An outflow/inflow ratio of {worst:.3f} lies outside {low:g}–{high:g}: look for leaks, "
        "air or volume change of the specimen.",
    )


def max_gradient_for(k_m_per_s: float, rule: Rule) -> float:
    """Recommended maximum hydraulic gradient for a given k from a table rule [-].

    Parameters
    ----------
    k_m_per_s : float
        k at the reference temperature [m/s].
    rule : Rule
        ``k_1`` … ``k_4`` (row lower bounds, falling) and ``gradient_1`` … ``gradient_5``.

    Returns
    -------
    float
        The gradient of the first row whose lower bound k reaches; ``gradient_5`` below
        ``k_4`` (docs/methods.md §8.4).
    """
    row = 1
    while _has(rule, f"k_{row}"):
        if k_m_per_s >= rule.value(f"k_{row}"):
            return rule.value(f"gradient_{row}")
        row += 1
    return rule.value(f"gradient_{row}")


def gradient_limit(k_ref_m_per_s: float, max_gradient: float, rule: Rule | None) -> Check:
    """Largest gradient used against the standard's recommendation [-].

    Parameters
    ----------
    k_ref_m_per_s : float
        Representative k at the reference temperature [m/s].
    max_gradient : float
        Largest gradient of the accepted trials (falling head: the initial one) [-].
    rule : Rule or None
        A table by k (ASTM D5084) or one ``gradient_max`` (ASTM D2434).

    Returns
    -------
    Check
        docs/methods.md §8.4.
    """
    if rule is None:
        return not_applicable("gradient_limit", "No gradient limit is set for this standard.")
    if _has(rule, "gradient_max"):
        limit = rule.value("gradient_max")
        beyond = ""
    else:
        limit = max_gradient_for(k_ref_m_per_s, rule)
        beyond = (
            " (k is above the range of the table)" if k_ref_m_per_s > rule.value("k_max") else ""
        )
    if max_gradient <= limit:
        return judged(
            rule,
            PASS,
            max_gradient,
            limit,
            f"The largest gradient, {max_gradient:.3g}, is within the recommended {limit:g}"
            f"{beyond}.",
        )
    return judged(
        rule,
        rule.failure,
        max_gradient,
        limit,
        f"The largest gradient, {max_gradient:.3g}, exceeds the recommended {limit:g} for "
        f"k = {k_text(k_ref_m_per_s)}{beyond}: consolidation or seepage forces may bias k.",
        figures=(quoted(k_text(k_ref_m_per_s), k_ref_m_per_s, "k"),),
    )


def saturation(
    b_values: Sequence[float], stiff_material: bool, rule: Rule | None, permeameter: str | None
) -> Check:
    """Degree of saturation from the B-value series [-].

    Parameters
    ----------
    b_values : sequence of float
        B-values in the order measured.
    stiff_material : bool
        The material is declared stiff (a B that stops changing may be accepted).
    rule : Rule or None
        ``b_min`` and ``b_change``.
    permeameter : {"flexible_wall", "rigid_wall"} or None
        The permeameter used (or the rule set's assumption).

    Returns
    -------
    Check
        Pass if the last B ≥ b_min; for a declared stiff material a conditional pass (warn)
        if B changed by at most b_change over the last step; no record on a flexible-wall
        test, or a low B, gives the rule's status; a rigid wall is not applicable
        (docs/methods.md §8.5).
    """
    if rule is None:
        return not_applicable("saturation", "No saturation rule is set for this standard.")
    if permeameter == RIGID_WALL:
        return not_applicable("saturation", "Rigid-wall permeameter: no B-value check applies.")
    b_min = rule.value("b_min")
    if not b_values:
        if permeameter == FLEXIBLE_WALL:
            return judged(
                rule,
                rule.failure,
                None,
                b_min,
                "No B-value was recorded: a flexible-wall test needs a saturation check.",
            )
        return not_applicable("saturation", "No B-value was recorded.")
    last = b_values[-1]
    if last >= b_min:
        return judged(rule, PASS, last, b_min, f"B = {last:.2f} reaches {b_min:.2f}.")
    if stiff_material and len(b_values) >= 2:
        change = abs(last - b_values[-2])
        if change <= rule.value("b_change"):
            return judged(
                rule,
                WARN,
                last,
                b_min,
                f"Conditional pass: B = {last:.2f} is below {b_min:.2f} but changed by only "
                f"{change:.3f} with the last back-pressure step, on a material declared stiff.",
            )
    hint = (
        ""
        if stiff_material
        else " (the stiff-material allowance needs the material declared stiff)"
    )
    return judged(
        rule,
        rule.failure,
        last,
        b_min,
        f"B = {last:.2f} is below {b_min:.2f}: the specimen is not shown to be saturated{hint}.",
    )


def table_min_diameter(
    max_particle_m: float, retained_fraction: float | None, rule: Rule
) -> tuple[float | None, bool]:
    """Minimum permeameter diameter from a two-row size table such as ASTM D2434 Table 1 [m].

    Parameters
    ----------
    max_particle_m : float
        Largest particle size [m].
    retained_fraction : float or None
        Fraction of the soil retained on the row's lower sieve [-]; None when not known.
    rule : Rule
        ``fine_sieve``, ``row1_max``, ``row2_max``, ``retained`` and the four diameters.

    Returns
    -------
    (diameter, assumed) : tuple of float or None and bool
        The minimum diameter (None beyond the table) and whether the wider column was
        assumed for want of the retained fraction. A largest particle below the first
        row's lower sieve leaves nothing retained on it: the narrower column applies
        (docs/methods.md §8.6).
    """
    if max_particle_m < rule.value("fine_sieve"):
        return rule.value("row1_narrow"), False
    for row in ("row1", "row2"):
        if max_particle_m <= rule.value(f"{row}_max"):
            if retained_fraction is None:
                return rule.value(f"{row}_wide"), True
            wide = retained_fraction >= rule.value("retained")
            return rule.value(f"{row}_wide" if wide else f"{row}_narrow"), False
    return None, False


def specimen_size(
    rule: Rule | None,
    diameter_m: float | None,
    length_m: float | None,
    max_particle_m: float | None,
    retained_fraction: float | None,
) -> Check:
    """Specimen or permeameter size against the largest particle.

    Parameters
    ----------
    rule : Rule or None
        A size table (ASTM D2434) or ``min_dimension`` / ``min_ratio`` limits.
    diameter_m, length_m : float or None
        Specimen diameter and height [m].
    max_particle_m : float or None
        Largest particle size [m].
    retained_fraction : float or None
        Fraction retained on the table row's lower sieve [-].

    Returns
    -------
    Check
        docs/methods.md §8.6.
    """
    if rule is None:
        return not_applicable("specimen_size", "No specimen-size rule is set for this standard.")
    if _has(rule, "row1_narrow"):
        return _size_table(rule, diameter_m, max_particle_m, retained_fraction)
    if diameter_m is None or (length_m is None and _has(rule, "min_dimension")):
        return not_applicable("specimen_size", "Needs the specimen diameter and height.")
    if _has(rule, "min_dimension") and length_m is not None:
        smallest = min(diameter_m, length_m)
        floor = rule.value("min_dimension")
        if smallest < floor:
            return judged(
                rule,
                rule.failure,
                smallest,
                floor,
                f"The specimen's smallest dimension, {mm_text(smallest)}, is below "
                f"{mm_text(floor, 'g')}.",
                kind="small_length",
                figures=(mm(smallest), mm(floor, "g")),
            )
    if max_particle_m is None:
        if not _has(rule, "min_dimension"):
            return not_applicable("specimen_size", "Needs the largest particle size.")
        smallest, floor = min(diameter_m, length_m or diameter_m), rule.value("min_dimension")
        return judged(
            rule,
            PASS,
            smallest,
            floor,
            f"Smallest dimension {mm_text(smallest)} is at least {mm_text(floor, 'g')} "
            "(largest particle not given).",
            kind="small_length",
            figures=(mm(smallest), mm(floor, "g")),
        )
    ratio = diameter_m / max_particle_m
    need = rule.value("min_ratio")
    if ratio < need:
        return judged(
            rule,
            rule.failure,
            ratio,
            need,
            f"Diameter is {ratio:.1f} times the largest particle; at least {need:g} needed.",
        )
    return judged(
        rule,
        PASS,
        ratio,
        need,
        f"Diameter is {ratio:.1f} times the largest particle (at least {need:g} needed).",
    )


def _size_table(
    rule: Rule,
    diameter_m: float | None,
    max_particle_m: float | None,
    retained_fraction: float | None,
) -> Check:
    if diameter_m is None or max_particle_m is None:
        return not_applicable(
            "specimen_size", "Needs the specimen diameter and the maximum particle size."
        )
    need, assumed = table_min_diameter(max_particle_m, retained_fraction, rule)
    largest = rule.value("row2_max")
    if need is None:
        return judged(
            rule,
            rule.failure,
            max_particle_m,
            largest,
            f"Maximum particle size {mm_text(max_particle_m)} exceeds "
            f"{mm_text(largest, 'g')}: remove and record the coarser particles before testing.",
            kind="small_length",
            figures=(mm(max_particle_m), mm(largest, "g")),
        )
    note = " (retained percentage not given: the stricter column assumed)" if assumed else ""
    sizes = (mm(diameter_m, ".0f"), mm(need, ".0f"))
    if diameter_m + 1e-12 >= need:
        return judged(
            rule,
            PASS,
            diameter_m,
            need,
            f"Permeameter diameter {sizes[0].text} meets the {sizes[1].text} minimum{note}.",
            kind="small_length",
            figures=sizes,
        )
    return judged(
        rule,
        WARN if assumed else rule.failure,
        diameter_m,
        need,
        f"Permeameter diameter {sizes[0].text} is below the {sizes[1].text} minimum for "
        f"a {mm_text(max_particle_m)} maximum particle size{note}.",
        kind="small_length",
        figures=(*sizes, mm(max_particle_m)),
    )


def temperature_range(
    temperatures_c: Sequence[float | None], rule: Rule | None, viscosity_given: bool
) -> Check:
    """Test temperatures against a range such as 15–30 °C of ASTM D5084 [°C].

    Parameters
    ----------
    temperatures_c : sequence of float or None
        Temperature of each trial [°C]; None where not recorded.
    rule : Rule or None
        ``low`` and ``high``.
    viscosity_given : bool
        The request states the water viscosity, so the correction needs no temperature.

    Returns
    -------
    Check
        A missing temperature (without a stated viscosity) is a warning: k was not
        corrected. Otherwise the coldest or warmest trial against the range
        (docs/methods.md §8.8).
    """
    missing = [j for j, t in enumerate(temperatures_c) if t is None]
    if missing and not viscosity_given:
        which = ", ".join(str(j + 1) for j in missing)
        return Check(
            "temperature_range",
            WARN,
            None,
            None,
            f"No temperature for trial(s) {which}: k was not corrected to the reference "
            "temperature.",
            "Temperature correction by the viscosity ratio of water",
        )
    temps = [t for t in temperatures_c if t is not None]
    if rule is None or not temps:
        return not_applicable("temperature_range", "No temperature range is set for this standard.")
    low, high = rule.value("low"), rule.value("high")
    worst = max(temps, key=lambda t: max(low - t, t - high))
    limit = low if worst < low else high
    if all(low <= t <= high for t in temps):
        return judged(
            rule, PASS, worst, limit, f"All test temperatures lie within {low:g}–{high:g} °C."
        )
    return judged(
        rule,
        rule.failure,
        worst,
        limit,
        f"A test temperature of {worst:.1f} °C lies outside {low:g}–{high:g} °C.",
    )


def head_change(head_terms: Sequence[tuple[int, float]], rule: Rule | None) -> Check:
    """Head change of each falling-head interval against the reading resolution [-].

    Parameters
    ----------
    head_terms : sequence of (int, float)
        Trial number (from 1) and the head term of its relative uncertainty
        (:func:`service.engine.uncertainty.head_term`), for falling-head trials only.
    rule : Rule or None
        ``max_head_term``.

    Returns
    -------
    Check
        The largest head term against max_head_term (docs/methods.md §8.9).
    """
    if rule is None:
        return not_applicable("head_change", "No head-change rule is set for this standard.")
    if not head_terms:
        return not_applicable("head_change", "No falling-head interval.")
    limit = rule.value("max_head_term")
    worst_trial, worst = max(head_terms, key=lambda item: item[1])
    if worst <= limit:
        return judged(
            rule,
            PASS,
            worst,
            limit,
            f"Every head change is large enough for the reading resolution (head term at most "
            f"{pct(worst, 2)}, limit {pct(limit, 0)}).",
        )
    return judged(
        rule,
        rule.failure,
        worst,
        limit,
        f"In trial {worst_trial} the head changes so little that the head readings alone make "
        f"k uncertain by {pct(worst, 1)} (limit {pct(limit, 0)}): let the head fall further.",
    )


def darcy_linearity(
    k_change: float | None, spread: float | None, n_gradients: int, rule: Rule | None
) -> Check:
    """Departure from Darcy's law in a constant-head series at increasing gradient [-].

    Parameters
    ----------
    k_change : float or None
        k at the highest gradient over k at the lowest, minus 1.
    spread : float or None
        Largest |k_j/k̄ − 1| over the runs.
    n_gradients : int
        Number of distinct gradients.
    rule : Rule or None
        ``spread``, ``fall`` and ``gradients``.

    Returns
    -------
    Check
        Fail when the runs disagree by more than ``spread``; warn when k falls by more than
        ``fall`` as the gradient rises, or fewer than ``gradients`` gradients confirm the
        line (docs/methods.md §8.11).
    """
    if rule is None:
        return not_applicable("darcy_linearity", "No Darcy-linearity rule is set.")
    if k_change is None or spread is None or n_gradients < 2:
        return not_applicable(
            "darcy_linearity", "Needs constant-head runs at two or more gradients."
        )
    band, fall = rule.value("spread"), rule.value("fall")
    needed = round(rule.value("gradients"))
    if spread > band:
        return judged(
            rule,
            rule.failure,
            spread,
            band,
            f"k differs by up to {pct(spread, 1)} between gradients: flow is not Darcian over the "
            "range; use the runs on the linear part only.",
        )
    if k_change < -fall:
        return judged(
            rule,
            WARN,
            k_change,
            -fall,
            f"k falls by {pct(-k_change, 1)} from the lowest to the highest gradient: a sign of "
            "non-Darcy (non-laminar) flow.",
        )
    enough = n_gradients >= needed
    extra = (
        ""
        if enough
        else f" {_count(needed).capitalize()} gradients are needed to confirm linearity."
    )
    return judged(
        rule,
        PASS if enough else WARN,
        spread,
        band,
        f"k agrees within {pct(spread, 1)} over {_count(n_gradients)} gradients.{extra}",
    )
