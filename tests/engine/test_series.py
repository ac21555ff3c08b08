"""Compaction series: zero-air-voids and saturation lines, compaction curve, line of optimums,
classification against the specification limit and the acceptable zone.

Sources: the zero-air-voids identity ρ_d = G_s·ρ_w/(1 + w·G_s) (Das, Principles of
Geotechnical Engineering, compaction chapter — from memory; values below worked by hand);
CV6 of /work/shared/reference/domain-reference.md §10; the acceptable-zone approach of
Daniel & Benson (1990), J. Geotech. Eng. 116(12) (from memory), with an invented series
whose classification is worked by hand.
"""

from __future__ import annotations

import pytest

from service.engine.errors import EngineInputError
from service.engine.series import (
    CompactionPoint,
    SeriesSpecimen,
    acceptable_zone,
    classify_specimens,
    compaction_curve,
    degree_of_saturation,
    line_of_optimums,
    saturation_line,
    saturation_line_dry_density,
)

GS, RHO_W = 2.70, 1000.0
K_MAX = 1e-9


@pytest.mark.parametrize(
    ("w", "rho_d"),
    [
        # by hand: 2700/(1 + w·2.70)
        (0.10, 2125.98),  # 2700/1.27
        (0.15, 1921.71),  # 2700/1.405
        (0.20, 1753.25),  # 2700/1.54
        (0.30, 1491.71),  # 2700/1.81
    ],
)
def test_zero_air_voids_line(w, rho_d):
    got = saturation_line_dry_density(w, specific_gravity=GS, water_density_kg_per_m3=RHO_W)
    assert got == pytest.approx(rho_d, abs=0.01)


def test_line_of_80_percent_saturation():
    # ρ_d = G_s·ρ_w/(1 + w·G_s/S) (Das, from memory): w = 0.20, S = 0.8:
    # 2700/(1 + 0.54/0.8) = 2700/1.675 = 1611.94 kg/m³
    (point,) = saturation_line(
        [0.20], specific_gravity=GS, water_density_kg_per_m3=RHO_W, saturation=0.8
    )
    assert point.dry_density_kg_per_m3 == pytest.approx(1611.94, abs=0.01)


def test_degree_of_saturation_of_cv6():
    # domain-reference CV6: w = 22.4 %, ρ_d = 1.5742 g/cm³, G_s = 2.72, ρ_w = 1000 -> S = 0.837
    s = degree_of_saturation(
        CompactionPoint(0.224, 1574.2), specific_gravity=2.72, water_density_kg_per_m3=1000.0
    )
    assert s == pytest.approx(0.837, rel=1e-3)


def test_points_on_the_zero_air_voids_line_are_saturated():
    # by hand at w = 0.20: ρ_d = 1753.25 -> e = 2.70/1.75325 − 1 = 0.5400, S = 0.54/0.54 = 1
    s = degree_of_saturation(
        CompactionPoint(0.20, 2700 / 1.54), specific_gravity=GS, water_density_kg_per_m3=RHO_W
    )
    assert s == pytest.approx(1.0, abs=1e-12)


def parabola(w: float) -> float:
    """ρ_d = 1800 − 8000·(w − 0.15)² kg/m³: w_opt = 0.15, ρ_d,max = 1800 exactly."""
    return 1800.0 - 8000.0 * (w - 0.15) ** 2


def test_compaction_curve_finds_the_vertex():
    # Points on the parabola above (by hand: 0.11 -> 1787.2, 0.13 -> 1796.8, 0.17 -> 1796.8,
    # 0.19 -> 1787.2, 0.23 -> 1748.8), given out of order
    ws = [0.19, 0.11, 0.23, 0.15, 0.13, 0.17]
    curve = compaction_curve([CompactionPoint(w, parabola(w)) for w in ws])
    assert curve.optimum_water_content == pytest.approx(0.15, abs=1e-9)
    assert curve.max_dry_density_kg_per_m3 == pytest.approx(1800.0, abs=1e-6)
    assert len(curve.points_used) == 5  # the peak and two neighbours each side
    assert 2 not in curve.points_used  # w = 0.23 is the sixth, farthest point
    assert curve.dry_density_at(0.11) == pytest.approx(1787.2, abs=1e-6)


def test_compaction_curve_refuses_points_without_a_peak():
    points = [CompactionPoint(w, 1600 + 1000 * w) for w in (0.10, 0.12, 0.14)]
    with pytest.raises(EngineInputError) as info:
        compaction_curve(points)
    assert info.value.kind == "no_optimum"


def test_compaction_curve_needs_three_water_contents():
    with pytest.raises(EngineInputError) as info:
        compaction_curve([CompactionPoint(0.1, 1700.0), CompactionPoint(0.1, 1710.0)])
    assert info.value.kind == "too_few"


def test_line_of_optimums_through_two_optima():
    # Standard effort (0.15, 1800), modified effort (0.12, 1900): slope = −100/0.03
    # = −3333.3 kg/m³ per unit w, intercept 1800 + 3333.3 × 0.15 = 2300 kg/m³ (by hand)
    line = line_of_optimums(
        [CompactionPoint(0.15, 1800.0), CompactionPoint(0.12, 1900.0)],
        specific_gravity=GS,
        water_density_kg_per_m3=RHO_W,
    )
    assert line.slope_kg_per_m3 == pytest.approx(-3333.33, abs=0.01)
    assert line.intercept_kg_per_m3 == pytest.approx(2300.0, abs=0.01)
    assert line.water_content_at(1850.0, specific_gravity=GS, water_density_kg_per_m3=RHO_W) == (
        pytest.approx(0.135, abs=1e-9)
    )


def test_line_of_optimums_from_one_optimum_keeps_its_saturation():
    # One optimum (0.15, 1800): S = 0.15·2.70·1800/(2700 − 1800) = 0.81 (by hand); the line
    # is S = 0.81: at ρ_d = 1700, w = 0.81·(1000/1700 − 1/2.70) = 0.81 × 0.217865 = 0.17647
    line = line_of_optimums(
        [CompactionPoint(0.15, 1800.0)], specific_gravity=GS, water_density_kg_per_m3=RHO_W
    )
    assert line.saturation == pytest.approx(0.81, abs=1e-12)
    assert line.slope_kg_per_m3 is None
    w = line.water_content_at(1700.0, specific_gravity=GS, water_density_kg_per_m3=RHO_W)
    assert w == pytest.approx(0.17647, abs=1e-5)


# --- classification and the acceptable zone ------------------------------------------------
# An invented series (G_s = 2.70, ρ_w = 1000, limit 1e-9 m/s). S by hand from
# S = w·G_s·ρ_d/(G_s·ρ_w − ρ_d):
#   A (0.12, 1700) 0.5508 fail   B (0.14, 1750) 0.6963 fail   C (0.16, 1780) 0.8358 pass
#   D (0.18, 1760) 0.9100 pass   E (0.20, 1720) 0.9478 pass   F (0.17, 1650) 0.7213 pass
#   G (0.15, 1640) 0.6266 fail   H (0.19, 1600) 0.7462 pass
SERIES = [
    SeriesSpecimen("A", 0.12, 1700.0, 5e-9),
    SeriesSpecimen("B", 0.14, 1750.0, 2e-9),
    SeriesSpecimen("C", 0.16, 1780.0, 8e-10),
    SeriesSpecimen("D", 0.18, 1760.0, 3e-10),
    SeriesSpecimen("E", 0.20, 1720.0, 2e-10),
    SeriesSpecimen("F", 0.17, 1650.0, 4e-10),
    SeriesSpecimen("G", 0.15, 1640.0, 3e-9),
    SeriesSpecimen("H", 0.19, 1600.0, 6e-10),
]
HAND_S = [0.5508, 0.6963, 0.8358, 0.9100, 0.9478, 0.7213, 0.6266, 0.7462]


def classify(series=SERIES, **kwargs):
    return classify_specimens(
        series, k_max_m_per_s=K_MAX, specific_gravity=GS, water_density_kg_per_m3=RHO_W, **kwargs
    )


def test_classification_against_the_limit():
    out = classify()
    assert [c.degree_of_saturation for c in out] == pytest.approx(HAND_S, abs=1e-4)
    assert [c.specimen.label for c in out if c.acceptable] == ["C", "D", "E", "F", "H"]


def test_minimum_saturation_bounds_the_zone():
    # S_min = 0.75: F (0.7213) and H (0.7462) meet the k limit but fall below it
    out = classify(min_saturation=0.75)
    assert [c.specimen.label for c in out if c.acceptable] == ["C", "D", "E"]
    assert [c.above_min_saturation for c in out if c.specimen.label in "FH"] == [False, False]
    assert all(c.meets_limit for c in out if c.specimen.label in "FH")


def test_position_against_the_compaction_curve_and_line_of_optimums():
    curve = compaction_curve([CompactionPoint(w, parabola(w)) for w in (0.11, 0.13, 0.15, 0.17)])
    line = line_of_optimums(
        [CompactionPoint(0.15, 1800.0)], specific_gravity=GS, water_density_kg_per_m3=RHO_W
    )
    d = classify(curve=curve, optimums=line)[3]  # D (0.18, 1760)
    # by hand: w − w_opt = +0.03; RC = 100 × 1760/1800 = 97.78 %; line S = 0.81 at
    # ρ_d = 1760: w = 0.81·(1000/1760 − 1/2.70) = 0.16023 -> D is 0.01977 wet of it
    assert d.water_content_from_optimum == pytest.approx(0.03, abs=1e-9)
    assert d.relative_compaction_pct == pytest.approx(97.78, abs=0.01)
    assert d.water_content_from_line_of_optimums == pytest.approx(0.01977, abs=1e-5)


def test_acceptable_zone_from_the_data():
    # Hull of C, D, E, F, H: all five are vertices (D lies above chord C–E: 1760 > 1750;
    # F below chord C–H: 1650 < 1720); no failing specimen inside (A, B, G are drier than
    # the hull's driest point, w = 0.16). Saturation bound: failing S at most 0.6963 (B);
    # the lowest acceptable S above it is F's 0.7213, and no acceptable specimen lies below.
    zone = acceptable_zone(classify())
    hull = {(p.water_content, p.dry_density_kg_per_m3) for p in zone.hull}
    assert hull == {(0.16, 1780.0), (0.18, 1760.0), (0.20, 1720.0), (0.17, 1650.0), (0.19, 1600.0)}
    pts = [(p.water_content, p.dry_density_kg_per_m3) for p in zone.hull]
    shoelace = sum(
        x1 * y2 - x2 * y1 for (x1, y1), (x2, y2) in zip(pts, pts[1:] + pts[:1], strict=True)
    )
    assert shoelace > 0  # counter-clockwise
    assert zone.conflicts == ()
    assert zone.saturation_bound == pytest.approx(0.7213, abs=1e-4)
    assert zone.acceptable_below_bound == ()


def test_failing_specimen_inside_the_hull_is_a_conflict():
    # I (0.18, 1700) fails (2e-9 > 1e-9) and lies inside the hull of C, D, E, F, H; its
    # S = 0.18·2.70·1700/1000 = 0.8262 raises the saturation bound to C's 0.8358, leaving F
    # and H (acceptable) below it (by hand).
    series = [*SERIES, SeriesSpecimen("I", 0.18, 1700.0, 2e-9)]
    zone = acceptable_zone(classify(series))
    assert zone.conflicts == (8,)
    assert zone.saturation_bound == pytest.approx(0.8358, abs=1e-4)
    assert zone.acceptable_below_bound == (5, 7)


def test_no_zone_when_nothing_passes_above_the_failures():
    series = [SeriesSpecimen("X", 0.20, 1720.0, 5e-9), SeriesSpecimen("Y", 0.12, 1700.0, 5e-10)]
    zone = acceptable_zone(classify(series))
    assert zone.saturation_bound is None
    assert zone.acceptable_below_bound == (1,)


def test_classification_refuses_a_dry_density_above_the_solids():
    with pytest.raises(EngineInputError) as info:
        classify([SeriesSpecimen("Z", 0.10, 2800.0, 1e-10)])
    assert info.value.loc == ("specimens", 0, "dry_density")
