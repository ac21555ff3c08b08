"""Uncertainty of k: degrees of freedom, coverage factor, correlation and Type A (methods.md §6).

Outside references: JCGM 100:2008 (GUM) Annex H.1 and Table G.2 (from memory), scipy's
Student t distribution, Python's ``statistics`` module, and hand derivatives of Darcy's law.
"""

from __future__ import annotations

import math
import statistics

import pytest
from scipy import stats  # test-only outside reference

from service.engine.uncertainty import (
    COVERAGE_PROBABILITY,
    coverage_factor,
    student_t_quantile,
    welch_satterthwaite,
)
from tests.engine.helpers import constant_rate, cv1, cv2, cv3, cv4, run


def test_welch_satterthwaite_gum_h1_end_gauge():
    # JCGM 100:2008 Annex H.1 (end-gauge calibration), from memory: contributions 25 nm
    # (ν = 18), 9.7 nm (ν = 25.6), 2.9 nm (ν = 50), 16.6 nm (ν = 2); u_c = 32 nm,
    # ν_eff = 16.7, truncated to 16; t_99(16) = 2.92; U_99 = 93 nm.
    components = [(25.0, 18.0), (9.7, 25.6), (2.9, 50.0), (16.6, 2.0)]
    nu = welch_satterthwaite(components)
    assert nu == pytest.approx(16.7, abs=0.1)
    u_c = math.sqrt(sum(u * u for u, _ in components))
    assert u_c == pytest.approx(32.0, abs=0.5)
    k99 = coverage_factor(nu, 0.99)
    assert k99 == pytest.approx(2.92, abs=0.005)
    assert k99 * u_c == pytest.approx(93.0, abs=1.0)


def test_welch_satterthwaite_single_type_a_component():
    # GUM eq. (G.2b) with one component: ν_eff = ν; with Type B only (ν = ∞): infinite
    assert welch_satterthwaite([(3.0, 5.0)]) == pytest.approx(5.0)
    assert welch_satterthwaite([(3.0, math.inf), (0.0, 4.0)]) == math.inf


GUM_TABLE_G2_9545 = [  # JCGM 100:2008 Table G.2, column p = 95.45 % (from memory)
    (1, 13.97),
    (2, 4.53),
    (3, 3.31),
    (4, 2.87),
    (5, 2.65),
    (6, 2.52),
    (7, 2.43),
    (8, 2.37),
    (9, 2.32),
    (10, 2.28),
    (20, 2.13),
    (50, 2.05),
]


@pytest.mark.parametrize(("nu", "printed"), GUM_TABLE_G2_9545)
def test_student_t_against_gum_table_g2(nu, printed):
    assert student_t_quantile(COVERAGE_PROBABILITY, nu) == pytest.approx(printed, abs=0.005)


@pytest.mark.parametrize("nu", [1, 2, 3, 7, 30, 99, 100, 101, 250, 1000, 10**6])
@pytest.mark.parametrize("p", [0.6827, 0.95, COVERAGE_PROBABILITY, 0.99])
def test_student_t_against_scipy(nu, p):
    # scipy.stats.t.ppf is the reference; both branches (series ≤ 100, Cornish–Fisher above)
    assert student_t_quantile(p, nu) == pytest.approx(stats.t.ppf(0.5 + p / 2, nu), rel=1e-8)


def test_coverage_factor_is_two_for_infinite_degrees_of_freedom():
    # GUM Table G.2, ν = ∞ at 95.45 %: 2.000
    assert coverage_factor(math.inf) == 2.0


def test_shared_thermometer_does_not_shrink_when_trials_are_averaged():
    # methods.md §6.2: one thermometer's u is common to every trial. Four identical trials
    # with only u(T) = 0.3 K keep the single trial's u_rel; treated as independent it would
    # fall by √4. CV3 at 21.5 °C: d ln R/dT from the iapws package below.
    from iapws import IAPWS95

    def eta(t):
        return IAPWS95(T=t + 273.15, P=0.101325).mu

    slope = (math.log(eta(21.51)) - math.log(eta(21.49))) / 0.02
    payload = cv3()
    payload["trials"] = payload["trials"] * 4
    body = run(payload, default_uncertainties={"temperature": "0.3 K"})
    assert body["result"]["u_rel"] == pytest.approx(abs(slope) * 0.3, rel=1e-3)
    assert body["trials"][0]["u_rel"] == pytest.approx(body["result"]["u_rel"], rel=1e-9)


def test_scatter_counts_once_and_instrument_terms_are_averaged_with_their_sign():
    # methods.md §6.2–6.3. Four constant-head trials (CV1 geometry, 20 °C) with u(V) = 2 mL
    # each: for k = V·L/(A·Δh·t) the instrument term of the mean is (1/4)·Σ k_j·u_V/V_j
    # (hand derivative), the scatter s/√4 with s from the statistics module; nothing else.
    volumes = [350.0, 356.0, 353.0, 359.0]
    payload = cv1()
    payload["trials"] = [
        {
            "volume": {"value": v, "unit": "mL", "u": 2.0},
            "duration": "120 s",
            "head_difference": "4.50 cm",
            "temperature": "20 degC",
        }
        for v in volumes
    ]
    body = run(payload)
    ks = [t["k_ref_m_per_s"] for t in body["trials"]]
    mean = statistics.fmean(ks)
    type_b = sum(k * 2.0 / v for k, v in zip(ks, volumes, strict=True)) / 4
    type_a = statistics.stdev(ks) / 2
    assert body["result"]["u_rel"] == pytest.approx(math.hypot(type_a, type_b) / mean, rel=1e-6)
    assert body["result"]["u_rel_type_a"] == pytest.approx(type_a / mean, rel=1e-9)


def test_coverage_factor_from_welch_satterthwaite_when_scatter_dominates():
    # Four determinations with 3 degrees of freedom of scatter and a small thermometer term:
    # ν_eff = u_c⁴/(u_A⁴/3) (GUM G.2b) and k = t_95.45(⌊ν_eff⌋) (scipy); a fixed k = 2 would
    # understate U by about 40 % here (t_95.45(3) = 3.31, GUM Table G.2).
    payload = constant_rate([3.0e-9, 3.4e-9, 2.8e-9, 3.3e-9], "ASTM D5084")
    body = run(payload, default_uncertainties={"temperature": "0.05 K"})
    result = body["result"]
    ks = [t["k_ref_m_per_s"] for t in body["trials"]]
    u_a = statistics.stdev(ks) / 2
    u_c = result["u_rel"] * statistics.fmean(ks)
    nu = u_c**4 / (u_a**4 / 3)
    assert result["effective_degrees_of_freedom"] == pytest.approx(nu, rel=1e-6)
    assert 3.0 <= nu < 4.0
    assert result["coverage_factor"] == pytest.approx(stats.t.ppf(0.97725, 3), rel=1e-5)
    assert result["expanded_u_rel"] == pytest.approx(result["coverage_factor"] * result["u_rel"])


def test_type_b_only_gives_coverage_factor_two_and_no_degrees_of_freedom():
    # contract (engine 1.1): k = 2.0 only when ν_eff is large; with no Type A term ν_eff = ∞
    body = run(cv2(), default_uncertainties={"temperature": "0.3 K"})
    assert body["result"]["coverage_factor"] == 2.0
    assert body["result"]["effective_degrees_of_freedom"] is None


def test_two_readings_carry_the_same_head_terms_as_the_two_point_formula():
    # domain-reference CV8(b) (hand formula §8.3): u(h) = 0.1 cm at 100 cm and 70 cm give
    # 0.280 % and 0.400 %, together √(0.280² + 0.400²) = 0.488 %; a run of two readings must
    # carry the same head term as the two-point reduction.
    payload = cv2()
    payload["trials"] = [
        {
            "readings": [
                {"time": "0 s", "head": {"value": 100.0, "unit": "cm", "u": 0.1}},
                {"time": "3600 s", "head": {"value": 70.0, "unit": "cm", "u": 0.1}},
            ],
            "temperature": "18.0 degC",
        }
    ]
    trial = run(payload)["trials"][0]
    assert trial["u_contributions"]["readings: head"] == pytest.approx(0.00488, abs=5e-5)
    assert trial["u_rel"] == pytest.approx(0.00488, abs=5e-5)


def test_reading_head_uncertainty_matches_whole_path_finite_differences():
    # methods.md §6.4: the head term of a regression run, checked against a numerical
    # derivative of the whole reduction with respect to each reading (an independent route:
    # nudge one head, reduce again) combined in quadrature. CV4 readings, u(h) = 1 mm/√12.
    u_h = 0.1 / math.sqrt(12)
    base = cv4()
    for reading in base["trials"][0]["readings"]:
        value = float(reading["head"].split()[0])
        reading["head"] = {"value": value, "unit": "cm", "u": u_h}
    k0 = run(base)["trials"][0]["k_m_per_s"]
    total = 0.0
    for i in range(len(base["trials"][0]["readings"])):
        nudged = []
        for step in (+1e-4, -1e-4):
            payload = cv4()
            head = float(payload["trials"][0]["readings"][i]["head"].split()[0]) + step
            payload["trials"][0]["readings"][i]["head"] = f"{head!r} cm"
            nudged.append(run(payload)["trials"][0]["k_m_per_s"])
        derivative = (nudged[0] - nudged[1]) / 2e-4  # per cm
        total += (derivative * u_h / k0) ** 2
    trial = run(base)["trials"][0]
    assert trial["u_contributions"]["readings: head"] == pytest.approx(math.sqrt(total), rel=1e-3)
    # the slope's standard error (CV4: 0.10 %) and the head term both count
    assert trial["u_rel"] == pytest.approx(
        math.hypot(math.sqrt(total), trial["slope_std_error_rel"]), rel=1e-3
    )


def test_single_run_type_a_has_readings_minus_two_degrees_of_freedom():
    # methods.md §6.3: one multi-reading trial, no other u: Type A is the slope's standard error
    # with n − 2 = 4 degrees of freedom; adding a thermometer term raises ν_eff (GUM G.2b).
    body = run(cv4(), default_uncertainties={"temperature": "0.01 K"})
    result = body["result"]
    se = body["trials"][0]["slope_std_error_rel"]
    assert result["u_rel_type_a"] == pytest.approx(se, rel=1e-9)
    nu = result["u_rel"] ** 4 / (se**4 / 4)
    assert result["effective_degrees_of_freedom"] == pytest.approx(nu, rel=1e-6)
    assert result["coverage_factor"] == pytest.approx(
        stats.t.ppf(0.97725, math.floor(nu)), rel=1e-4
    )


def test_no_instrument_uncertainty_gives_no_uncertainty_statement():
    # methods.md §6.1: without any stated instrument u, scatter alone is not a statement of
    # uncertainty; the result says nothing rather than a false ±0.1 %.
    body = run(cv4())
    assert body["result"]["u_rel"] is None
    assert body["result"]["coverage_factor"] is None
    assert body["trials"][0]["u_rel"] == pytest.approx(0.0010, abs=5e-5)  # CV4 slope error
