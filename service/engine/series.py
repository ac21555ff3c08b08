"""Compaction series of a liner material: k₂₀ against water content and dry density.

Several specimens of one material compacted at different water contents and densities are
placed on the compaction plane (w, ρ_d) with the compaction curve, the zero-air-voids line
and the line of optimums; each is classed against the specification limit, and the
acceptable zone is drawn from the specimens that met it (after Daniel & Benson 1990).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from service.engine.errors import EngineInputError, InputProblem
from service.engine.phase import phase_relations


@dataclass(frozen=True, slots=True)
class CompactionPoint:
    """A point of the compaction plane: water content w [-] and dry density ρ_d [kg/m³]."""

    water_content: float
    dry_density_kg_per_m3: float


@dataclass(frozen=True, slots=True)
class CompactionCurve:
    """Parabola ρ_d = c0 + c1·w + c2·w² fitted to compaction-test points near the peak.

    Attributes
    ----------
    optimum_water_content : float
        w_opt at the vertex [-].
    max_dry_density_kg_per_m3 : float
        ρ_d,max at the vertex [kg/m³].
    coefficients : tuple of float
        (c0, c1, c2) [kg/m³, kg/m³, kg/m³].
    points_used : tuple of int
        Indexes of the points the parabola was fitted to.
    """

    optimum_water_content: float
    max_dry_density_kg_per_m3: float
    coefficients: tuple[float, float, float]
    points_used: tuple[int, ...]

    def dry_density_at(self, water_content: float) -> float:
        """ρ_d on the fitted curve at ``water_content`` [kg/m³]."""
        c0, c1, c2 = self.coefficients
        return c0 + c1 * water_content + c2 * water_content * water_content


def compaction_curve(points: Sequence[CompactionPoint]) -> CompactionCurve:
    """Optimum water content and maximum dry density from compaction-test points.

    Parameters
    ----------
    points : sequence of CompactionPoint
        At least three points with different water contents, in any order.

    Notes
    -----
    A second-degree polynomial by least squares through the highest point and up to two
    neighbours on each side (by water content); the vertex gives w_opt = −c1/(2·c2) and
    ρ_d,max = c0 − c1²/(4·c2). ASTM D698 / D1557 ask for a smooth curve through points on
    both sides of the optimum (from memory); the parabola near the peak is common practice,
    no source.

    Raises
    ------
    EngineInputError
        Fewer than three distinct water contents, or points that do not show a peak inside
        the range tested.
    """
    order = sorted(range(len(points)), key=lambda j: points[j].water_content)
    distinct = {round(points[j].water_content, 9) for j in order}
    if len(distinct) < 3:
        raise EngineInputError.single(
            ("compaction_points",),
            len(points),
            "at least three compaction points at different water contents",
            "too few points for a compaction curve",
            "too_few",
        )
    top = max(range(len(order)), key=lambda i: points[order[i]].dry_density_kg_per_m3)
    lo, hi = max(0, top - 2), min(len(order), top + 3)
    while hi - lo < 3:  # the peak at one end: widen on the other side
        lo, hi = max(0, lo - 1), min(len(order), hi + 1)
    used = tuple(order[lo:hi])
    ws = np.array([points[j].water_content for j in used])
    rhos = np.array([points[j].dry_density_kg_per_m3 for j in used])
    c2, c1, c0 = (float(c) for c in np.polyfit(ws, rhos, 2))
    w_min = points[order[0]].water_content
    w_max = points[order[-1]].water_content
    w_opt = -c1 / (2.0 * c2) if c2 < 0.0 else float("nan")
    if not (c2 < 0.0 and w_min < w_opt < w_max):
        raise EngineInputError.single(
            ("compaction_points",),
            len(points),
            "points on both sides of the optimum: dry density rising, then falling, with "
            "water content",
            "show no peak inside the range of water contents tested",
            "no_optimum",
        )
    return CompactionCurve(w_opt, c0 - c1 * c1 / (4.0 * c2), (c0, c1, c2), used)


def saturation_line_dry_density(
    water_content: float,
    *,
    specific_gravity: float,
    water_density_kg_per_m3: float,
    saturation: float = 1.0,
) -> float:
    """Dry density at a water content and degree of saturation [kg/m³].

    Parameters
    ----------
    water_content : float
        w [-].
    specific_gravity : float
        G_s [-].
    water_density_kg_per_m3 : float
        ρ_w [kg/m³].
    saturation : float
        S [-]; 1 gives the zero-air-voids line.

    Notes
    -----
    ρ_d = G_s·ρ_w/(1 + w·G_s/S), from S·e = w·G_s and ρ_d = G_s·ρ_w/(1 + e); with S = 1 the
    zero-air-voids line ρ_d = G_s·ρ_w/(1 + w·G_s). Source: Das, Principles of Geotechnical
    Engineering, compaction chapter (from memory); a standard phase identity.
    """
    return (
        specific_gravity
        * water_density_kg_per_m3
        / (1.0 + water_content * specific_gravity / saturation)
    )


def saturation_line(
    water_contents: Sequence[float],
    *,
    specific_gravity: float,
    water_density_kg_per_m3: float,
    saturation: float = 1.0,
) -> tuple[CompactionPoint, ...]:
    """Points of a line of constant saturation for a plot; S = 1 is the zero-air-voids line.

    See :func:`saturation_line_dry_density` for the equation and source.
    """
    return tuple(
        CompactionPoint(
            w,
            saturation_line_dry_density(
                w,
                specific_gravity=specific_gravity,
                water_density_kg_per_m3=water_density_kg_per_m3,
                saturation=saturation,
            ),
        )
        for w in water_contents
    )


def degree_of_saturation(
    point: CompactionPoint, *, specific_gravity: float, water_density_kg_per_m3: float
) -> float:
    """Degree of saturation S of a point of the compaction plane [-].

    Notes
    -----
    e = G_s·ρ_w/ρ_d − 1, S = w·G_s/e, by :func:`service.engine.phase.phase_relations` on a
    unit volume (docs/methods.md §5).

    Raises
    ------
    EngineInputError
        When ρ_d is not below G_s·ρ_w.
    """
    try:
        phase = phase_relations(
            area_m2=1.0,
            length_m=1.0,
            wet_mass_kg=point.dry_density_kg_per_m3 * (1.0 + point.water_content),
            water_content=point.water_content,
            specific_gravity=specific_gravity,
            max_dry_density_kg_per_m3=None,
            void_ratio=None,
            water_density_kg_per_m3=water_density_kg_per_m3,
        )
    except ValueError as exc:
        raise EngineInputError.single(
            ("dry_density",),
            point.dry_density_kg_per_m3,
            "a dry density below G_s·ρ_w",
            str(exc),
            "impossible_test",
        ) from None
    assert phase.degree_of_saturation is not None  # all inputs given
    return phase.degree_of_saturation


@dataclass(frozen=True, slots=True)
class LineOfOptimums:
    """Locus of the optimum points of compaction curves at different efforts.

    Attributes
    ----------
    saturation : float
        Mean degree of saturation of the optimum points [-].
    intercept_kg_per_m3, slope_kg_per_m3 : float or None
        ρ_d = intercept + slope·w through two or more optima; None with one optimum, when
        the line is taken as the constant-saturation line through it.
    """

    saturation: float
    intercept_kg_per_m3: float | None
    slope_kg_per_m3: float | None

    def water_content_at(
        self,
        dry_density_kg_per_m3: float,
        *,
        specific_gravity: float,
        water_density_kg_per_m3: float,
    ) -> float:
        """Water content of the line at a dry density [-]."""
        if self.slope_kg_per_m3 is not None and self.intercept_kg_per_m3 is not None:
            return (dry_density_kg_per_m3 - self.intercept_kg_per_m3) / self.slope_kg_per_m3
        return self.saturation * (
            water_density_kg_per_m3 / dry_density_kg_per_m3 - 1.0 / specific_gravity
        )


def line_of_optimums(
    optima: Sequence[CompactionPoint], *, specific_gravity: float, water_density_kg_per_m3: float
) -> LineOfOptimums:
    """Line of optimums from the optimum points of one or more compaction curves.

    Parameters
    ----------
    optima : sequence of CompactionPoint
        (w_opt, ρ_d,max) of each compactive effort.
    specific_gravity : float
        G_s [-].
    water_density_kg_per_m3 : float
        ρ_w [kg/m³].

    Notes
    -----
    Two or more optima: least-squares line ρ_d = a + b·w. One optimum: the line of constant
    saturation through it, w = S_opt·(ρ_w/ρ_d − 1/G_s), since the line of optimums runs
    roughly parallel to the zero-air-voids line at the optimum's saturation. Source: the
    term and its use as in Daniel & Benson (1990) and Benson, Daniel & Boutwell (1999),
    J. Geotech. Geoenviron. Eng. 125(5) (from memory); the one-optimum rule is common
    practice, no source.
    """
    if not optima:
        raise EngineInputError.single(
            ("optima",), 0, "at least one optimum point", "no optimum given", "too_few"
        )
    sats = [
        degree_of_saturation(
            p, specific_gravity=specific_gravity, water_density_kg_per_m3=water_density_kg_per_m3
        )
        for p in optima
    ]
    mean_s = sum(sats) / len(sats)
    if len({round(p.water_content, 9) for p in optima}) < 2:
        return LineOfOptimums(mean_s, None, None)
    slope, intercept = (
        float(c)
        for c in np.polyfit(
            [p.water_content for p in optima], [p.dry_density_kg_per_m3 for p in optima], 1
        )
    )
    return LineOfOptimums(mean_s, intercept, slope)


@dataclass(frozen=True, slots=True)
class SeriesSpecimen:
    """One specimen of the series: compaction state and measured k at 20 °C."""

    label: str
    water_content: float
    dry_density_kg_per_m3: float
    k_ref_m_per_s: float


@dataclass(frozen=True, slots=True)
class ClassifiedSpecimen:
    """A specimen placed against the limit and the compaction references.

    Attributes
    ----------
    specimen : SeriesSpecimen
    degree_of_saturation : float
        S [-].
    meets_limit : bool
        k_ref ≤ k_max.
    above_min_saturation : bool or None
        S ≥ the project's minimum, None without one.
    acceptable : bool
        Meets the limit (and the minimum saturation when one is set).
    water_content_from_optimum : float or None
        w − w_opt of the compaction curve [-].
    relative_compaction_pct : float or None
        100·ρ_d/ρ_d,max [%].
    water_content_from_line_of_optimums : float or None
        w minus the line of optimums' w at the same ρ_d [-]; positive is wet of it.
    """

    specimen: SeriesSpecimen
    degree_of_saturation: float
    meets_limit: bool
    above_min_saturation: bool | None
    acceptable: bool
    water_content_from_optimum: float | None
    relative_compaction_pct: float | None
    water_content_from_line_of_optimums: float | None


def classify_specimens(
    specimens: Sequence[SeriesSpecimen],
    *,
    k_max_m_per_s: float,
    specific_gravity: float,
    water_density_kg_per_m3: float,
    min_saturation: float | None = None,
    curve: CompactionCurve | None = None,
    optimums: LineOfOptimums | None = None,
) -> tuple[ClassifiedSpecimen, ...]:
    """Class each specimen of a series against the specification limit.

    Parameters
    ----------
    specimens : sequence of SeriesSpecimen
        The series.
    k_max_m_per_s : float
        Specification limit on k₂₀ [m/s].
    specific_gravity : float
        G_s [-].
    water_density_kg_per_m3 : float
        ρ_w [kg/m³].
    min_saturation : float or None
        Minimum degree of saturation the project sets for the zone [-].
    curve : CompactionCurve or None
        The material's compaction curve, for w − w_opt and relative compaction.
    optimums : LineOfOptimums or None
        For the position relative to the line of optimums.

    Notes
    -----
    Acceptable: k₂₀ ≤ k_max (and S ≥ S_min when set). Source: the acceptable-zone approach
    for compacted soil liners of Daniel, D.E. & Benson, C.H. (1990), "Water content–density
    criteria for compacted soil liners", J. Geotech. Eng. 116(12):1811–1830 (from memory);
    S from the phase relations; RC = 100·ρ_d/ρ_d,max (docs/methods.md §5).
    """
    problems: list[InputProblem] = []
    out: list[ClassifiedSpecimen] = []
    for j, s in enumerate(specimens):
        point = CompactionPoint(s.water_content, s.dry_density_kg_per_m3)
        try:
            sat = degree_of_saturation(
                point,
                specific_gravity=specific_gravity,
                water_density_kg_per_m3=water_density_kg_per_m3,
            )
        except EngineInputError as exc:
            problems.extend(exc.prefixed("specimens", j).problems)
            continue
        meets = s.k_ref_m_per_s <= k_max_m_per_s
        above = None if min_saturation is None else sat >= min_saturation
        from_line = None
        if optimums is not None:
            from_line = s.water_content - optimums.water_content_at(
                s.dry_density_kg_per_m3,
                specific_gravity=specific_gravity,
                water_density_kg_per_m3=water_density_kg_per_m3,
            )
        out.append(
            ClassifiedSpecimen(
                specimen=s,
                degree_of_saturation=sat,
                meets_limit=meets,
                above_min_saturation=above,
                acceptable=meets and above is not False,
                water_content_from_optimum=(
                    s.water_content - curve.optimum_water_content if curve else None
                ),
                relative_compaction_pct=(
                    100.0 * s.dry_density_kg_per_m3 / curve.max_dry_density_kg_per_m3
                    if curve
                    else None
                ),
                water_content_from_line_of_optimums=from_line,
            )
        )
    if problems:
        raise EngineInputError(problems)
    return tuple(out)


@dataclass(frozen=True, slots=True)
class AcceptableZone:
    """The acceptable zone drawn from the data.

    Attributes
    ----------
    hull : tuple of CompactionPoint
        Convex hull of the acceptable specimens, counter-clockwise (fewer than three
        points when fewer specimens are acceptable).
    conflicts : tuple of int
        Indexes of specimens that are not acceptable yet lie inside or on the hull: the
        zone must then be drawn by judgement, not from the hull.
    saturation_bound : float or None
        Lowest degree of saturation of an acceptable specimen such that every specimen at
        or above it is acceptable [-]; None when no such specimen exists.
    acceptable_below_bound : tuple of int
        Acceptable specimens below ``saturation_bound`` (outside the saturation zone).
    """

    hull: tuple[CompactionPoint, ...]
    conflicts: tuple[int, ...]
    saturation_bound: float | None
    acceptable_below_bound: tuple[int, ...]


def _cross(o: tuple[float, float], a: tuple[float, float], b: tuple[float, float]) -> float:
    return (a[0] - o[0]) * (b[1] - o[1]) - (a[1] - o[1]) * (b[0] - o[0])


def _hull(points: list[tuple[float, float]]) -> list[int]:
    """Indexes of the convex hull, counter-clockwise (Andrew's monotone chain)."""
    order = sorted(range(len(points)), key=lambda j: points[j])
    if len(order) < 3:
        return order
    lower: list[int] = []
    for j in order:
        while len(lower) >= 2 and _cross(points[lower[-2]], points[lower[-1]], points[j]) <= 0:
            lower.pop()
        lower.append(j)
    upper: list[int] = []
    for j in reversed(order):
        while len(upper) >= 2 and _cross(points[upper[-2]], points[upper[-1]], points[j]) <= 0:
            upper.pop()
        upper.append(j)
    return lower[:-1] + upper[:-1]


def acceptable_zone(classified: Sequence[ClassifiedSpecimen]) -> AcceptableZone:
    """Draw the acceptable zone of the compaction plane from the classed specimens.

    Parameters
    ----------
    classified : sequence of ClassifiedSpecimen
        From :func:`classify_specimens`.

    Notes
    -----
    Two constructions, both from the data only:

    * the convex hull of the acceptable specimens (Andrew's monotone chain) — the smallest
      convex region enclosing them, in the spirit of Daniel & Benson (1990), who draw the
      zone to enclose the specimens that met the limit (from memory); an unacceptable
      specimen inside it is reported as a conflict;
    * a saturation bound: the zone S ≥ S_b up to the zero-air-voids line, S_b being the
      lowest saturation of an acceptable specimen above which no specimen failed. k of a
      compacted clay falls as the moulding saturation rises past the line of optimums
      (Benson et al. 1999, from memory); the construction itself is common practice, no
      source.

    Hull and bound are computed on coordinates scaled to the data's ranges so the
    tolerance of 'on the hull' does not depend on units.
    """
    if not classified:
        return AcceptableZone((), (), None, ())
    ws = [c.specimen.water_content for c in classified]
    rs = [c.specimen.dry_density_kg_per_m3 for c in classified]
    w_span = (max(ws) - min(ws)) or 1.0
    r_span = (max(rs) - min(rs)) or 1.0
    scaled = [((w - min(ws)) / w_span, (r - min(rs)) / r_span) for w, r in zip(ws, rs, strict=True)]
    good = [j for j, c in enumerate(classified) if c.acceptable]
    hull_local = _hull([scaled[j] for j in good])
    hull = [good[i] for i in hull_local]
    conflicts: list[int] = []
    if len(hull) >= 3:
        for j, c in enumerate(classified):
            if c.acceptable:
                continue
            p = scaled[j]
            edges = zip(hull, hull[1:] + hull[:1], strict=True)
            if all(_cross(scaled[a], scaled[b], p) >= -1e-9 for a, b in edges):
                conflicts.append(j)
    sats = [c.degree_of_saturation for c in classified]
    failing = [sats[j] for j, c in enumerate(classified) if not c.acceptable]
    ceiling = max(failing) if failing else float("-inf")
    above = [sats[j] for j in good if sats[j] > ceiling]
    bound = min(above) if above else None
    below = tuple(j for j in good if bound is None or sats[j] < bound)
    return AcceptableZone(
        hull=tuple(CompactionPoint(classified[j].specimen.water_content, rs[j]) for j in hull),
        conflicts=tuple(conflicts),
        saturation_bound=bound,
        acceptable_below_bound=below,
    )
