"""Display units: SI values shown in the user's system with the unit beside the figure."""

from __future__ import annotations

import pytest

from service.web.display import show, unit_label


@pytest.mark.parametrize(
    ("value", "quantity", "units", "expected"),
    [
        # 1e-9 m/s = 2.835e-4 ft/day (domain-reference §9.2 and CV7a, computed from 1 ft = 0.3048 m)
        (1.0e-9, "k", "us", "2.83 × 10⁻⁴"),
        (1.0e-9, "k", "si", "1.00 × 10⁻⁹"),
        # 1 pcf = 16.01846 kg/m³ (domain-reference §9.1), so 1700 kg/m³ = 106 pcf
        (1700.0, "density", "us", "106"),
        # 1 ft = 0.3048 m exactly (international foot, 1959)
        (3.048, "length", "us", "10"),
        # 1 psi = 6.894757 kPa (domain-reference §9.1)
        (6.894757, "pressure", "us", "1"),
    ],
)
def test_figures_convert_by_the_published_factors(
    value: float, quantity: str, units: str, expected: str
) -> None:
    shown = str(show(value, quantity, units))
    assert expected in shown
    assert shown.endswith(unit_label(quantity, units))


def test_missing_value_is_a_dash_without_a_unit() -> None:
    assert str(show(None, "k", "us")) == "—"
