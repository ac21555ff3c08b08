"""The door to the engine's compaction-series module (docs/methods.md §14.7)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from service.engine import (
    EngineInputError,
)
from service.engine import series as compaction

# --- compaction series ------------------------------------------------------------------------
# The engine's compaction-series module (docs/methods.md §14.7) for service/series.

SeriesPoint = compaction.CompactionPoint
SeriesSpecimen = compaction.SeriesSpecimen
# ρ_w of the compaction plane's phase relations, 1000 kg/m³ by convention (common practice,
# no source; the lab's compaction test reports dry density with the same convention).
SERIES_WATER_DENSITY_KG_PER_M3 = 1000.0
_PLANE_POINTS = 41  # points of each drawn line of the compaction plane


@dataclass(frozen=True)
class SeriesAnalysis:
    """A compaction series classed against its limit, with what its plots draw.

    Attributes
    ----------
    classified : tuple of ClassifiedSpecimen
        Each specimen with a k result, in the order given (empty without a limit).
    saturations : tuple of float
        S [-] of every specimen given, in order.
    zone : AcceptableZone or None
        The acceptable zone drawn from the data; None without a limit.
    curve : CompactionCurve or None
        The compaction curve fitted to the curve points; None when none fits.
    curve_problem : str
        Why no curve was fitted from the points given ("" when fitted or none given).
    zero_air_voids, min_saturation_line, zone_saturation_line : tuple of SeriesPoint
        Lines of the compaction plane over the water contents drawn (the last two empty when
        there is no minimum saturation or no saturation bound).
    zone_outline : tuple of SeriesPoint
        The hull of the acceptable zone with each edge cut into steps and held at or below
        the zero-air-voids line (docs/methods.md §14.7: plots clip the hull there); empty
        when the hull has fewer than three corners.
    """

    classified: tuple[compaction.ClassifiedSpecimen, ...]
    saturations: tuple[float, ...]
    zone: compaction.AcceptableZone | None
    curve: compaction.CompactionCurve | None
    curve_problem: str
    zero_air_voids: tuple[compaction.CompactionPoint, ...]
    min_saturation_line: tuple[compaction.CompactionPoint, ...] = ()
    zone_saturation_line: tuple[compaction.CompactionPoint, ...] = ()
    zone_outline: tuple[compaction.CompactionPoint, ...] = ()


def _outline(
    hull: Sequence[compaction.CompactionPoint], specific_gravity: float, steps: int = 12
) -> tuple[compaction.CompactionPoint, ...]:
    if len(hull) < 3:
        return ()
    out = []
    for a, b in zip(hull, (*hull[1:], hull[0]), strict=True):
        for j in range(steps):
            t = j / steps
            w = a.water_content + t * (b.water_content - a.water_content)
            rho = a.dry_density_kg_per_m3 + t * (b.dry_density_kg_per_m3 - a.dry_density_kg_per_m3)
            ceiling = compaction.saturation_line_dry_density(
                w,
                specific_gravity=specific_gravity,
                water_density_kg_per_m3=SERIES_WATER_DENSITY_KG_PER_M3,
            )
            out.append(compaction.CompactionPoint(w, min(rho, ceiling)))
    return tuple(out)


def saturation_of(
    water_content: float, dry_density_kg_per_m3: float, specific_gravity: float
) -> float:
    """Degree of saturation [-] of a moulding state (docs/methods.md §14.7).

    Raises
    ------
    ValueError
        With the engine's reason, when ρ_d is not below G_s·ρ_w.
    """
    try:
        return compaction.degree_of_saturation(
            compaction.CompactionPoint(water_content, dry_density_kg_per_m3),
            specific_gravity=specific_gravity,
            water_density_kg_per_m3=SERIES_WATER_DENSITY_KG_PER_M3,
        )
    except EngineInputError as exc:
        raise ValueError(exc.problems[0].reason) from None


def _plane_range(ws: Sequence[float]) -> list[float]:
    lo, hi = min(ws), max(ws)
    pad = max((hi - lo) * 0.15, 0.01)
    lo, hi = max(lo - pad, 0.0), hi + pad
    return [lo + (hi - lo) * j / (_PLANE_POINTS - 1) for j in range(_PLANE_POINTS)]


def analyse_series(
    specimens: Sequence[compaction.SeriesSpecimen],
    moulding: Sequence[compaction.CompactionPoint],
    *,
    k_max_m_per_s: float | None,
    specific_gravity: float,
    min_saturation: float | None = None,
    curve_points: Sequence[compaction.CompactionPoint] = (),
) -> SeriesAnalysis:
    """Class a series (Daniel & Benson 1990, docs/methods.md §14.7) and gather its lines.

    `specimens` are the members with a k result; `moulding` every member's moulding state
    (for the saturations and the range drawn). Moulding states must lie below G_s·ρ_w (the
    service refuses others when they are typed).
    """
    rho_w = SERIES_WATER_DENSITY_KG_PER_M3
    curve, curve_problem = None, ""
    if curve_points:
        try:
            curve = compaction.compaction_curve(curve_points)
        except EngineInputError as exc:
            curve_problem = exc.problems[0].reason
    saturations = tuple(
        saturation_of(p.water_content, p.dry_density_kg_per_m3, specific_gravity) for p in moulding
    )
    classified: tuple[compaction.ClassifiedSpecimen, ...] = ()
    zone = None
    if k_max_m_per_s is not None:
        classified = compaction.classify_specimens(
            specimens,
            k_max_m_per_s=k_max_m_per_s,
            specific_gravity=specific_gravity,
            water_density_kg_per_m3=rho_w,
            min_saturation=min_saturation,
            curve=curve,
        )
        zone = compaction.acceptable_zone(classified)
    ws = [p.water_content for p in (*moulding, *curve_points)] or [0.1, 0.3]
    drawn = _plane_range(ws)

    def line(saturation: float | None) -> tuple[compaction.CompactionPoint, ...]:
        if saturation is None:
            return ()
        return compaction.saturation_line(
            drawn,
            specific_gravity=specific_gravity,
            water_density_kg_per_m3=rho_w,
            saturation=saturation,
        )

    return SeriesAnalysis(
        classified=classified,
        saturations=saturations,
        zone=zone,
        curve=curve,
        curve_problem=curve_problem,
        zero_air_voids=line(1.0),
        min_saturation_line=line(min_saturation),
        zone_saturation_line=line(zone.saturation_bound if zone else None),
        zone_outline=_outline(zone.hull, specific_gravity) if zone else (),
    )
