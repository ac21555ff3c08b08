"""Permeation from raw burette readings and panel pressures (ASTM D5084 A, B, C).

Sources of the expected numbers are named beside each test: the IAPWS-95 density of water
from the `iapws` package (a reference library, not our code), standard gravity 9.80665 m/s²
(exact, CGPM 1901), the check values CV2, CV3 and CV9 of
/work/shared/reference/domain-reference.md §10, and hand derivations shown step by step.
"""

from __future__ import annotations

import math

import pytest
from iapws import IAPWS95  # test-only reference (GPL); never imported by service/
from iapws._iapws import _Tension

from service.engine import parse_request, reduce
from service.engine.errors import EngineInputError
from service.engine.permeation import (
    CONSTANT_HEAD,
    FALLING_HEAD,
    RISING_TAIL,
    Burette,
    PanelReading,
    apparent_head,
    burette_level,
    burette_volume_change,
    capillary_rise,
    head_across_specimen,
    permeation_determinations,
    permeation_request,
    surface_tension,
    zero_flow_head,
)
from service.engine.water import density_tanaka
from tests.engine.helpers import rel

G = 9.80665  # standard gravity [m/s²], exact by definition (CGPM 1901)
ML = 1e-6  # 1 mL = 1e-6 m³, exact
CM2 = 1e-4  # 1 cm² = 1e-4 m², exact


def iapws_density(temperature_c: float) -> float:
    """ρ_w [kg/m³] of IAPWS-95 at 0.101325 MPa, from the iapws package."""
    return float(IAPWS95(T=temperature_c + 273.15, P=0.101325).rho)


# --- head from pressures -------------------------------------------------------------------


def test_pressure_head_of_10_kpa_at_20c_against_iapws95():
    # Derivation: Δh = Δp/(ρ_w·g) with Δp = 310 kPa − 300 kPa = 10 000 Pa, ρ_w(20 °C) from
    # IAPWS-95 (iapws: 998.2072 kg/m³), g = 9.80665 m/s²: Δh = 10 000/9789.07 = 1.021548 m.
    # Levels equal (both at their zero mark), so the burettes add nothing.
    expected = 10_000.0 / (iapws_density(20.0) * G)
    assert expected == pytest.approx(1.021548, abs=1e-6)  # the hand figure above
    got = apparent_head(310e3, 300e3, 0.0, 0.0, density_tanaka(20.0))
    # Tanaka density is within 0.0012 kg/m³ of IAPWS-95 (domain-reference §4.3): 1.2e-6 rel.
    assert got == pytest.approx(expected, rel=2e-6)


@pytest.mark.parametrize("temperature_c", [15.0, 20.0, 25.0, 30.0])
def test_pressure_head_uses_the_water_density_at_the_temperature(temperature_c):
    # IAPWS-95 (iapws) density at each temperature; a fixed 1000 kg/m³ would be 0.18 % to
    # 0.44 % off over 15–30 °C, well outside the tolerance.
    expected = 25_000.0 / (iapws_density(temperature_c) * G)
    got = apparent_head(325e3, 300e3, 0.0, 0.0, density_tanaka(temperature_c))
    assert got == pytest.approx(expected, rel=2e-6)


def test_head_adds_burette_levels_and_removes_the_zero_flow_head():
    # Hand derivation (burette geometry, derived; zero-flow correction common practice):
    # headwater burette 0.500 cm², volume marks from the top, reads 5.00 mL -> level 10.0 cm
    # below its zero; tailwater 1.00 cm² reads 20.00 mL -> 20.0 cm below its zero; zeros at
    # one elevation, so z_hw − z_tw = −0.100 + 0.200 = +0.100 m.
    # Bypassed at rest under equal pressures: headwater 9.70 mL (−0.194 m), tailwater
    # 19.70 mL (−0.197 m): Δh'₀ = +0.003 m (the narrower bore's meniscus stands higher).
    # Pressures 310/300 kPa at 20 °C: 1.021548 m (IAPWS-95 density, test above).
    # Δh = 1.021548 + 0.100 − 0.003 = 1.118548 m.
    hw = Burette(area_m2=0.500 * CM2)
    tw = Burette(area_m2=1.00 * CM2)
    assert burette_level(5.00 * ML, hw) == pytest.approx(-0.100, abs=1e-12)
    assert burette_level(20.00 * ML, tw) == pytest.approx(-0.200, abs=1e-12)
    bypass = PanelReading(0.0, 9.70 * ML, 19.70 * ML, 300e3, 300e3, 20.0)
    zero = zero_flow_head(bypass, hw, tw)
    assert zero == pytest.approx(0.003, abs=1e-12)
    apparent = apparent_head(
        310e3,
        300e3,
        burette_level(5.00 * ML, hw),
        burette_level(20.00 * ML, tw),
        density_tanaka(20.0),
    )
    expected = 10_000.0 / (iapws_density(20.0) * G) + 0.100 - 0.003
    assert expected == pytest.approx(1.118548, abs=1e-6)
    assert head_across_specimen(apparent, zero) == pytest.approx(expected, rel=2e-6)


def test_length_scale_burette_reading_upward():
    # A length scale numbered upward from a zero 0.25 m above the datum: 12.0 cm reads a level
    # 0.37 m above the datum (geometry, derived); its area only enters volumes.
    b = Burette(
        area_m2=0.80 * CM2, graduation="length", increases_downward=False, zero_elevation_m=0.25
    )
    assert burette_level(0.120, b) == pytest.approx(0.370, abs=1e-12)
    # Rising 3.0 cm gains 0.80 cm² × 3.0 cm = 2.40 mL.
    assert burette_volume_change(0.120, 0.150, b) == pytest.approx(2.40 * ML, rel=1e-12)


@pytest.mark.parametrize("temperature_c", [5.0, 10.0, 20.0, 25.0, 35.0])
def test_surface_tension_against_iapws_package(temperature_c):
    # IAPWS R1-76(2014) as implemented by the iapws package (_Tension)
    assert surface_tension(temperature_c) == pytest.approx(
        _Tension(temperature_c + 273.15), rel=1e-12
    )


def test_capillary_rise_by_jurins_law():
    # Jurin's law h = 4σ·cosθ/(ρ_w·g·d), σ and ρ_w at 20 °C from iapws (72.736 mN/m,
    # 998.207 kg/m³), θ = 0: a 3.0 mm bore 9.907 mm, an 8.0 mm bore 3.715 mm; the zero-flow
    # head expected between such burettes is their difference, 6.19 mm.
    sigma, rho = _Tension(293.15), iapws_density(20.0)
    for d, h in ((0.003, 0.009907), (0.008, 0.003715)):
        expected = 4 * sigma / (rho * G * d)
        assert expected == pytest.approx(h, abs=1e-6)
        assert capillary_rise(d, 20.0) == pytest.approx(expected, rel=2e-6)


# --- determinations ------------------------------------------------------------------------


def cv3_burettes() -> tuple[Burette, Burette]:
    """CV3's burettes with zeros placed so the first reading gives Δh1 = 125.0 cm."""
    return (
        Burette(area_m2=0.710 * CM2, zero_elevation_m=1.30),
        Burette(area_m2=0.950 * CM2, zero_elevation_m=0.20),
    )


def cv3_readings() -> list[PanelReading]:
    # Headwater reads 3.55 mL (3.55/0.710 = 5.0 cm below 1.30 m: level 1.25 m); tailwater
    # 19.00 mL (19.00/0.950 = 20.0 cm below 0.20 m: level 0.00 m); equal pressures, so
    # Δh1 = 1.25 m. A day later 9.75 mL have left the headwater (13.30 mL) and 9.50 mL
    # reached the tailwater (9.50 mL).
    return [
        PanelReading(0.0, 3.55 * ML, 19.00 * ML, 350e3, 350e3, 21.5),
        PanelReading(86_400.0, 13.30 * ML, 9.50 * ML, 350e3, 350e3, 21.5),
    ]


CV3_AREA = math.pi / 4 * 0.0711**2  # D = 7.11 cm


def test_rising_tailwater_reproduces_cv3():
    # domain-reference CV3: Δh2 = 101.268 cm; k_T = 1.8255e-9 m/s (±0.1 %); V_out/V_in = 0.974;
    # k20 = 1.7604e-9 m/s (±0.1 %, IAPWS); initial gradient 17.1
    hw, tw = cv3_burettes()
    (d,) = permeation_determinations(
        cv3_readings(),
        method=RISING_TAIL,
        headwater=hw,
        tailwater=tw,
        length_m=0.0732,
        area_m2=CV3_AREA,
    )
    assert d.head_initial_m == pytest.approx(1.250, abs=1e-9)
    assert d.head_final_m == pytest.approx(1.01268, abs=5e-6)
    assert d.inflow_volume_m3 == pytest.approx(9.75 * ML, rel=1e-9)
    assert d.outflow_volume_m3 == pytest.approx(9.50 * ML, rel=1e-9)
    assert d.flow_ratio == pytest.approx(0.974, abs=5e-4)
    assert rel(d.k_m_per_s, 1.8255e-9) < 1e-3
    assert rel(d.k_ref_m_per_s, 1.7604e-9) < 1e-3
    assert d.gradient == pytest.approx(17.1, abs=0.05)


def test_constant_tailwater_reproduces_cv2():
    # domain-reference CV2: a = 0.282743 cm² (bore 0.60 cm), D = 7.10 cm, L = 11.60 cm,
    # h1 = 100.0 cm, h2 = 70.0 cm in 3600 s at 18.0 °C: k_T = 8.2076e-8 m/s (±0.05 %),
    # k20 = 8.6261e-8 m/s (±0.05 %). Headwater on a length scale numbered downward from a
    # zero 1.10 m above the constant tailwater (the datum): 0.10 m reads level 1.00 m.
    hw = Burette(area_m2=math.pi / 4 * 0.0060**2, graduation="length", zero_elevation_m=1.10)
    readings = [
        PanelReading(0.0, 0.10, None, 0.0, 0.0, 18.0),
        PanelReading(3600.0, 0.40, None, 0.0, 0.0, 18.0),
    ]
    (d,) = permeation_determinations(
        readings,
        method=FALLING_HEAD,
        headwater=hw,
        tailwater=None,
        length_m=0.1160,
        area_m2=math.pi / 4 * 0.0710**2,
    )
    assert (d.head_initial_m, d.head_final_m) == pytest.approx((1.00, 0.70), abs=1e-12)
    assert rel(d.k_m_per_s, 8.2076e-8) < 5e-4
    assert rel(d.k_ref_m_per_s, 8.6261e-8) < 5e-4
    assert d.outflow_volume_m3 is None
    assert d.flow_ratio is None
    # inflow a·(1.00 − 0.70 m) = 0.282743 cm² × 30 cm = 8.4823 mL
    assert d.inflow_volume_m3 == pytest.approx(8.4823 * ML, rel=1e-4)


def test_constant_head_from_burettes_by_hand():
    # Hand derivation, Darcy's law (domain-reference §2.1; Q as the mean of inflow and
    # outflow per ASTM D5084 Method A, from memory), ρ_w = 1000 kg/m³ by convention:
    # pressure head 20 000/(1000 × 9.80665) = 2.039432 m; burettes 1.00 cm², zeros level.
    # Start: hw 2.00 mL (−0.020 m), tw 20.00 mL (−0.200 m): Δh1 = 2.219432 m.
    # End (3600 s): hw 4.00 mL (−0.040 m), tw 18.10 mL (−0.181 m): Δh2 = 2.180432 m.
    # V_in = 2.00 mL, V_out = 1.90 mL, Q = 1.95 mL; Δh̄ = 2.199932 m; L = 0.100 m, A = 40.0 cm².
    # k = 1.95e-6 × 0.100 / (4.0e-3 × 2.199932 × 3600) = 1.95e-7 / 31.67902 = 6.15549e-9 m/s.
    b = Burette(area_m2=1.00 * CM2)
    readings = [
        PanelReading(0.0, 2.00 * ML, 20.00 * ML, 320e3, 300e3),
        PanelReading(3600.0, 4.00 * ML, 18.10 * ML, 320e3, 300e3),
    ]
    (d,) = permeation_determinations(
        readings,
        method=CONSTANT_HEAD,
        headwater=b,
        tailwater=b,
        length_m=0.100,
        area_m2=40.0 * CM2,
        water_convention="nominal",
    )
    assert d.head_initial_m == pytest.approx(2.219432, abs=1e-6)
    assert d.head_final_m == pytest.approx(2.180432, abs=1e-6)
    assert d.k_m_per_s == pytest.approx(6.15549e-9, rel=1e-5)
    assert d.gradient == pytest.approx(21.99932, rel=1e-6)
    assert d.temperature_factor == 1.0  # no temperature: no correction


def test_zero_flow_head_lowers_every_head_and_raises_k():
    # Falling-head k rises as both heads drop by the same zero-flow head (ln(h1/h2) grows):
    # CV3 with Δh'₀ = 0.010 m: ln(1.240/1.00268)/ln(1.250/1.01268) = 0.21249/0.21054 -> +0.93 %.
    hw, tw = cv3_burettes()
    args = {
        "method": RISING_TAIL,
        "headwater": hw,
        "tailwater": tw,
        "length_m": 0.0732,
        "area_m2": CV3_AREA,
    }
    (plain,) = permeation_determinations(cv3_readings(), **args)
    (fixed,) = permeation_determinations(cv3_readings(), zero_flow_head_m=0.010, **args)
    assert fixed.head_initial_m == pytest.approx(1.240, abs=1e-9)
    assert fixed.k_m_per_s / plain.k_m_per_s == pytest.approx(
        math.log(1.240 / 1.0026761) / math.log(1.250 / 1.0126761), rel=1e-6
    )


def test_pore_volumes_of_flow_and_refill_runs():
    # Pore volumes of flow = cumulative outflow / pore volume (common practice, no source).
    # Three intervals of 2.0 mL outflow each, the burettes refilled before the fourth
    # reading: that interval is skipped; with V_v = 40.0 mL: 0.05, 0.10, 0.15.
    b = Burette(area_m2=1.00 * CM2)
    r = [
        PanelReading(0.0, 1.0 * ML, 20.0 * ML, 320e3, 300e3),
        PanelReading(600.0, 3.0 * ML, 18.0 * ML, 320e3, 300e3),
        PanelReading(1200.0, 5.0 * ML, 16.0 * ML, 320e3, 300e3),
        PanelReading(1500.0, 1.0 * ML, 20.0 * ML, 320e3, 300e3, new_run=True),
        PanelReading(2100.0, 3.0 * ML, 18.0 * ML, 320e3, 300e3),
    ]
    dets = permeation_determinations(
        r,
        method=CONSTANT_HEAD,
        headwater=b,
        tailwater=b,
        length_m=0.1,
        area_m2=40 * CM2,
        pore_volume_m3=40.0 * ML,
    )
    assert [d.run for d in dets] == [1, 1, 2]
    assert [d.time_end_s for d in dets] == [600.0, 1200.0, 2100.0]
    assert [d.pore_volumes for d in dets] == pytest.approx([0.05, 0.10, 0.15])


# --- refusals ------------------------------------------------------------------------------


def _refusal(readings, **kwargs):
    b = Burette(area_m2=1.00 * CM2)
    args = {
        "method": RISING_TAIL,
        "headwater": b,
        "tailwater": b,
        "length_m": 0.1,
        "area_m2": 40 * CM2,
        **kwargs,
    }
    with pytest.raises(EngineInputError) as info:
        permeation_determinations(readings, **args)
    return info.value


def test_refuses_times_that_do_not_rise():
    err = _refusal(
        [PanelReading(60.0, 1e-6, 2e-5, 3.2e5, 3e5), PanelReading(60.0, 2e-6, 1.9e-5, 3.2e5, 3e5)]
    )
    assert err.loc == ("readings", 1, "time")
    assert err.kind == "time_order"


def test_refuses_a_falling_head_that_rises():
    # Headwater pressure raised between readings: the head grows, a falling-head k would be
    # negative; the reading is named, never a negative k.
    err = _refusal(
        [PanelReading(0.0, 1e-6, 2e-5, 3.2e5, 3e5), PanelReading(60.0, 2e-6, 1.9e-5, 3.4e5, 3e5)]
    )
    assert err.loc == ("readings", 1, "headwater_reading")
    assert err.kind == "impossible_test"


def test_refuses_a_head_driving_water_backwards():
    err = _refusal(
        [PanelReading(0.0, 1e-6, 2e-5, 2.9e5, 3e5), PanelReading(60.0, 2e-6, 1.9e-5, 2.9e5, 3e5)]
    )
    assert err.loc == ("readings", 0, "headwater_pressure")


def test_refuses_rising_tailwater_without_a_tailwater_burette():
    err = _refusal([PanelReading(0.0, 1e-6, None, 3.2e5, 3e5)] * 2, tailwater=None)
    assert ("tailwater",) in [p.loc for p in err.problems]


def test_refuses_an_interval_with_no_inflow():
    err = _refusal(
        [PanelReading(0.0, 2e-6, 2e-5, 3.2e5, 3e5), PanelReading(60.0, 2e-6, 1.9e-5, 3.2e5, 3e5)],
        method=CONSTANT_HEAD,
    )
    assert err.loc == ("readings", 1, "headwater_reading")


# --- feeding the reduction pipeline's termination checks -----------------------------------

A_IN, A_OUT = 0.710 * CM2, 0.950 * CM2
L, D = 0.0732, 0.0711


def readings_for(k_values: list[float], dt: float = 86_400.0) -> list[PanelReading]:
    """Panel readings whose successive intervals give the wanted k at 20 °C (R = 1).

    Inverts domain-reference §3.2: ln(Δh1/Δh2) = k·A·Δt·(1/a_in + 1/a_out)/L, and splits the
    fall of Δh into equal volumes V = (Δh1 − Δh2)/(1/a_in + 1/a_out) in and out.
    """
    area = math.pi / 4 * D**2
    head, t = 1.25, 0.0
    z_hw, z_tw = 1.25, 0.0
    out = [PanelReading(t, (1.30 - z_hw) * A_IN, (0.20 - z_tw) * A_OUT, 3e5, 3e5, 20.0)]
    for k in k_values:
        nxt = head * math.exp(-k * area * dt * (1 / A_IN + 1 / A_OUT) / L)
        v = (head - nxt) / (1 / A_IN + 1 / A_OUT)
        z_hw, z_tw, head, t = z_hw - v / A_IN, z_tw + v / A_OUT, nxt, t + dt
        out.append(PanelReading(t, (1.30 - z_hw) * A_IN, (0.20 - z_tw) * A_OUT, 3e5, 3e5, 20.0))
    return out


def reduce_readings(k_values: list[float]) -> tuple[list[float], dict]:
    hw, tw = cv3_burettes()
    dets = permeation_determinations(
        readings_for(k_values),
        method=RISING_TAIL,
        headwater=hw,
        tailwater=tw,
        length_m=L,
        area_m2=math.pi / 4 * D**2,
    )
    request = {
        "standard": "ASTM D5084",
        "specimen": {"length": {"value": L, "unit": "m"}, "diameter": {"value": D, "unit": "m"}},
        "saturation": [{"back_pressure": "300 kPa", "b_value": 0.97}],
        **permeation_request(dets, method=RISING_TAIL, headwater=hw, tailwater=tw),
    }
    body = reduce(parse_request(request))
    return [d.k_ref_m_per_s for d in dets], {
        "k": [t.k_ref_m_per_s for t in body.trials],
        "checks": {c.id: c.status for c in body.checks},
    }


def test_determinations_reduce_to_the_same_k_in_the_pipeline():
    # CV9(b) values (domain-reference §10): 3.2, 2.9, 3.3, 3.0 ×1e-9 m/s
    wanted = [3.2e-9, 2.9e-9, 3.3e-9, 3.0e-9]
    ours, piped = reduce_readings(wanted)
    assert ours == pytest.approx(wanted, rel=1e-9)
    assert piped["k"] == pytest.approx(wanted, rel=1e-9)


def test_pipeline_steady_state_passes_on_steady_determinations():
    # domain-reference CV9(b): last four 3.2, 2.9, 3.3, 3.0 (×1e-9) -> max deviation 6.5 %: pass
    _, piped = reduce_readings([5.0e-9, 3.2e-9, 2.9e-9, 3.3e-9, 3.0e-9])
    assert piped["checks"]["steady_state"] == "pass"
    assert piped["checks"]["flow_ratio"] == "pass"  # equal volumes in and out: ratio 1


def test_pipeline_steady_state_fails_on_scattered_determinations():
    # domain-reference CV9(b): last four 2.0, 2.6, 1.6, 2.1 (×1e-9) -> 2.6 is +25.3 %: fail
    _, piped = reduce_readings([2.0e-9, 2.6e-9, 1.6e-9, 2.1e-9])
    assert piped["checks"]["steady_state"] == "fail"


def test_pipeline_flow_ratio_sees_the_burette_volumes():
    # CV3's interval repeated four times has V_out/V_in = 0.974, inside 0.75–1.25 (CV3);
    # a tailwater that gained only 60 % of the inflow must fail the ratio (ASTM D5084, memory).
    hw, tw = cv3_burettes()
    r = [
        PanelReading(0.0, 3.55 * ML, 19.00 * ML, 3e5, 3e5, 20.0),
        PanelReading(86_400.0, 13.30 * ML, 13.15 * ML, 3e5, 3e5, 20.0),
    ]
    dets = permeation_determinations(
        r, method=RISING_TAIL, headwater=hw, tailwater=tw, length_m=L, area_m2=CV3_AREA
    )
    assert dets[0].flow_ratio == pytest.approx(5.85 / 9.75, rel=1e-9)
    request = {
        "specimen": {"length": {"value": L, "unit": "m"}, "diameter": {"value": D, "unit": "m"}},
        "standard": "ASTM D5084",
        **permeation_request(dets, method=RISING_TAIL, headwater=hw, tailwater=tw),
    }
    body = reduce(parse_request(request))
    assert {c.id: c.status for c in body.checks}["flow_ratio"] == "fail"
