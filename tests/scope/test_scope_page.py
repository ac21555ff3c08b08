"""The scope page (/scope): for admins and lab managers, touch-friendly, saved against the
version read, refusals beside their fields with everything typed kept."""

from __future__ import annotations

import re

from fastapi.testclient import TestClient
from sqlmodel import Session, select

from service.scope.models import ScopeRule, ScopeVersion
from tests.scope.arrange import D5084, Lab
from tests.web.manager.conftest import HTMX, signed_in

BAND = "rule.ASTM_D5084.steady_state.limit.band"


def _form(page: str) -> dict[str, str]:
    """Every input and selected option of the page's form, as a browser would send it."""
    values: dict[str, str] = {}
    for tag in re.findall(r"<input [^>]*>", page):
        name = re.search(r'name="([^"]+)"', tag)
        if name is None:
            continue
        value = re.search(r'value="([^"]*)"', tag)
        if 'type="checkbox"' in tag:
            if " checked" in tag:
                values[name.group(1)] = "on"
        else:
            values[name.group(1)] = value.group(1) if value else ""
    for name, body in re.findall(r'<select [^>]*name="([^"]+)"[^>]*>(.*?)</select>', page, re.S):
        chosen = re.search(r'<option value="([^"]*)" selected', body)
        first = re.search(r'<option value="([^"]*)"', body)
        values[name] = (chosen or first).group(1) if (chosen or first) else ""
    return values


def test_scope_page_is_for_managers_and_admins_and_in_their_menu(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    signed_in(session, web_client, lab.technician)
    assert web_client.get("/scope").status_code == 403
    assert 'href="/scope"' not in web_client.get("/").text
    for user in (lab.manager, lab.admin):
        signed_in(session, web_client, user)
        page = web_client.get("/scope")
        assert page.status_code == 200
        assert 'href="/scope"' in page.text
    # Numbers open the decimal keypad; nothing asks for a hardware keyboard.
    limit = re.search(rf'<input id="f-{BAND.replace(".", "-")}"[^>]*>', page.text)
    assert limit is not None
    assert 'inputmode="decimal"' in limit.group(0)
    assert "limit not yet confirmed by the laboratory" in page.text


def test_scope_page_saves_a_confirmation_and_keeps_a_refused_entry(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    csrf = signed_in(session, web_client, lab.manager)
    values = _form(web_client.get("/scope").text)
    values.update(
        {
            "std.ASTM_D5084.in_scope": "on",
            "std.ASTM_D5084.edition": "D5084-16a",
            "rule.ASTM_D5084.steady_state.confirmed": "on",
            "rule.ASTM_D5084.steady_state.clause": "9.5",
            BAND: "twenty five",
        }
    )
    refused = web_client.post("/scope", data=values, headers={**csrf, **HTMX})
    assert refused.status_code == 422
    assert 'value="twenty five"' in refused.text  # what was typed is kept
    assert 'value="D5084-16a"' in refused.text
    message = refused.text.split(f'id="err-{BAND.replace(".", "-")}"')[1][:400]
    assert "Largest deviation of a determination from the mean" in message
    assert "is not a positive number" in message
    assert session.exec(select(ScopeVersion)).first() is None
    session.rollback()  # end the read, so the next one sees what the page saved

    values[BAND] = "0.20"
    saved = web_client.post("/scope", data=values, headers={**csrf, **HTMX})
    assert saved.status_code == 200, saved.text
    assert saved.headers["hx-redirect"] == "/scope?saved=yes"
    rule = session.exec(select(ScopeRule).where(ScopeRule.rule_id == "steady_state")).one()
    assert rule.standard == D5084
    assert rule.limits["band"] == 0.20
    assert rule.clause == "9.5"
    page = web_client.get("/scope?saved=yes").text
    assert "Version 1" in page
    assert "changed by the laboratory" in page
