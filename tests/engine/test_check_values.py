"""Check values through the engine's public path: CV1–CV9 of the project's domain reference,
and hand-computed values for constant rate, pressure heads and rising-tailwater regression.

The CV numbers come from the domain reference §10 (computed there with iapws 1.5.5, numpy and
pint, independently of this code); the others are derived in each test's comment from
Darcy's law and continuity, with water properties from the iapws package. Published worked
examples are in test_published_examples.py.
"""

from __future__ import annotations

import math

import pytest
from iapws import IAPWS95  # test-only outside reference

from service.engine import checks
from service.engine.conversions import k_to_cm_per_s
from service.engine.rules import BUILT_IN, D2434, D5084
from tests.engine.helpers import check, constant_rate, cv1, cv2, cv3, cv4, rel, run

G = 9.80665  # standard gravity, exact (CGPM 1901)


def rho_iapws(temp_c: float) -> float:
    """Density of water at 0.101325 MPa from the iapws package (IAPWS-95)."""
    return IAPWS95(T=temp_c + 273.15, P=0.101325).rho


# --- CV1: constant head with manometer taps; formula Darcy's law (§2.1), ASTM D2434-68 ---
def test_cv1_area_gradient_and_velocities():
    # domain-reference CV1: A = 81.0732 cm², i = 0.3000, v = 3.6490e-2 cm/s, v_s = 9.6025e-2 cm/s
    body = run(cv1())
    assert rel(body["specimen"]["area_m2"], 81.0732e-4) < 5e-4
    assert body["trials"][0]["gradient"] == pytest.approx(0.3000, rel=5e-4)
    assert rel(body["flow"]["discharge_velocity_m_per_s"], 3.6490e-4) < 5e-4
    assert rel(body["flow"]["seepage_velocity_m_per_s"], 9.6025e-4) < 5e-4


def test_cv1_k_at_test_temperature():
    # domain-reference CV1: k_T = 1.2163e-3 m/s (±0.05 %)
    assert rel(run(cv1())["trials"][0]["k_m_per_s"], 1.2163e-3) < 5e-4


def test_cv1_k20_iapws():
    # domain-reference CV1: R_IAPWS(23 °C) = 0.93064, k20 = 1.1320e-1 cm/s (±0.05 %)
    body = run(cv1())
    assert body["trials"][0]["temperature_factor"] == pytest.approx(0.93064, abs=1e-4)
    assert rel(body["result"]["k_ref_cm_per_s"], 1.1320e-1) < 5e-4


def test_cv1_k20_astm_d5084_formula():
    # domain-reference CV1: R_T(D5084) = 0.93116, k20 = 1.1326e-1 cm/s (±0.05 %)
    payload = cv1()
    payload["options"] = {"temperature_correction": "astm_d5084"}
    body = run(payload)
    assert body["trials"][0]["temperature_factor"] == pytest.approx(0.93116, abs=5e-5)
    assert rel(body["result"]["k_ref_cm_per_s"], 1.1326e-1) < 5e-4


def test_cv1_reynolds_laminar():
    # domain-reference CV1: Re (d = D10) = 0.117 -> laminar (< 1); thresholds §2.4
    body = run(cv1())
    assert body["flow"]["reynolds_number"] == pytest.approx(0.117, abs=5e-4)
    assert check(body, "laminar_flow")["status"] == "pass"


def test_cv1_gradient_in_d2434_band():
    # domain-reference CV1: gradient 0.30 lies in the D2434-68 band (§2.3, memory)
    payload = cv1()
    payload["standard"] = "ASTM D2434"
    assert check(run(payload), "gradient_limit")["status"] == "pass"


def test_cv1_mass_of_water_is_turned_into_volume_with_the_water_density():
    # domain-reference §2.1: Q = m/ρ_w(T). 355 mL at 23 °C weighs 355·ρ_w(23 °C) g with ρ_w
    # from IAPWS-95 (iapws package); k must be CV1's 1.2163e-3 m/s (±0.05 %), and the
    # nominal 1 g/mL convention must give the 0.25 % smaller k of 355·ρ_w/1000 mL.
    mass_g = 355 * rho_iapws(23.0) / 1000
    payload = cv1()
    del payload["trials"][0]["volume"]
    payload["trials"][0]["water_mass"] = f"{mass_g!r} g"
    assert rel(run(payload)["trials"][0]["k_m_per_s"], 1.2163e-3) < 5e-4
    payload["options"] = {"water_density": "nominal"}
    nominal = run(payload)["trials"][0]["k_m_per_s"]
    assert rel(nominal, 1.2163e-3 * rho_iapws(23.0) / 1000) < 5e-4


def test_cv1_inflow_outflow_mean():
    # contract (reductions-api.md): with only inflow and outflow volumes, Q is their mean
    payload = cv1()
    del payload["trials"][0]["volume"]
    payload["trials"][0].update(inflow_volume="365 mL", outflow_volume="345 mL")
    body = run(payload)
    assert rel(body["trials"][0]["k_m_per_s"], 1.2163e-3) < 5e-4
    assert body["trials"][0]["flow_ratio"] == pytest.approx(345 / 365)


# --- CV2: falling head, constant tailwater; ASTM D5084 Method B, formula §3.1 -------------
def test_cv2_k_at_test_temperature():
    # domain-reference CV2: k_T = 8.2076e-8 m/s (±0.05 %)
    assert rel(run(cv2())["trials"][0]["k_m_per_s"], 8.2076e-8) < 5e-4


def test_cv2_k20_iapws():
    # domain-reference CV2: R_IAPWS = 1.05100, k20 = 8.6261e-6 cm/s (±0.05 %)
    body = run(cv2())
    assert body["trials"][0]["temperature_factor"] == pytest.approx(1.05100, abs=1e-4)
    assert rel(body["result"]["k_ref_cm_per_s"], 8.6261e-6) < 5e-4


def test_cv2_k20_astm_d5084_formula():
    # domain-reference CV2: D5084 R_T = 1.05130 -> 8.6286e-6 cm/s
    payload = cv2()
    payload["options"] = {"temperature_correction": "astm_d5084"}
    assert rel(run(payload)["result"]["k_ref_cm_per_s"], 8.6286e-6) < 5e-4


def test_cv2_initial_gradient():
    # domain-reference CV2: gradient falls from 8.62 (initial, reported) to 6.03
    assert run(cv2())["trials"][0]["gradient"] == pytest.approx(8.62, abs=0.005)


# --- CV3: falling headwater, rising tailwater; ASTM D5084 Method C, formula §3.2 ----------
def test_cv3_final_head_from_volumes():
    # domain-reference CV3: Δh2 = 125.0 − 9.75/0.710 − 9.50/0.950 = 101.268 cm
    assert run(cv3())["trials"][0]["head_final_m"] == pytest.approx(1.01268, abs=5e-6)


def test_cv3_area_and_k_at_test_temperature():
    # domain-reference CV3: A = 39.7035 cm²; k_T = 1.8255e-9 m/s (±0.1 %)
    body = run(cv3())
    assert rel(body["specimen"]["area_m2"], 39.7035e-4) < 1e-4
    assert rel(body["trials"][0]["k_m_per_s"], 1.8255e-9) < 1e-3


def test_cv3_flow_ratio_and_k20():
    # domain-reference CV3: outflow/inflow = 0.974; R_IAPWS(21.5) = 0.96432;
    # k20 = 1.7604e-9 m/s (±0.1 %)
    body = run(cv3())
    assert body["trials"][0]["flow_ratio"] == pytest.approx(0.974, abs=5e-4)
    assert body["trials"][0]["temperature_factor"] == pytest.approx(0.96432, abs=1e-4)
    assert rel(body["result"]["k_ref_m_per_s"], 1.7604e-9) < 1e-3
    assert check(body, "flow_ratio")["status"] == "pass"


def test_cv3_k20_astm_d5084_formula():
    # domain-reference CV3: D5084 R_T -> 1.7611e-9 m/s
    payload = cv3()
    payload["options"] = {"temperature_correction": "astm_d5084"}
    assert rel(run(payload)["result"]["k_ref_m_per_s"], 1.7611e-9) < 1e-3


def test_cv3_initial_gradient_within_d5084_recommendation():
    # domain-reference CV3/CV9(a): initial gradient 17.1 < 20 recommended for 1e-8..1e-9 m/s
    body = run(cv3())
    assert body["trials"][0]["gradient"] == pytest.approx(17.1, abs=0.05)
    assert check(body, "gradient_limit")["status"] == "pass"
    assert check(body, "gradient_limit")["limit"] == 20.0


def test_cv3_method_b_formula_on_method_c_data_is_the_known_trap():
    # domain-reference CV3: Method B formula with a = a_in gives 3.19e-7 cm/s (×1.747 too high)
    payload = cv3()
    payload["method"] = "falling_head"
    payload["apparatus"] = {"standpipe_area": "0.710 cm**2"}
    payload["trials"][0]["head_final"] = "101.268 cm"
    for key in ("inflow_volume", "outflow_volume"):
        del payload["trials"][0][key]
    wrong = run(payload)["trials"][0]["k_m_per_s"]
    assert k_to_cm_per_s(wrong) == pytest.approx(3.19e-7, rel=2e-3)
    assert wrong / run(cv3())["trials"][0]["k_m_per_s"] == pytest.approx(1.747, abs=1e-3)


# --- CV4: multi-reading run, unweighted least squares of ln h on t (§3.3) ----------------
def test_cv4_regression_k():
    # domain-reference CV4: k = 2.0000e-5 cm/s (±0.1 %)
    assert rel(run(cv4())["trials"][0]["k_m_per_s"], 2.0000e-7) < 1e-3


def test_cv4_slope_statistics():
    # domain-reference CV4: slope standard error 0.10 % relative; r² = 0.999996
    trial = run(cv4())["trials"][0]
    assert trial["slope_std_error_rel"] == pytest.approx(0.0010, abs=5e-5)
    assert trial["r_squared"] == pytest.approx(0.999996, abs=1e-6)


def test_cv4_first_last_pair():
    # domain-reference CV4: the first–last pair alone gives 2.0005e-5 cm/s
    payload = cv4()
    payload["trials"] = [
        {
            "head_initial": "120.0 cm",
            "head_final": "80.0 cm",
            "duration": "3000 s",
            "temperature": "20.0 degC",
        }
    ]
    assert rel(run(payload)["trials"][0]["k_m_per_s"], 2.0005e-7) < 1e-4


# --- CV5: temperature correction (§4.4 table), IAPWS ±0.0001, D5084 formula ±0.00005 -------
R_TABLE = [  # domain-reference §4.4 (computed): T °C, R_IAPWS, R_T D5084
    (5, 1.51575, 1.60815),
    (10, 1.30382, 1.31980),
    (15, 1.13575, 1.13750),
    (20, 1.00000, 1.00024),
    (25, 0.88860, 0.88926),
    (30, 0.79595, 0.79610),
    (35, 0.71798, 0.71613),
]


@pytest.mark.parametrize(("temp", "r_iapws", "r_astm"), R_TABLE)
def test_cv5_temperature_factor_table(temp, r_iapws, r_astm):
    # domain-reference CV5 / §4.4 table
    from service.engine.water import r_t_d5084, viscosity_ratio

    assert viscosity_ratio(temp) == pytest.approx(r_iapws, abs=1e-4)
    assert r_t_d5084(temp) == pytest.approx(r_astm, abs=5e-5)


@pytest.mark.parametrize(
    ("temp", "r_iapws", "r_astm"),
    [(12.5, 1.21513, 1.22102), (27, 0.84955, 0.85017), (22, 0.95288, 0.95329)],
)
def test_cv5_extra_points(temp, r_iapws, r_astm):
    # domain-reference CV5 extra points
    from service.engine.water import r_t_d5084, viscosity_ratio

    assert viscosity_ratio(temp) == pytest.approx(r_iapws, abs=1e-4)
    assert r_t_d5084(temp) == pytest.approx(r_astm, abs=5e-5)


def test_cv5_reference_temperature_selectable():
    # domain-reference §1 design consequence: R = η(T)/η(T_ref) for any reference temperature
    payload = cv2()
    payload["options"] = {"reference_temperature": "27 degC"}
    payload["trials"][0]["temperature"] = "20 degC"
    # §4.4 table: R(20→27) = 1/R_20(27) = 1/0.84955
    assert run(payload)["trials"][0]["temperature_factor"] == pytest.approx(1 / 0.84955, abs=2e-4)


# --- CV6: phase relations and compaction (§5), ±0.1 % relative ---------------------------
def cv6(convention: str) -> dict:
    return {
        "method": "constant_rate",
        "options": {"water_density": convention},
        "specimen": {
            "length": "7.32 cm",
            "diameter": "7.11 cm",
            "wet_mass": "560.0 g",
            "water_content": "22.4 %",
            "specific_gravity": 2.72,
            "max_dry_density": "1.680 g/cm**3",
        },
        "trials": [{"flow_rate": "0.02 mL/min", "head_difference": "100 cm"}],
    }


def test_cv6_nominal_water_density():
    # domain-reference CV6 with ρ_w = 1.000 g/cm³
    s = run(cv6("nominal"))["specimen"]
    assert rel(s["volume_m3"], 290.630e-6) < 1e-3
    assert rel(s["bulk_density_kg_per_m3"], 1926.8) < 1e-3
    assert rel(s["dry_density_kg_per_m3"], 1574.2) < 1e-3
    assert rel(s["void_ratio"], 0.7278) < 1e-3
    assert rel(s["porosity"], 0.4212) < 1e-3
    assert rel(s["degree_of_saturation"], 0.837) < 1e-3
    assert rel(s["relative_compaction_pct"], 93.70) < 1e-3


def test_cv6_water_density_at_20c():
    # domain-reference CV6 with ρ_w = 0.99821 g/cm³: e = 0.7247, n = 0.4202, S = 0.841
    s = run(cv6("temperature"))["specimen"]
    assert rel(s["void_ratio"], 0.7247) < 1e-3
    assert rel(s["porosity"], 0.4202) < 1e-3
    assert rel(s["degree_of_saturation"], 0.841) < 1.5e-3  # reference gives 3 figures


# --- CV7: intrinsic permeability and unit conversions (§9), ±0.05 % -----------------------
def test_cv7a_k_of_1e_9_at_20c_in_every_reporting_unit():
    # domain-reference CV7(a): k20 = 1e-9 m/s = 1e-7 cm/s = 2.8346e-4 ft/day = 8.64e-5 m/day;
    # K = 1.0232e-16 m² = 1.0367e-4 D (±0.05 %). A constant-rate trial at 20 °C with
    # k = 10·q (helpers.constant_rate) gives k20 = 1e-9 m/s.
    result = run(constant_rate([1e-9]))["result"]
    assert rel(result["k_ref_m_per_s"], 1e-9) < 1e-12
    assert rel(result["k_ref_cm_per_s"], 1e-7) < 1e-12
    assert rel(result["k_ref_ft_per_day"], 2.8346e-4) < 5e-4
    assert rel(result["k_ref_m_per_day"], 8.64e-5) < 1e-9
    assert rel(result["intrinsic_permeability_m2"], 1.0232e-16) < 5e-4
    assert rel(result["intrinsic_permeability_darcy"], 1.0367e-4) < 5e-4


def test_cv7c_intrinsic_permeability_of_cv3():
    # domain-reference CV7(c): k_T = 1.82554e-9 m/s at 21.5 °C -> K = 1.8018e-16 m²;
    # back to 20 °C with 20 °C properties (iapws package) -> 1.7610e-9 m/s
    body = run(cv3())
    big_k = body["result"]["intrinsic_permeability_m2"]
    assert rel(big_k, 1.8018e-16) < 5e-4
    state = IAPWS95(T=293.15, P=0.101325)
    assert rel(big_k * state.rho * G / state.mu, 1.7610e-9) < 5e-4


# --- CV8: GUM uncertainty (§8), ±0.02 percentage points -----------------------------------
def test_cv8a_constant_head_uncertainty():
    # domain-reference CV8(a): contributions 0.563, 0.333, 0.197, 1.111, 0.417, 0.703 %;
    # u_rel(k_T) = 1.37 %, u_rel(k20) = 1.54 %, U (k=2) = 3.08 %
    payload = cv1()
    payload["apparatus"]["manometer_spacing"] = {"value": 15.0, "unit": "cm", "u": 0.05}
    payload["specimen"]["diameter"] = {"value": 10.16, "unit": "cm", "u": 0.01}
    payload["trials"][0] = {
        "volume": {"value": 355, "unit": "mL", "u": 2},
        "duration": {"value": 120, "unit": "s", "u": 0.5},
        "head_difference": {"value": 4.5, "unit": "cm", "u": 0.05},
        "temperature": {"value": 23.0, "unit": "degC", "u": 0.3},
    }
    body = run(payload)
    c = body["trials"][0]["u_contributions"]
    expected = {
        "volume": 0.00563,
        "apparatus.manometer_spacing": 0.00333,
        "specimen.diameter": 0.00197,
        "head_difference": 0.01111,
        "duration": 0.00417,
        "temperature": 0.00703,
    }
    for name, value in expected.items():
        assert c[name] == pytest.approx(value, abs=2e-4), name
    u_kt = math.sqrt(sum(v * v for n, v in c.items() if n != "temperature"))
    assert u_kt == pytest.approx(0.0137, abs=2e-4)
    assert body["trials"][0]["u_rel"] == pytest.approx(0.0154, abs=2e-4)
    assert body["result"]["u_rel"] == pytest.approx(0.0154, abs=2e-4)
    assert body["result"]["expanded_u_rel"] == pytest.approx(0.0308, abs=2e-4)


def test_cv8b_falling_head_uncertainty():
    # domain-reference CV8(b): contributions 0.707 (a), 0.282 (D), 0.172 (L), 0.280 (h1),
    # 0.400 (h2), 0.028 (Δt), 0.758 % (T); u_rel(k_T) = 0.92 %, u_rel(k20) = 1.19 %, U = 2.39 %
    payload = cv2()
    payload["apparatus"] = {"standpipe_area": {"value": 0.282743, "unit": "cm**2", "u": 0.002}}
    payload["specimen"] = {
        "length": {"value": 11.6, "unit": "cm", "u": 0.02},
        "diameter": {"value": 7.10, "unit": "cm", "u": 0.01},
    }
    payload["trials"][0] = {
        "head_initial": {"value": 100.0, "unit": "cm", "u": 0.1},
        "head_final": {"value": 70.0, "unit": "cm", "u": 0.1},
        "duration": {"value": 3600, "unit": "s", "u": 1},
        "temperature": {"value": 18.0, "unit": "degC", "u": 0.3},
    }
    body = run(payload)
    c = body["trials"][0]["u_contributions"]
    expected = {
        "apparatus.standpipe_area": 0.00707,
        "specimen.diameter": 0.00282,
        "specimen.length": 0.00172,
        "head_initial": 0.00280,
        "head_final": 0.00400,
        "duration": 0.00028,
        "temperature": 0.00758,
    }
    for name, value in expected.items():
        assert c[name] == pytest.approx(value, abs=2e-4), name
    u_kt = math.sqrt(sum(v * v for n, v in c.items() if n != "temperature"))
    assert u_kt == pytest.approx(0.0092, abs=2e-4)
    assert body["result"]["u_rel"] == pytest.approx(0.0119, abs=2e-4)
    assert body["result"]["expanded_u_rel"] == pytest.approx(0.0239, abs=2e-4)


def test_cv8_default_uncertainties_fill_missing_u():
    # domain-reference CV8(a) again, with the u's supplied as defaults (apparatus register path)
    defaults = {
        "volume": "2 mL",
        "manometer_spacing": "0.05 cm",
        "diameter": "0.01 cm",
        "head_difference": "0.5 mm",
        "duration": "0.5 s",
        "temperature": "0.3 degC",
    }
    body = run(cv1(), default_uncertainties=defaults)
    assert body["result"]["u_rel"] == pytest.approx(0.0154, abs=2e-4)


def test_cv8_no_uncertainty_given_gives_null():
    # contract: u_rel comes from every u given; none given -> null
    body = run(cv1())
    assert body["trials"][0]["u_rel"] is None
    assert body["result"]["u_rel"] is None


# --- CV9: rule evaluation (§6; thresholds from memory) -------------------------------------
D5084_SET = BUILT_IN.for_standard(D5084)
D2434_SET = BUILT_IN.for_standard(D2434)


def test_cv9a_gradient_limit():
    # domain-reference CV9(a): k20 = 1.76e-9 m/s, i_max = 17.1 -> within 20; 24.5 -> warning
    rule = D5084_SET.rule("gradient_limit")
    assert checks.gradient_limit(1.76e-9, 17.1, rule).status == "pass"
    assert checks.gradient_limit(1.76e-9, 24.5, rule).status == "warn"


def test_cv9b_steady_state_pass():
    # domain-reference CV9(b): 3.2, 2.9, 3.3, 3.0 e-9 -> mean 3.10e-9, max deviation 6.5 % -> pass
    body = run(constant_rate([3.2e-9, 2.9e-9, 3.3e-9, 3.0e-9], D5084))
    result = check(body, "steady_state")
    assert result["status"] == "pass"
    assert result["measured"] == pytest.approx(0.065, abs=5e-4)


def test_cv9b_steady_state_fail_at_boundary():
    # domain-reference CV9(b): 2.0, 2.6, 1.6, 2.1 e-9 -> mean 2.075e-9; 2.6 is +25.3 % -> fail
    body = run(constant_rate([2.0e-9, 2.6e-9, 1.6e-9, 2.1e-9], D5084))
    result = check(body, "steady_state")
    assert result["status"] == "fail"
    assert result["measured"] == pytest.approx(0.253, abs=5e-4)


def test_cv9b_d5084_uses_last_four_trials():
    # domain-reference §6.1.3 / contract: D5084 representative k = mean of the last four
    payload = cv3()
    trial = payload["trials"][0]
    payload["trials"] = [
        dict(trial, duration=d) for d in ("40000 s", "86400 s", "86400 s", "86400 s", "86400 s")
    ]
    body = run(payload)
    assert body["result"]["trials_used"] == [1, 2, 3, 4]
    assert rel(body["result"]["k_ref_m_per_s"], 1.7604e-9) < 1e-3
    assert check(body, "steady_state")["status"] == "pass"


def test_cv9c_d2434_diameter():
    # domain-reference CV9(c): 12.5 mm max, 40 % retained on 9.5 mm, 152 mm -> fail (needs 229);
    # 30 % retained -> pass
    rule = D2434_SET.rule("specimen_size")
    coarse = checks.specimen_size(rule, 0.152, 0.3, 0.0125, 0.40)
    assert coarse.status == "fail"
    assert coarse.limit * 1000 == pytest.approx(229)  # the limit is in SI (m)
    assert checks.specimen_size(rule, 0.152, 0.3, 0.0125, 0.30).status == "pass"


def test_cv9d_saturation():
    # domain-reference CV9(d): B = 0.96 pass; 0.93 then 0.93 on a stiff material -> conditional
    # pass; 0.93 on a soft clay -> fail
    rule = D5084_SET.rule("saturation")
    flexible = "flexible_wall"
    assert checks.saturation([0.96], False, rule, flexible).status == "pass"
    conditional = checks.saturation([0.93, 0.93], True, rule, flexible)
    assert conditional.status == "warn"
    assert conditional.message.startswith("Conditional pass")
    assert checks.saturation([0.93], False, rule, flexible).status == "fail"
    assert checks.saturation([0.93, 0.93], False, rule, flexible).status == "fail"


# --- hand-computed check values (Darcy's law, continuity; water from the iapws package) ----
def _pumped(**trial: str) -> dict:
    """Constant rate of 0.020 mL/min through L = 7.30 cm, D = 7.10 cm at 20 °C."""
    return {
        "method": "constant_rate",
        "specimen": {"length": "7.30 cm", "diameter": "7.10 cm"},
        "trials": [{"flow_rate": "0.020 mL/min", "temperature": "20 degC", **trial}],
    }


def test_constant_rate_with_head_difference():
    # k = q·L/(A·Δh) (Darcy's law; ASTM D5084 Method D): q = 0.020 mL/min = 3.3333e-10 m³/s,
    # L = 7.30 cm, A = π·(7.10 cm)²/4 = 39.5919 cm², Δh = 100 cm →
    # k = 3.3333e-10·0.073/(39.5919e-4·1.00) = 6.1461e-9 m/s; at 20 °C k20 = k_T.
    body = run(_pumped(head_difference="100 cm"))
    assert rel(body["trials"][0]["k_m_per_s"], 6.1461e-9) < 1e-4
    assert body["trials"][0]["gradient"] == pytest.approx(1.00 / 0.073, rel=1e-9)


def test_k_from_a_pressure_difference():
    # Δh = Δu/(ρ_w(T)·g): 35 kPa at 20 °C with ρ_w = 998.207 kg/m³ (IAPWS-95, iapws package)
    # and g = 9.80665 m/s² (exact) is 3.5754 m of water; with the nominal 1000 kg/m³ it is
    # 3.5690 m. k = q·L/(A·Δh) as above.
    payload = _pumped(pressure_difference="35 kPa")
    q, length, area = 0.020e-6 / 60, 0.073, math.pi * 0.071**2 / 4
    head = 35e3 / (rho_iapws(20.0) * G)
    assert head == pytest.approx(3.5754, abs=1e-4)
    k = run(payload)["trials"][0]["k_m_per_s"]
    assert rel(k, q * length / (area * head)) < 2e-6
    payload["options"] = {"water_density": "nominal"}
    nominal = run(payload)["trials"][0]["k_m_per_s"]
    assert rel(nominal, q * length / (area * 35e3 / (1000 * G))) < 1e-9


def _burettes(k: float, a_in: float, a_out: float, area: float, length: float) -> list:
    """Readings of Δh = h_in − h_out from a numerical integration of the burette system.

    dh_in/dt = −q/a_in, dh_out/dt = +q/a_out with q = k·A·(h_in − h_out)/L (continuity and
    Darcy's law), integrated by fourth-order Runge–Kutta in 1 s steps: an independent route
    to the heads, not the closed-form solution the engine uses.
    """

    def rates(h_in, h_out):
        q = k * area * (h_in - h_out) / length
        return -q / a_in, q / a_out

    h_in, h_out, readings = 1.30, 0.05, []
    for second in range(0, 20001):
        if second % 4000 == 0:
            readings.append({"time": f"{second} s", "head": f"{h_in - h_out!r} m"})
        k1 = rates(h_in, h_out)
        k2 = rates(h_in + 0.5 * k1[0], h_out + 0.5 * k1[1])
        k3 = rates(h_in + 0.5 * k2[0], h_out + 0.5 * k2[1])
        k4 = rates(h_in + k3[0], h_out + k3[1])
        h_in += (k1[0] + 2 * k2[0] + 2 * k3[0] + k4[0]) / 6
        h_out += (k1[1] + 2 * k2[1] + 2 * k3[1] + k4[1]) / 6
    return readings


def test_rising_tailwater_regression_recovers_k_of_an_integrated_run():
    # A run simulated by numerical integration (see _burettes) with k = 2.0e-7 m/s,
    # a_in = 0.710 cm², a_out = 0.950 cm², D = 7.11 cm, L = 7.32 cm (CV3 apparatus):
    # the ln Δh regression with the effective area a_in·a_out/(a_in + a_out) must give k back;
    # the falling-head formula with a_in alone would be 1.747 times too high (CV3 trap).
    k_true, a_in, a_out, length = 2.0e-7, 0.710e-4, 0.950e-4, 0.0732
    area = math.pi * 0.0711**2 / 4
    payload = {
        "method": "falling_head_rising_tail",
        "specimen": {"length": "7.32 cm", "diameter": "7.11 cm"},
        "apparatus": {"headwater_area": "0.710 cm**2", "tailwater_area": "0.950 cm**2"},
        "trials": [
            {
                "readings": _burettes(k_true, a_in, a_out, area, length),
                "temperature": "20 degC",
            }
        ],
    }
    trial = run(payload)["trials"][0]
    assert rel(trial["k_m_per_s"], k_true) < 1e-6
    assert trial["r_squared"] == pytest.approx(1.0, abs=1e-9)
