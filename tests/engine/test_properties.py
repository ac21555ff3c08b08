"""Property tests: invariances the reductions must keep whatever the numbers."""

from __future__ import annotations

import math

from hypothesis import given, settings
from hypothesis import strategies as st

from service.engine import parse_request, reduce
from tests.engine.helpers import run

lengths_cm = st.floats(min_value=2.0, max_value=50.0)
temps_c = st.floats(min_value=5.0, max_value=35.0)


@settings(max_examples=60, deadline=None)
@given(
    length=lengths_cm,
    diameter=st.floats(min_value=3.0, max_value=30.0),
    volume_ml=st.floats(min_value=1.0, max_value=5000.0),
    seconds=st.floats(min_value=10.0, max_value=1e5),
    head_cm=st.floats(min_value=0.5, max_value=500.0),
    temp=temps_c,
)
def test_same_physics_in_other_units_gives_same_k(
    length, diameter, volume_ml, seconds, head_cm, temp
):
    # unit freedom (DESIGN.md): the unit typed must not change k; factors from pint
    si = {
        "method": "constant_head",
        "specimen": {"length": f"{length} cm", "diameter": f"{diameter} cm"},
        "trials": [
            {
                "volume": f"{volume_ml} mL",
                "duration": f"{seconds} s",
                "head_difference": f"{head_cm} cm",
                "temperature": f"{temp} degC",
            }
        ],
    }
    imperial = {
        "method": "constant_head",
        "specimen": {"length": f"{length / 2.54!r} in", "diameter": f"{diameter * 10!r} mm"},
        "trials": [
            {
                "volume": f"{volume_ml / 1000!r} L",
                "duration": f"{seconds / 60!r} min",
                "head_difference": f"{head_cm / 30.48!r} ft",
                "temperature": f"{temp * 9 / 5 + 32!r} degF",
            }
        ],
    }
    a = run(si)["result"]["k_ref_m_per_s"]
    b = run(imperial)["result"]["k_ref_m_per_s"]
    assert math.isclose(a, b, rel_tol=1e-9)


@settings(max_examples=40, deadline=None)
@given(
    heads=st.lists(st.floats(min_value=10.0, max_value=150.0), min_size=2, max_size=6),
    temps=st.lists(temps_c, min_size=6, max_size=6),
    data=st.data(),
)
def test_trial_order_does_not_change_the_mean(heads, temps, data):
    # the mean of all trials is order-free (contract: result = mean of all trials, no standard)
    trials = [
        {
            "head_initial": f"{h + 10} cm",
            "head_final": f"{h} cm",
            "duration": "3600 s",
            "temperature": f"{t} degC",
        }
        for h, t in zip(heads, temps, strict=False)
    ]
    shuffled = data.draw(st.permutations(trials))
    base = {
        "method": "falling_head",
        "specimen": {"length": "10 cm", "diameter": "7 cm"},
        "apparatus": {"standpipe_area": "0.3 cm**2"},
    }
    a = run({**base, "trials": trials})["result"]["k_ref_m_per_s"]
    b = run({**base, "trials": list(shuffled)})["result"]["k_ref_m_per_s"]
    assert math.isclose(a, b, rel_tol=1e-12)


@settings(max_examples=60, deadline=None)
@given(
    h1=st.floats(min_value=20.0, max_value=300.0),
    fall=st.floats(min_value=0.05, max_value=0.9),
    split=st.floats(min_value=0.1, max_value=0.9),
    k_scale=st.floats(min_value=1e-3, max_value=1e3),
    rising=st.booleans(),
)
def test_falling_head_split_in_two_intervals_gives_the_same_k(h1, fall, split, k_scale, rising):
    # exponential head decay (domain-reference §3.1/§3.2): any sub-interval gives the same k
    h3 = h1 * (1 - fall)
    h2 = h1 * (h3 / h1) ** split  # the head on the same exponential at a fraction of the time
    total = 3600.0 * k_scale
    t12 = total * split
    method = "falling_head_rising_tail" if rising else "falling_head"
    apparatus = (
        {"headwater_area": "0.71 cm**2", "tailwater_area": "0.95 cm**2"}
        if rising
        else {"standpipe_area": "0.3 cm**2"}
    )
    base = {
        "method": method,
        "specimen": {"length": "10 cm", "diameter": "7 cm"},
        "apparatus": apparatus,
    }

    def k(trials):
        return [t.k_m_per_s for t in reduce(parse_request({**base, "trials": trials})).trials]

    whole = k(
        [{"head_initial": f"{h1!r} cm", "head_final": f"{h3!r} cm", "duration": f"{total!r} s"}]
    )
    parts = k(
        [
            {"head_initial": f"{h1!r} cm", "head_final": f"{h2!r} cm", "duration": f"{t12!r} s"},
            {
                "head_initial": f"{h2!r} cm",
                "head_final": f"{h3!r} cm",
                "duration": f"{total - t12!r} s",
            },
        ]
    )
    assert math.isclose(parts[0], whole[0], rel_tol=1e-9)
    assert math.isclose(parts[1], whole[0], rel_tol=1e-9)


@settings(max_examples=60, deadline=None)
@given(
    k_true=st.floats(min_value=1e-11, max_value=1e-4),
    temp=temps_c,
)
def test_k_is_finite_positive_and_regression_recovers_exact_decay(k_true, temp):
    # ln h linear in t (domain-reference §3.3): exact readings give back k exactly
    a, length, area = 0.3e-4, 0.1, math.pi * 0.07**2 / 4
    c = k_true * area / (a * length)
    t_end = 0.5 / c
    readings = [
        {"time": f"{t_end * j / 5!r} s", "head": f"{math.exp(-c * t_end * j / 5)!r} m"}
        for j in range(6)
    ]
    payload = {
        "method": "falling_head",
        "specimen": {"length": "10 cm", "diameter": "7 cm"},
        "apparatus": {"standpipe_area": "0.3 cm**2"},
        "trials": [{"readings": readings, "temperature": f"{temp} degC"}],
    }
    body = run(payload)
    assert math.isclose(body["trials"][0]["k_m_per_s"], k_true, rel_tol=1e-7)
    assert body["result"]["k_ref_m_per_s"] > 0
