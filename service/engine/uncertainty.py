"""Measurement uncertainty: propagation, Type A, degrees of freedom and coverage factor.

The model and its sources are in docs/methods.md §6: the law of propagation of uncertainty of
JCGM 100:2008 (GUM) §5.1.2, the Type A evaluation of §4.2, the Welch–Satterthwaite formula of
Annex G.4 and Student's t coverage factor of Annex G.3.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping, Sequence

COVERAGE_PROBABILITY = math.erf(2.0 / math.sqrt(2.0))
"""Coverage probability p = 95.45 % of the expanded uncertainty (k = 2 for a normal
distribution; GUM Table G.2 column 95.45, docs/methods.md §6.5)."""

LARGE_DEGREES_OF_FREEDOM = 100
"""Above this many degrees of freedom the t quantile comes from the Cornish–Fisher series."""


def standard_uncertainty_from_resolution(resolution: float) -> float:
    """Give the standard uncertainty of a reading limited by its resolution [same unit].

    Parameters
    ----------
    resolution : float
        Smallest step r the instrument shows [any unit].

    Returns
    -------
    float
        u = r/√12 (rectangular distribution of half-width r/2; GUM §4.3.7,
        docs/methods.md §6.6).
    """
    return resolution / math.sqrt(12.0)


def sensitivities(
    func: Callable[[Mapping[str, float]], float],
    values: Mapping[str, float],
    names: Sequence[str],
    uncertainties: Mapping[str, float] | None = None,
) -> dict[str, float]:
    """Partial derivatives ∂f/∂x_i by central differences.

    Parameters
    ----------
    func : callable
        y = f(x) taking a mapping of named inputs.
    values : mapping
        The point x at which to differentiate.
    names : sequence of str
        Inputs to differentiate with respect to.
    uncertainties : mapping, optional
        Used to size the step when an input is zero.

    Returns
    -------
    dict
        ∂f/∂x_i by name [unit of y per unit of x_i].

    Notes
    -----
    Step h_i = 1e-6·|x_i| (or 1e-3·u_i when x_i = 0); error O(h²). These are the sensitivity
    coefficients c_i of the law of propagation u_c²(y) = Σ (c_i·u(x_i))² (GUM §5.1.2 eq. 10;
    docs/methods.md §6.1).
    """
    out: dict[str, float] = {}
    base = dict(values)
    for name in names:
        x = base[name]
        h = 1e-6 * abs(x)
        if h == 0.0:
            h = 1e-3 * (uncertainties or {}).get(name, 1.0) or 1e-9
        up = dict(base)
        up[name] = x + h
        down = dict(base)
        down[name] = x - h
        out[name] = (func(up) - func(down)) / (2.0 * h)
    return out


def type_a_of_mean(values: Sequence[float]) -> float | None:
    """Experimental standard deviation of the mean s/√n [same unit].

    Parameters
    ----------
    values : sequence of float
        Independent determinations q_j.

    Returns
    -------
    float or None
        s(q̄) = s/√n with s² = Σ (q_j − q̄)²/(n − 1); None for fewer than two values.

    Notes
    -----
    GUM §4.2.2–4.2.3; its degrees of freedom are n − 1 (docs/methods.md §6.3).
    """
    n = len(values)
    if n < 2:
        return None
    mean = sum(values) / n
    s = math.sqrt(sum((v - mean) ** 2 for v in values) / (n - 1))
    return s / math.sqrt(n)


def head_term(head_1: float, head_2: float, u_1: float, u_2: float) -> float:
    """Relative uncertainty of a falling-head k from its two head readings [-].

    Parameters
    ----------
    head_1, head_2 : float
        Heads h1 > h2 at the start and end of the interval [m].
    u_1, u_2 : float
        Their standard uncertainties [m], taken as independent.

    Returns
    -------
    float
        √((u1/h1)² + (u2/h2)²) / ln(h1/h2), from ∂ln k/∂h1 = 1/(h1·ln(h1/h2)) and
        ∂ln k/∂h2 = −1/(h2·ln(h1/h2)) (docs/methods.md §6.4).
    """
    return math.hypot(u_1 / head_1, u_2 / head_2) / math.log(head_1 / head_2)


def regression_terms(
    times_s: Sequence[float],
    heads_m: Sequence[float],
    u_heads_m: Sequence[float | None],
    u_times_s: Sequence[float | None],
) -> tuple[float, float]:
    """Relative uncertainty of a regression k from the reading uncertainties [-].

    Parameters
    ----------
    times_s : sequence of float
        Reading times t_i [s].
    heads_m : sequence of float
        Heads h_i [m].
    u_heads_m, u_times_s : sequence of float or None
        Standard uncertainty of each head [m] and time [s]; None counts as zero.

    Returns
    -------
    (head, time) : tuple of float
        Relative contributions of the heads and of the times, each readings' terms
        combined in quadrature.

    Notes
    -----
    The least-squares slope b = Σ (t_i − t̄)(y_i − ȳ)/S_tt of y = ln h on t has
    ∂b/∂y_i = (t_i − t̄)/S_tt and ∂b/∂t_i = ((y_i − ȳ) − 2·b·(t_i − t̄))/S_tt; k ∝ −b,
    so ∂ln k/∂x = (∂b/∂x)/b with ∂y_i/∂h_i = 1/h_i (docs/methods.md §6.4).
    """
    n = len(times_s)
    ys = [math.log(h) for h in heads_m]
    t_mean = sum(times_s) / n
    y_mean = sum(ys) / n
    s_tt = sum((t - t_mean) ** 2 for t in times_s)
    slope = sum((t - t_mean) * (y - y_mean) for t, y in zip(times_s, ys, strict=True)) / s_tt
    head = 0.0
    time = 0.0
    for t, y, h, u_h, u_t in zip(times_s, ys, heads_m, u_heads_m, u_times_s, strict=True):
        if u_h:
            head += ((t - t_mean) / (s_tt * h * slope) * u_h) ** 2
        if u_t:
            time += (((y - y_mean) - 2.0 * slope * (t - t_mean)) / (s_tt * slope) * u_t) ** 2
    return math.sqrt(head), math.sqrt(time)


def welch_satterthwaite(components: Iterable[tuple[float, float]]) -> float:
    """Effective degrees of freedom of a combined standard uncertainty [-].

    Parameters
    ----------
    components : iterable of (u_i, ν_i)
        Each uncorrelated contribution u_i = |c_i|·u(x_i) [unit of y] with its degrees of
        freedom ν_i (``math.inf`` for a contribution known exactly enough).

    Returns
    -------
    float
        ν_eff = u_c⁴ / Σ (u_i⁴/ν_i), with u_c² = Σ u_i²; ``math.inf`` when no contribution
        with finite ν_i is above zero.

    Notes
    -----
    JCGM 100:2008 Annex G, eq. (G.2b) (docs/methods.md §6.5). Contributions are scaled by
    the largest one first so that their fourth powers cannot overflow.
    """
    items = [(abs(u), nu) for u, nu in components]
    scale = max((u for u, _ in items), default=0.0)
    if scale == 0.0:
        return math.inf
    combined = sum((u / scale) ** 2 for u, _ in items)
    denominator = sum((u / scale) ** 4 / nu for u, nu in items if math.isfinite(nu) and u > 0)
    if denominator == 0.0:
        return math.inf
    return combined**2 / denominator


def student_t_probability(t: float, nu: int) -> float:
    """Probability that |T| ≤ t for Student's t with ν degrees of freedom [-].

    Parameters
    ----------
    t : float
        Bound, t ≥ 0.
    nu : int
        Degrees of freedom, ν ≥ 1.

    Returns
    -------
    float
        A(t|ν) from the finite series of Abramowitz & Stegun (1964) 26.7.3 (ν odd) and
        26.7.4 (ν even), with θ = arctan(t/√ν) (docs/methods.md §6.5).
    """
    theta = math.atan(t / math.sqrt(nu))
    sin, cos = math.sin(theta), math.cos(theta)
    cos2 = cos * cos
    if nu % 2 == 1:
        if nu == 1:
            return 2.0 * theta / math.pi
        term = cos
        total = cos
        for j in range(1, (nu - 3) // 2 + 1):
            term *= cos2 * (2 * j) / (2 * j + 1)
            total += term
        return 2.0 / math.pi * (theta + sin * total)
    term = 1.0
    total = 1.0
    for j in range(1, (nu - 2) // 2 + 1):
        term *= cos2 * (2 * j - 1) / (2 * j)
        total += term
    return sin * total


def normal_quantile(p: float) -> float:
    """Two-sided quantile z of the standard normal distribution: P(|Z| ≤ z) = p [-].

    Parameters
    ----------
    p : float
        Coverage probability, 0 < p < 1.

    Returns
    -------
    float
        z with erf(z/√2) = p, by bisection (docs/methods.md §6.5).
    """
    low, high = 0.0, 40.0
    for _ in range(200):
        middle = 0.5 * (low + high)
        if math.erf(middle / math.sqrt(2.0)) < p:
            low = middle
        else:
            high = middle
    return round(0.5 * (low + high), 12)


def student_t_quantile(p: float, nu: int) -> float:
    """Two-sided quantile t_p(ν) of Student's t: P(|T| ≤ t_p) = p [-].

    Parameters
    ----------
    p : float
        Coverage probability, 0 < p < 1.
    nu : int
        Degrees of freedom, ν ≥ 1.

    Returns
    -------
    float
        t_p(ν): for ν ≤ 100 by bisection on :func:`student_t_probability`; above, by the
        Cornish–Fisher series of Abramowitz & Stegun (1964) 26.7.5 about the normal quantile
        (docs/methods.md §6.5; GUM Table G.2 gives the printed values).
    """
    if nu > LARGE_DEGREES_OF_FREEDOM:
        x = normal_quantile(p)
        g1 = (x**3 + x) / 4.0
        g2 = (5 * x**5 + 16 * x**3 + 3 * x) / 96.0
        g3 = (3 * x**7 + 19 * x**5 + 17 * x**3 - 15 * x) / 384.0
        g4 = (79 * x**9 + 776 * x**7 + 1482 * x**5 - 1920 * x**3 - 945 * x) / 92160.0
        return x + g1 / nu + g2 / nu**2 + g3 / nu**3 + g4 / nu**4
    low, high = 0.0, math.pi / 2.0
    for _ in range(200):
        middle = 0.5 * (low + high)
        if student_t_probability(math.sqrt(nu) * math.tan(middle), nu) < p:
            low = middle
        else:
            high = middle
    return math.sqrt(nu) * math.tan(0.5 * (low + high))


def coverage_factor(effective_degrees_of_freedom: float, p: float = COVERAGE_PROBABILITY) -> float:
    """Coverage factor k_p for a combined uncertainty with ν_eff degrees of freedom [-].

    Parameters
    ----------
    effective_degrees_of_freedom : float
        ν_eff from :func:`welch_satterthwaite` (``math.inf`` allowed).
    p : float
        Coverage probability, 95.45 % by default.

    Returns
    -------
    float
        t_p(ν) with ν = ν_eff truncated to the next lower integer (GUM G.4.1); the normal
        quantile (2.000 at 95.45 %) when ν_eff is infinite (docs/methods.md §6.5).
    """
    if not math.isfinite(effective_degrees_of_freedom):
        return normal_quantile(p)
    return student_t_quantile(p, max(1, math.floor(effective_degrees_of_freedom)))
