"""First-order propagation of standard uncertainties (GUM, JCGM 100:2008)."""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence

COVERAGE_FACTOR = 2.0
"""Coverage factor k_p for the expanded uncertainty (about 95 %; GUM §6, memory)."""


def standard_uncertainty_from_resolution(resolution: float) -> float:
    """Standard uncertainty of a reading limited by its resolution [same unit].

    Notes
    -----
    u = r/√12 (rectangular distribution of half-width r/2; GUM §4.3.7, memory).
    """
    return resolution / math.sqrt(12.0)


def relative_from_power_law(terms: Sequence[tuple[float, float, float]]) -> float:
    """Relative combined standard uncertainty of y = c·Π x_i^p_i [-].

    Parameters
    ----------
    terms : sequence of (x, u, p)
        Value x_i, standard uncertainty u(x_i) and exponent p_i.

    Notes
    -----
    (u_c/y)² = Σ (p_i·u(x_i)/x_i)² for uncorrelated inputs (GUM §5.1.6 eq. 12, memory).
    """
    return math.sqrt(sum((p * u / x) ** 2 for x, u, p in terms))


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

    Notes
    -----
    Step h_i = 1e-6·|x_i| (or 1e-3·u_i when x_i = 0); error O(h²), far below any
    tolerance in the reference. The derivative is that of the GUM law of propagation
    u_c²(y) = Σ (∂f/∂x_i)²·u²(x_i) (GUM §5.1.2 eq. 10, memory).
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


def combine(contributions: Mapping[str, float]) -> float:
    """Root sum of squares of independent contributions [same unit]."""
    return math.sqrt(sum(c * c for c in contributions.values()))


def type_a_of_mean(values: Sequence[float]) -> float | None:
    """Standard deviation of the mean s/√n [same unit]; None for fewer than two values.

    Notes
    -----
    GUM §4.2.3 (memory); domain-reference §8.5.
    """
    n = len(values)
    if n < 2:
        return None
    mean = sum(values) / n
    s = math.sqrt(sum((v - mean) ** 2 for v in values) / (n - 1))
    return s / math.sqrt(n)
