"""One flexible-wall test through every stage, as a technician would type it (invented
figures: a compacted clay under ASTM D5084, falling headwater with rising tailwater). The
demo loads it; the API documentation and the tests use it as their example."""

from __future__ import annotations

from service.stages.models import StageName
from service.stages.service import StageWrite

_B_CHECKS = (  # back pressure, cell before/after, pore before/after [kPa]
    ("130", "150", "200", "130", "161"),
    ("230", "250", "300", "230", "270.5"),
    ("330", "350", "400", "330", "376"),
    ("430", "450", "500", "430", "478"),
)
_VOLUME = (  # minutes, mL expelled
    ("0.25", "0.09"), ("1", "0.17"), ("4", "0.35"), ("9", "0.52"), ("16", "0.70"),
    ("25", "0.87"), ("36", "1.05"), ("64", "1.40"), ("100", "1.74"), ("144", "2.07"),
    ("225", "2.47"), ("400", "2.89"), ("900", "3.09"), ("1440", "3.10"), ("1800", "3.10"),
    ("2160", "3.10"),
)  # fmt: skip
_PANEL = (  # hours, headwater mL, tailwater mL (burettes numbered from the top)
    ("0", "1.00", "20.00"), ("4", "1.37", "19.64"), ("8", "1.73", "19.29"),
    ("12", "2.09", "18.93"), ("16", "2.45", "18.58"), ("20", "2.81", "18.23"),
    ("24", "3.16", "17.89"), ("28", "3.52", "17.55"), ("32", "3.87", "17.20"),
)  # fmt: skip


def example_stages() -> dict[str, StageWrite]:
    """The five stages of one test, in order."""
    return {
        StageName.SETUP: StageWrite(
            entries={
                "membrane": "latex, 0.30 mm",
                "filter_papers": "one at each end",
                "porous_stones": "boiled and de-aired",
                "permeant": "de-aired tap water",
                "diameter": "7.10 cm",
                "length": "7.50 cm",
                "wet_mass": "590.0 g",
                "water_content": "18.5 %",
                "specific_gravity": "2.70",
            }
        ),
        StageName.SATURATION: StageWrite(
            groups={
                "increments": [
                    {
                        "elapsed": f"{t} min",
                        "cell_pressure": f"{c} kPa",
                        "back_pressure": f"{b} kPa",
                    }
                    for t, c, b in (
                        ("0", "50", "30"),
                        ("60", "150", "130"),
                        ("180", "250", "230"),
                        ("360", "350", "330"),
                        ("600", "450", "430"),
                    )
                ],
                "b_checks": [
                    {
                        "back_pressure": f"{b} kPa",
                        "cell_pressure_before": f"{c0} kPa",
                        "cell_pressure_after": f"{c1} kPa",
                        "pore_pressure_before": f"{u0} kPa",
                        "pore_pressure_after": f"{u1} kPa",
                    }
                    for b, c0, c1, u0, u1 in _B_CHECKS
                ],
            }
        ),
        StageName.CONSOLIDATION: StageWrite(
            entries={"cell_pressure": "465 kPa", "back_pressure": "430 kPa"},
            groups={
                "readings": [
                    {"elapsed": f"{t} min", "volume_change": f"{v} mL"} for t, v in _VOLUME
                ]
            },
        ),
        StageName.PERMEATION: StageWrite(
            entries={
                "permeation_method": "falling_head_rising_tail",
                "headwater_area": "0.71 cm**2",
                "tailwater_area": "0.95 cm**2",
            },
            groups={
                "zero_flow": [
                    {
                        "headwater_reading": "4.98 mL",
                        "tailwater_reading": "6.72 mL",
                        "headwater_pressure": "435 kPa",
                        "tailwater_pressure": "435 kPa",
                    }
                ],
                "readings": [
                    {
                        "elapsed": f"{t} h",
                        "headwater_reading": f"{hw} mL",
                        "tailwater_reading": f"{tw} mL",
                        "headwater_pressure": "445 kPa",
                        "tailwater_pressure": "435 kPa",
                        "temperature": "20.4 degC",
                    }
                    for t, hw, tw in _PANEL
                ],
            },
        ),
        StageName.POST_TEST: StageWrite(
            entries={
                "post_diameter": "7.08 cm",
                "post_length": "7.46 cm",
                "post_wet_mass": "607.0 g",
                "post_dry_mass": "497.9 g",
            }
        ),
    }
