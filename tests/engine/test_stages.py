"""Saturation, consolidation and post-test stages of a flexible-wall test.

Sources: Skempton (1954) for B; check values CV6 and CV9(d) of
/work/shared/reference/domain-reference.md §10; Terzaghi's one-dimensional consolidation
solution U(T) = 1 − Σ 2/M²·exp(−M²T), M = π(2m + 1)/2 (Terzaghi 1943; as printed in Craig's
Soil Mechanics, consolidation chapter — from memory) for the end-of-consolidation rule; the
triaxial area correction A = A0·(1 − ε_v)/(1 − ε_a) (Head, Manual of Soil Laboratory
Testing Vol. 3 — from memory) for the dimensions at permeation.
"""

from __future__ import annotations

import math

import pytest

from service.engine.errors import EngineInputError
from service.engine.stages import (
    BackPressureIncrement,
    BCheckReading,
    VolumeReading,
    b_value,
    consolidation_end,
    dimensions_after_volume_change,
    dry_mass,
    permeation_state,
    post_test_state,
    saturation_series,
)

KPA = 1000.0


# --- saturation ----------------------------------------------------------------------------


def test_b_is_pore_pressure_rise_over_cell_pressure_rise():
    # Skempton (1954), Géotechnique 4(4): B = Δu/Δσ₃. Cell 350 -> 400 kPa (Δσ₃ = 50 kPa),
    # pore pressure 300 -> 348 kPa (Δu = 48 kPa): B = 48/50 = 0.96.
    assert b_value(50 * KPA, 48 * KPA) == pytest.approx(0.96, abs=1e-12)


def b_check(back: float, b: float) -> BCheckReading:
    """A check at back pressure ``back`` kPa with a 50 kPa cell increment giving ``b``."""
    return BCheckReading(
        back_pressure_pa=back * KPA,
        cell_pressure_before_pa=(back + 20) * KPA,
        cell_pressure_after_pa=(back + 70) * KPA,
        pore_pressure_before_pa=back * KPA,
        pore_pressure_after_pa=(back + 50 * b) * KPA,
    )


def test_saturation_series_passes_at_b_096():
    # domain-reference CV9(d): B = 0.96 -> pass
    series = saturation_series(
        [b_check(100, 0.62), b_check(200, 0.85), b_check(300, 0.96)],
        stiff_material=False,
        standard="ASTM D5084",
    )
    assert [c.b_value for c in series.b_checks] == pytest.approx([0.62, 0.85, 0.96])
    assert [c.cell_pressure_increment_pa for c in series.b_checks] == pytest.approx([50e3] * 3)
    assert [s.back_pressure_pa for s in series.steps] == pytest.approx([100e3, 200e3, 300e3])
    assert series.check.status == "pass"


def test_stiff_material_allowance_when_b_stops_changing():
    # domain-reference CV9(d): B = 0.93 staying 0.93 after a further back-pressure step on a
    # declared stiff material -> conditional pass (warn); the same on a soft clay -> fail
    readings = [b_check(300, 0.93), b_check(400, 0.93)]
    stiff = saturation_series(readings, stiff_material=True, standard="ASTM D5084")
    assert stiff.last_change == pytest.approx(0.0, abs=1e-12)
    assert stiff.check.status == "warn"
    soft = saturation_series(readings, stiff_material=False, standard="ASTM D5084")
    assert soft.check.status == "fail"


def test_stiff_material_still_rising_is_not_allowed():
    # 0.90 -> 0.93 changes by 0.03, beyond the 0.01 tolerance (common practice): fail
    series = saturation_series(
        [b_check(300, 0.90), b_check(400, 0.93)], stiff_material=True, standard="ASTM D5084"
    )
    assert series.last_change == pytest.approx(0.03, abs=1e-9)
    assert series.check.status == "fail"


def test_b_check_refuses_a_cell_pressure_that_did_not_rise():
    bad = BCheckReading(300 * KPA, 320 * KPA, 320 * KPA, 300 * KPA, 310 * KPA)
    with pytest.raises(EngineInputError) as info:
        saturation_series([bad], stiff_material=False, standard=None)
    assert info.value.loc == ("b_checks", 0, "cell_pressure_after")


def test_b_check_refuses_b_beyond_what_the_reduction_accepts():
    with pytest.raises(EngineInputError) as info:
        saturation_series([b_check(300, 1.4)], stiff_material=False, standard=None)
    assert info.value.loc == ("b_checks", 0, "pore_pressure_after")


def test_effective_stress_of_an_increment():
    # σ'₃ = σ₃ − u_b (Terzaghi's effective stress): 335 − 300 = 35 kPa
    assert BackPressureIncrement(335 * KPA, 300 * KPA).effective_stress_pa == pytest.approx(35e3)


# --- consolidation -------------------------------------------------------------------------


def terzaghi_u(time_factor: float, terms: int = 4000) -> float:
    """Average degree of consolidation U(T) (Terzaghi 1943; series as in Craig, memory)."""
    total = 0.0
    for m in range(terms):
        big_m = math.pi * (2 * m + 1) / 2
        total += 2 / big_m**2 * math.exp(-(big_m**2) * time_factor)
    return 1.0 - total


H2_OVER_C = 1000.0  # H²/c_v [s]: T = t/1000 s
DV_FINAL = 6.0e-6  # ΔV at the end of primary consolidation [m³]
ROOTS = [0.0, 0.05, 0.1, 0.15, 0.2, 0.25, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1.0]
ROOTS += [1.1, 1.2, 1.3, 1.4, 1.5, 1.6]  # √T of the readings


def terzaghi_readings(last_root: float) -> list[VolumeReading]:
    return [
        VolumeReading(r * r * H2_OVER_C, DV_FINAL * terzaghi_u(r * r))
        for r in ROOTS
        if r <= last_root
    ]


def test_consolidation_complete_once_terzaghi_curve_levels_off():
    # Terzaghi's solution to T = 2.56: the late slope ratio on the √t plot,
    # 2·√(πT)·exp(−π²T/4) (derived in stages.consolidation_end), is 0.039 at T = 1.96 and
    # 0.010 at T = 2.56, so the secant over the last three readings lies between them,
    # below the 5 % rule: complete.
    end = consolidation_end(terzaghi_readings(1.6))
    ratio = end.slope_ratio
    assert ratio is not None

    def r(t):
        return 2 * math.sqrt(math.pi * t) * math.exp(-(math.pi**2) * t / 4)

    assert r(2.56) < ratio < r(1.96)
    assert end.complete


def test_consolidation_not_complete_at_u_89_percent():
    # Stopped at T = 0.81 (U = 0.89): the late slope is still about half the initial one
    # (r(0.64) = 0.58 by the formula above): not complete.
    end = consolidation_end(terzaghi_readings(0.9))
    assert end.slope_ratio is not None
    assert end.slope_ratio > 0.3
    assert not end.complete


def test_root_time_t100_matches_terzaghi_early_line():
    # Early Terzaghi solution U = 2·√(T/π) (U < 0.6): the line ΔV = ΔV∞·(2/√π)·√(t/(H²/c))
    # meets the last reading's level ΔV∞·U_last at √t100 = U_last·(√π/2)·√(H²/c), so
    # t100 = U_last²·(π/4)·H²/c = 0.99708 × 785.40 s = 783.1 s (derived).
    readings = terzaghi_readings(1.6)
    u_last = terzaghi_u(2.56)
    expected = u_last**2 * math.pi / 4 * H2_OVER_C
    assert expected == pytest.approx(783.1, abs=0.1)
    end = consolidation_end(readings)
    assert end.t100_s == pytest.approx(expected, rel=2e-3)
    assert end.volume_change_m3 == pytest.approx(DV_FINAL * u_last, rel=1e-12)


def test_consolidation_refuses_times_out_of_order():
    readings = terzaghi_readings(1.6)
    readings[3] = VolumeReading(readings[2].time_s, readings[3].volume_change_m3)
    with pytest.raises(EngineInputError) as info:
        consolidation_end(readings)
    assert info.value.loc == ("readings", 3, "time")


# --- dimensions at permeation ----------------------------------------------------------------

D0, H0 = 0.0711, 0.0732  # domain-reference CV6: D = 7.11 cm, H = 7.32 cm, V0 = 290.630 cm³


def test_isotropic_dimensions_after_volume_change():
    # V0 = 290.630 cm³ (CV6); ΔV = 6.00 cm³: ε_v = 6.00/290.630 = 0.0206448; isotropic strain
    # ε_a = ε_v/3 = 0.0068816 (ASTM D5084, from memory); H = 7.32 × (1 − ε_a) = 7.26963 cm;
    # A = A0·(1 − ε_v)/(1 − ε_a) (Head Vol. 3 area correction, memory) with A0 = 39.7035 cm²
    # (CV3's area for D = 7.11 cm): 39.7035 × 0.9793552/0.9931184 = 39.1533 cm².
    dims = dimensions_after_volume_change(length_m=H0, diameter_m=D0, volume_change_m3=6.00e-6)
    assert dims.volumetric_strain == pytest.approx(6.00 / 290.630, rel=1e-5)
    assert dims.axial_strain == pytest.approx(0.0068816, rel=1e-4)
    assert dims.length_m == pytest.approx(0.0726963, rel=1e-5)
    eps_v, eps_a = 6.00 / 290.630, 6.00 / 290.630 / 3
    assert dims.area_m2 == pytest.approx(39.7035e-4 * (1 - eps_v) / (1 - eps_a), rel=1e-5)
    assert dims.area_m2 == pytest.approx(39.1533e-4, rel=1e-5)
    assert dims.volume_m3 == pytest.approx((290.630 - 6.00) * 1e-6, rel=1e-5)
    assert dims.method == "isotropic"


def test_measured_axial_change_with_area_from_volume():
    # ΔH = 0.50 mm measured: ε_a = 0.50/73.2 = 0.0068306; A = A0·(1 − ε_v)/(1 − ε_a)
    # = 39.7035 × 0.9793552/0.9931694 = 39.1514 cm² (Head Vol. 3 area correction, memory)
    dims = dimensions_after_volume_change(
        length_m=H0, diameter_m=D0, volume_change_m3=6.00e-6, axial_change_m=0.00050
    )
    assert dims.length_m == pytest.approx(0.0727, rel=1e-9)
    assert dims.area_m2 == pytest.approx(39.1514e-4, rel=2e-5)
    assert dims.method == "measured_axial"


def test_dimensions_refuse_a_volume_change_beyond_the_specimen():
    with pytest.raises(EngineInputError) as info:
        dimensions_after_volume_change(length_m=H0, diameter_m=D0, volume_change_m3=300e-6)
    assert info.value.loc == ("volume_change",)


def test_pore_volume_at_permeation_from_cv6():
    # domain-reference CV6 (ρ_w = 1000 kg/m³, G_s = 2.72): ρ_d = 1.5742 g/cm³, e = 0.7278,
    # n = 0.4212; pore volume n·V = 0.4212 × 290.630 = 122.41 cm³ (±0.1 %)
    dims = dimensions_after_volume_change(length_m=H0, diameter_m=D0, volume_change_m3=0.0)
    state = permeation_state(
        dims,
        dry_mass_kg=dry_mass(0.5600, 0.224),
        specific_gravity=2.72,
        water_density_kg_per_m3=1000.0,
    )
    assert state.phase.dry_density_kg_per_m3 == pytest.approx(1574.2, rel=1e-3)
    assert state.phase.void_ratio == pytest.approx(0.7278, rel=1e-3)
    assert state.pore_volume_m3 == pytest.approx(122.41e-6, rel=1e-3)


def test_consolidation_lowers_void_ratio():
    # 6.00 cm³ expelled from CV6's specimen: V = 284.630 cm³, ρ_d = 457.516/284.630
    # = 1.60741 g/cm³, e = 2.72/1.60741 − 1 = 0.69217 (phase identities, domain-reference §5)
    dims = dimensions_after_volume_change(length_m=H0, diameter_m=D0, volume_change_m3=6.00e-6)
    state = permeation_state(
        dims,
        dry_mass_kg=dry_mass(0.5600, 0.224),
        specific_gravity=2.72,
        water_density_kg_per_m3=1000.0,
    )
    assert state.phase.void_ratio == pytest.approx(0.69217, rel=2e-4)


# --- after the test ------------------------------------------------------------------------


def test_post_test_state_reproduces_cv6():
    # domain-reference CV6: wet 560.0 g, w = 22.4 % -> dry 457.516 g; ρ = 1.9268 g/cm³,
    # ρ_d = 1.5742, e = 0.7278, n = 0.4212, S = 0.837, RC = 93.70 % (ρ_d,max 1.680)
    post = post_test_state(
        length_m=H0,
        diameter_m=D0,
        wet_mass_kg=0.5600,
        dry_mass_kg=0.5600 / 1.224,
        specific_gravity=2.72,
        water_density_kg_per_m3=1000.0,
        max_dry_density_kg_per_m3=1680.0,
    )
    assert post.water_content == pytest.approx(0.224, rel=1e-9)
    assert post.phase.bulk_density_kg_per_m3 == pytest.approx(1926.8, rel=1e-3)
    assert post.phase.void_ratio == pytest.approx(0.7278, rel=1e-3)
    assert post.phase.porosity == pytest.approx(0.4212, rel=1e-3)
    assert post.phase.degree_of_saturation == pytest.approx(0.837, rel=1e-3)
    assert post.phase.relative_compaction_pct == pytest.approx(93.70, rel=1e-3)


def test_post_test_refuses_dry_mass_above_wet_mass():
    with pytest.raises(EngineInputError) as info:
        post_test_state(
            length_m=H0,
            diameter_m=D0,
            wet_mass_kg=0.45,
            dry_mass_kg=0.46,
            specific_gravity=2.72,
            water_density_kg_per_m3=1000.0,
        )
    assert info.value.loc == ("dry_mass",)
