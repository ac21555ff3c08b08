"""Property tests: invariances the reductions must keep whatever the numbers.

Unit factors are typed here from their definitions (1 in = 2.54 cm, 1 ft = 30.48 cm,
°F = °C·9/5 + 32; NIST SP 811), not taken from the engine's registry.
"""

from __future__ import annotations

import math

from hypothesis import given, settings
from hypothesis import strategies as st

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
