"""Compaction series pages: open a series, add specimens and compaction points through the
forms (typed numbers with the unit picked beside them), refusals beside their fields with
everything typed kept, hostile text escaped, and the plots of k20 against moulding water
content and dry density. Check values: the series of tests/series/arrange.py (S by hand,
Daniel & Benson 1990 from memory); unit conversions by pint's definitions
(1 Mg/m³ = 1000 kg/m³; 1 lb/ft³ = 16.018463 kg/m³)."""

from __future__ import annotations

import re

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session, select

from service.series.models import CompactionSeries, SeriesMember
from tests.auth_helpers import sign_in_cookie
from tests.series.arrange import SPECIMENS, SeriesWorld, build

HTMX = {"HX-Request": "true", "HX-Target": "series-page"}


@pytest.fixture
def world(session: Session) -> SeriesWorld:
    return build(session)


def open_series(web_client: TestClient, csrf: dict[str, str], world: SeriesWorld) -> int:
    response = web_client.post(
        f"/projects/{world.project.id}/series",
        data={"name": "Borrow A", "specific_gravity": "2.70", "csrf_token": csrf["X-CSRF-Token"]},
        headers=csrf,
    )
    assert response.status_code == 303, response.text
    return int(response.headers["location"].rsplit("/", 1)[1])


def add(web_client, csrf, series_id, test_id, label, w, rho, rho_unit="Mg/m**3"):
    return web_client.post(
        f"/series/{series_id}/members",
        data={
            "test_id": str(test_id),
            "label": label,
            "water_content": w,
            "water_content_unit": "%",
            "dry_density": rho,
            "dry_density_unit": rho_unit,
        },
        headers={**csrf, **HTMX},
    )


def test_series_page_shows_members_plots_and_zone(
    session: Session, web_client: TestClient, world: SeriesWorld
) -> None:
    csrf = sign_in_cookie(session, web_client, world.technician)
    series_id = open_series(web_client, csrf, world)
    for label, w, rho, _k in SPECIMENS:
        number = w.split()[0]
        value, unit = rho.split()
        # the same densities typed in the unit picked beside the number
        if unit == "g/cm**3":
            unit = "Mg/m**3"
        response = add(
            web_client, csrf, series_id, world.tests[label].id, label, number, value, unit
        )
        assert response.status_code == 200, response.text
    page = web_client.get(f"/series/{series_id}")
    assert page.status_code == 200
    html = page.text
    assert 'data-testid="plot-k-w"' in html
    assert 'data-testid="plot-k-rho"' in html
    assert 'data-testid="plot-plane"' in html
    # k–w plot: C at w = 16 %, k20 = 8e-10; k–ρd plot: C at 1.78 Mg/m³
    assert re.search(r'data-label="C" data-x="16" data-k="8e-10"', html)
    assert re.search(r'data-label="C" data-x="1.78" data-k="8e-10"', html)
    assert 'class="spec-limit"' in html  # the limit 1e-9 m/s as a line
    assert 'class="zone"' in html  # the acceptable zone shaded on the compaction plane
    # F's saturation 72.1 % (hand value 0.7213) bounds the zone
    assert "72.1 %" in html
    assert "licensed practice" in html  # the caution
    rows = session.exec(select(SeriesMember).where(SeriesMember.series_id == series_id)).all()
    b = next(r for r in rows if r.label == "B")
    assert b.dry_density_text == "1750 kg/m**3"
    assert b.dry_density_kg_per_m3 == pytest.approx(1750.0)


def test_a_density_in_pounds_per_cubic_foot_is_converted(
    session: Session, web_client: TestClient, world: SeriesWorld
) -> None:
    csrf = sign_in_cookie(session, web_client, world.technician)
    series_id = open_series(web_client, csrf, world)
    response = add(
        web_client, csrf, series_id, world.tests["A"].id, "A", "12.0", "106.1", "lb/ft**3"
    )
    assert response.status_code == 200
    member = session.exec(select(SeriesMember)).one()
    assert member.dry_density_kg_per_m3 == pytest.approx(106.1 * 16.018463, rel=1e-6)


def test_a_refusal_keeps_what_was_typed_beside_its_field(
    session: Session, web_client: TestClient, world: SeriesWorld
) -> None:
    csrf = sign_in_cookie(session, web_client, world.technician)
    series_id = open_series(web_client, csrf, world)
    response = add(web_client, csrf, series_id, world.tests["A"].id, "A", "12.0", "2.95")
    assert response.status_code == 422
    assert 'id="err-dry_density"' in response.text
    assert "2700 kg/m³" in response.text  # what is accepted: below G_s·ρ_w
    assert 'value="2.95"' in response.text
    assert 'value="12.0"' in response.text
    assert session.exec(select(SeriesMember)).first() is None


def test_hostile_names_are_shown_as_text(
    session: Session, web_client: TestClient, world: SeriesWorld
) -> None:
    csrf = sign_in_cookie(session, web_client, world.technician)
    series_id = open_series(web_client, csrf, world)
    attack = '<script>alert(1)</script>"><img src=x onerror=alert(2)>'
    response = add(web_client, csrf, series_id, world.tests["A"].id, attack[:40], "12", "1.7")
    assert response.status_code == 200, response.text
    page = web_client.get(f"/series/{series_id}").text
    assert "<script>alert(1)" not in page
    assert "<img src=x" not in page
    assert "&lt;script&gt;alert(1)" in page


def test_a_client_reads_but_cannot_write(
    session: Session, web_client: TestClient, world: SeriesWorld
) -> None:
    csrf = sign_in_cookie(session, web_client, world.technician)
    series_id = open_series(web_client, csrf, world)
    web_client.cookies.clear()
    client_csrf = sign_in_cookie(session, web_client, world.client_user)
    assert web_client.get(f"/series/{series_id}").status_code == 200
    assert "Add a specimen" not in web_client.get(f"/series/{series_id}").text
    refused = add(web_client, client_csrf, series_id, world.tests["A"].id, "A", "12", "1.7")
    assert refused.status_code == 403
    assert session.exec(select(CompactionSeries)).one().id == series_id


def test_the_project_page_links_to_its_series(
    session: Session, web_client: TestClient, world: SeriesWorld
) -> None:
    sign_in_cookie(session, web_client, world.technician)
    page = web_client.get(f"/projects/{world.project.id}").text
    assert f'href="/projects/{world.project.id}/series"' in page


def test_compaction_points_draw_the_curve_and_can_be_removed(
    session: Session, web_client: TestClient, world: SeriesWorld
) -> None:
    # Points on ρ_d = 1.800 − 8·(w − 0.15)² Mg/m³: vertex at w = 15.0 %, 1.800 Mg/m³ by
    # construction (worked by hand: 11 % -> 1.7872, 13 % -> 1.7968)
    csrf = sign_in_cookie(session, web_client, world.technician)
    series_id = open_series(web_client, csrf, world)
    for w, rho in (("11", "1.7872"), ("13", "1.7968"), ("17", "1.7968"), ("19", "1.7872")):
        response = web_client.post(
            f"/series/{series_id}/curve-points",
            data={
                "point_water_content": w,
                "point_water_content_unit": "%",
                "point_dry_density": rho,
                "point_dry_density_unit": "Mg/m**3",
            },
            headers={**csrf, **HTMX},
        )
        assert response.status_code == 200, response.text
    add(web_client, csrf, series_id, world.tests["C"].id, "C", "16.0", "1.780")
    page = web_client.get(f"/series/{series_id}").text
    assert 'class="compaction-curve"' in page
    assert "optimum water content 15.0 %" in page
    assert "1800 kg/m³" in page  # maximum dry density
    refused = web_client.post(
        f"/series/{series_id}/curve-points",
        data={
            "point_water_content": "abc",
            "point_dry_density": "1.7",
            "point_dry_density_unit": "Mg/m**3",
        },
        headers={**csrf, **HTMX},
    )
    assert refused.status_code == 422
    assert 'id="err-point_water_content"' in refused.text
    assert 'value="abc"' in refused.text
    point_id = re.search(r"/curve-points/(\d+)/remove", page)
    assert point_id is not None
    removed = web_client.post(
        f"/series/{series_id}/curve-points/{point_id.group(1)}/remove", headers={**csrf, **HTMX}
    )
    assert removed.status_code == 200
    assert removed.text.count('/remove"') < page.count('/remove"')


def test_opening_a_series_refused_keeps_what_was_typed(
    session: Session, web_client: TestClient, world: SeriesWorld
) -> None:
    csrf = sign_in_cookie(session, web_client, world.technician)
    url = f"/projects/{world.project.id}/series"
    typed = {"name": "Borrow A", "spec_k_max": "1e-9 kg", "material": "grey CLAY"}
    refused = web_client.post(url, data={**typed, "csrf_token": csrf["X-CSRF-Token"]}, headers=csrf)
    assert refused.status_code == 422
    assert 'id="err-spec_k_max"' in refused.text
    for value in typed.values():
        assert f'value="{value}"' in refused.text
    open_series(web_client, csrf, world)
    twice = web_client.post(
        url, data={"name": "Borrow A", "csrf_token": csrf["X-CSRF-Token"]}, headers=csrf
    )
    assert twice.status_code == 409
    assert "already has a compaction series named" in twice.text
    assert session.exec(select(CompactionSeries)).one().name == "Borrow A"
