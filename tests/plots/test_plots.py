"""SVG plots: geometry of the axes (log k, depth downward, ln h against time), the
acceptance band and limit line where they belong, labels with units, accessible text."""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from service.web import plots

SVG = "{http://www.w3.org/2000/svg}"


def parse(svg: str) -> ET.Element:
    return ET.fromstring(svg)  # also proves the SVG is well-formed XML


def points(root: ET.Element) -> list[tuple[float, float]]:
    out = []
    for group in root.iter(f"{SVG}g"):
        if group.get("class") == "point" and group.get("transform"):
            match = re.fullmatch(r"translate\(([-\d.]+) ([-\d.]+)\)", group.get("transform", ""))
            assert match is not None
            out.append((float(match[1]), float(match[2])))
    return out


def test_log_axis_puts_each_decade_at_equal_length() -> None:
    axis = plots.LogAxis(1e-10, 1e-6, 100, 500)
    # log10 spacing: 1e-8 is two of the four decades from 1e-10 (definition of a log scale).
    assert axis.px(1e-10) == pytest.approx(100)
    assert axis.px(1e-8) == pytest.approx(300)
    assert axis.px(1e-6) == pytest.approx(500)
    assert axis.px(3e-9) - axis.px(1e-9) == pytest.approx(axis.px(3e-8) - axis.px(1e-8))
    assert axis.ticks() == pytest.approx([1e-10, 1e-9, 1e-8, 1e-7, 1e-6])


def test_narrow_log_axis_still_has_labelled_ticks() -> None:
    axis = plots.LogAxis(1.3e-9, 2.3e-9, 300, 30)
    ticks = axis.ticks()
    assert len(ticks) >= 3
    assert all(1.3e-9 <= t <= 2.3e-9 for t in ticks)


def test_log_axis_refuses_non_positive_ranges() -> None:
    with pytest.raises(ValueError, match="0 < lo < hi"):
        plots.LogAxis(0, 1, 0, 100)


def test_nice_steps() -> None:
    assert plots.nice_step(0.7) == 1
    assert plots.nice_step(1.7) == 2
    assert plots.nice_step(23) == 25
    assert plots.nice_step(41) == 50


def test_k_depth_points_sit_on_log_k_and_downward_depth() -> None:
    series = {"BH-01": [(1.5, 2e-9), (6.0, 5e-8)], "TP-02": [(0.5, 3e-7)]}
    root = parse(plots.k_depth_svg(series, spec_limit=1e-9))
    lo, hi = plots.log_range([2e-9, 5e-8, 3e-7, 1e-9], pad=2.0)
    left, right = plots.MARGIN_LEFT, plots.WIDTH - plots.MARGIN_RIGHT
    top, bottom = plots.MARGIN_TOP, plots.HEIGHT - plots.MARGIN_BOTTOM

    def expected_x(k: float) -> float:
        return left + (math.log10(k) - math.log10(lo)) / (math.log10(hi / lo)) * (right - left)

    found = points(root)[:3]  # the legend's markers follow the data
    depth_hi = 8.0  # 6.0 m deepest, 2 m steps -> axis to 8 m
    expected = [
        (expected_x(2e-9), top + 1.5 / depth_hi * (bottom - top)),
        (expected_x(5e-8), top + 6.0 / depth_hi * (bottom - top)),
        (expected_x(3e-7), top + 0.5 / depth_hi * (bottom - top)),
    ]
    for (x, y), (ex, ey) in zip(found, expected, strict=True):
        assert x == pytest.approx(ex, abs=0.01)
        assert y == pytest.approx(ey, abs=0.01)
    # Depth increases downward: the deeper sample is drawn lower on the page.
    assert found[1][1] > found[0][1] > found[2][1]
    # Locations are told apart by marker shape, not colour alone.
    shapes = {g.get("data-shape") for g in root.iter(f"{SVG}g") if g.get("class") == "point"}
    assert {"circle", "square"} <= shapes


def test_k_depth_labels_units_and_accessible_text() -> None:
    svg = plots.k_depth_svg({"BH-01": [(2.0, 1e-8)]}, plot_id="depth")
    root = parse(svg)
    assert root.get("role") == "img"
    assert root.get("aria-labelledby") == "depth-title depth-desc"
    assert root.find(f"{SVG}title").text == "Hydraulic conductivity against depth"
    assert "1 result(s) at 1 location(s)" in root.find(f"{SVG}desc").text
    assert "Depth below ground level (m)" in svg
    assert "k₂₀ (m/s), log scale" in svg
    assert "10⁻⁸" in svg


def test_k_per_trial_band_is_plus_minus_25_percent_of_the_mean() -> None:
    k = [1.0e-9, 1.1e-9, 0.9e-9, 1.6e-9]
    root = parse(plots.k_per_trial_svg(k, spec_limit=2e-9))
    mean = sum(k) / 4
    lo, hi = plots.log_range([*k, mean * 0.75, mean * 1.25, 2e-9])
    axis = plots.LogAxis(lo, hi, plots.HEIGHT - plots.MARGIN_BOTTOM, plots.MARGIN_TOP)
    band = next(r for r in root.iter(f"{SVG}rect") if r.get("class") == "band")
    assert float(band.get("y")) == pytest.approx(axis.px(mean * 1.25), abs=0.01)
    assert float(band.get("y")) + float(band.get("height")) == pytest.approx(
        axis.px(mean * 0.75), abs=0.02
    )
    limit = next(line for line in root.iter(f"{SVG}line") if line.get("class") == "spec-limit")
    assert float(limit.get("y1")) == pytest.approx(axis.px(2e-9), abs=0.01)
    # Trial 4 (1.6e-9) lies outside 1.15e-9 ± 25 %: drawn as a triangle, not a circle.
    shapes = [g.get("data-shape") for g in root.iter(f"{SVG}g") if g.get("class") == "point"]
    assert shapes[:4] == ["circle", "circle", "circle", "triangle"]


def test_k_per_trial_given_band_and_labels() -> None:
    svg = plots.k_per_trial_svg([2e-9, 2.1e-9], band=(1e-9, 3e-9), reference_temperature_c=20)
    assert "acceptance band" in svg
    assert "Trial number" in svg
    assert "k₂₀ (m/s), log scale" in svg
    with pytest.raises(ValueError, match="greater than zero"):
        plots.k_per_trial_svg([1e-9, 0.0])


def test_ln_head_fit_line_runs_through_exact_exponential_readings() -> None:
    # h = h0·exp(-b·t) gives ln h = ln h0 - b·t exactly, so least squares returns b and ln h0.
    b, h0 = 1.0e-4, 1.2
    times = [0.0, 600.0, 1200.0, 1800.0, 2400.0, 3000.0]
    heads = [h0 * math.exp(-b * t) for t in times]
    line = plots.fit_log_head(times, heads)
    assert line.slope == pytest.approx(-b, rel=1e-9)
    assert line.intercept == pytest.approx(math.log(h0), rel=1e-9)
    root = parse(plots.ln_head_time_svg(times, heads))
    fit = next(line for line in root.iter(f"{SVG}line") if line.get("class") == "fit")
    drawn = points(root)
    assert (float(fit.get("x1")), float(fit.get("y1"))) == pytest.approx(drawn[0], abs=0.02)
    assert (float(fit.get("x2")), float(fit.get("y2"))) == pytest.approx(drawn[5], abs=0.02)


def test_ln_head_labels_time_unit_and_head_unit() -> None:
    svg = plots.ln_head_time_svg([0, 1200, 2400], [1.0, 0.9, 0.81])
    assert "Elapsed time t (min)" in svg
    assert "ln h  (head h in m)" in svg
    assert "<title" in svg
    assert "<desc" in svg
    short = plots.ln_head_time_svg([0, 60, 120], [1.0, 0.9, 0.81])
    assert "Elapsed time t (s)" in short
    with pytest.raises(ValueError, match="greater than zero"):
        plots.ln_head_time_svg([0, 60], [1.0, 0.0])


def test_plots_module_imports_nothing_of_the_web() -> None:
    # Pure SVG text; it takes from the service the engine's ln h-t fit and the one
    # formatter's unit table.
    assert plots.__file__ is not None
    text = Path(plots.__file__).read_text(encoding="utf-8")
    for name in ("fastapi", "starlette", "jinja2", "sqlmodel"):
        assert f"import {name}" not in text
        assert f"from {name}" not in text
    imported = [line for line in text.splitlines() if line.startswith("from service.")]
    assert imported == [
        "from service.figures import DISPLAY, number, system",
        "from service.lab_tests.reduction import fit_log_head",
    ]


def test_k_depth_in_us_customary_units() -> None:
    # 2.0 m = 6.56 ft (1 ft = 0.3048 m exactly); 1e-8 m/s × 86 400 s/day ÷ 0.3048 m/ft
    # = 2.83e-3 ft/day (international foot, 1959).
    svg = plots.k_depth_svg({"BH-01": [(2.0, 1e-8)]}, plot_id="depth", units="us")
    desc = parse(svg).find(f"{SVG}desc").text
    assert "Depth below ground level (ft)" in svg
    assert "k₂₀ (ft/day), log scale" in svg
    assert "depths 0 to 6.56 ft" in desc
    assert "2.83 × 10⁻³ ft/day" in desc
    assert "m/s" not in svg
