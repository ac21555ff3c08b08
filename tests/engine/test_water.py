"""Water properties: IAPWS R12-08 check values, the iapws package, Tanaka density, ASTM R_T."""

from __future__ import annotations

import pytest
from iapws import IAPWS95  # test-only reference (GPL); never imported by service/
from iapws._iapws import _Viscosity

from service.engine.water import (
    density_tanaka,
    r_t_d5084,
    temperature_factor,
    viscosity_iapws,
    water_viscosity,
)


@pytest.mark.parametrize(
    ("temperature_k", "density", "expected_upas"),
    [
        # IAPWS R12-08 (2008) check values as quoted in domain-reference §4.3 (from memory of
        # the release, reproduced there exactly); tolerance 1e-6 relative as stated there
        (298.15, 998.0, 889.735100),
        (298.15, 1200.0, 1437.649467),
        (373.15, 1000.0, 307.883622),
        (433.15, 1000.0, 217.685358),
    ],
)
def test_iapws_2008_check_values(temperature_k, density, expected_upas):
    assert viscosity_iapws(temperature_k, density) * 1e6 == pytest.approx(expected_upas, rel=1e-6)


@pytest.mark.parametrize("temp_c", [t / 2 for t in range(2, 81)])  # 1 °C to 40 °C
def test_viscosity_formula_matches_iapws_package_at_same_density(temp_c):
    # iapws 1.5.5 _Viscosity implements IAPWS 2008; same density in -> same viscosity out
    density = density_tanaka(temp_c)
    expected = _Viscosity(density, temp_c + 273.15)
    assert viscosity_iapws(temp_c + 273.15, density) == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize("temp_c", [float(t) for t in range(1, 41)])
def test_water_viscosity_matches_iapws95_state(temp_c):
    # iapws 1.5.5 IAPWS95 at 0.101325 MPa (IAPWS-95 density + IAPWS 2008 viscosity); Tanaka
    # density is within 0.0012 kg/m³ of IAPWS-95 here, worth < 2e-6 in viscosity
    state = IAPWS95(T=temp_c + 273.15, P=0.101325)
    assert water_viscosity(temp_c) == pytest.approx(state.mu, rel=2e-6)


@pytest.mark.parametrize(
    ("temp_c", "rho"),
    # domain-reference §4.4 table, IAPWS-95 density column; Tanaka within 0.001 kg/m³ (§4.3)
    [
        (5, 999.967),
        (10, 999.703),
        (15, 999.103),
        (20, 998.207),
        (25, 997.048),
        (30, 995.650),
        (35, 994.033),
    ],
)
def test_tanaka_density_against_table(temp_c, rho):
    assert density_tanaka(temp_c) == pytest.approx(rho, abs=1.5e-3)


@pytest.mark.parametrize(
    ("temp_c", "eta_mpas"),
    # domain-reference §4.4 table, η column (mPa·s), 5 significant figures
    [
        (5, 1.51817),
        (10, 1.30590),
        (15, 1.13757),
        (20, 1.00160),
        (25, 0.89002),
        (30, 0.79722),
        (35, 0.71913),
    ],
)
def test_viscosity_against_table(temp_c, eta_mpas):
    assert water_viscosity(temp_c) * 1e3 == pytest.approx(eta_mpas, abs=6e-6)


def test_r_t_at_20c_is_not_exactly_one():
    # domain-reference §4.2: R_T gives 1.00024 at 20 °C
    assert r_t_d5084(20.0) == pytest.approx(1.00024, abs=5e-6)


def test_d5084_formula_drifts_below_15c():
    # domain-reference §4.2: +1.2 % at 10 °C and +6.1 % at 5 °C against IAPWS
    assert r_t_d5084(10.0) / temperature_factor(10.0) - 1 == pytest.approx(0.0123, abs=5e-4)
    assert r_t_d5084(5.0) / temperature_factor(5.0) - 1 == pytest.approx(0.0610, abs=5e-4)


def test_no_temperature_means_no_correction():
    # contract: without a temperature, no correction is made (factor 1)
    assert temperature_factor(None) == 1.0


def test_viscosity_sensitivity_at_20c():
    # domain-reference §4.4: d ln η/dT = −0.0245 per K at 20 °C
    h = 1e-3
    import math

    slope = (math.log(water_viscosity(20 + h)) - math.log(water_viscosity(20 - h))) / (2 * h)
    assert slope == pytest.approx(-0.0245, abs=5e-5)
