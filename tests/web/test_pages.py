"""Sign in and out, the home page per role, sample search, and errors answered as HTML."""

from __future__ import annotations

import re

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session, select

from service.accounts.models import AccessToken, SignInThrottle, User
from service.certificates.models import Certificate, CertificateTest
from service.common import OrganisationKind, Role
from service.deps import SESSION_COOKIE
from service.lab_tests.models import PermeabilityTest
from service.samples.models import Sample
from tests.auth_helpers import sign_in_cookie
from tests.factories import make_organisation, make_project, make_sample, make_test, make_user

PASSWORD = "correct horse 42"


def is_full_page(text: str) -> bool:
    return text.lstrip().lower().startswith("<!doctype html>") and '<html lang="en">' in text


# ---------- sign in ----------


def test_sign_in_page_is_a_labelled_form(web_client: TestClient) -> None:
    response = web_client.get("/sign-in?next=/bench")
    assert response.status_code == 200
    assert is_full_page(response.text)
    assert response.headers["vary"] == "HX-Request"
    assert '<label for="email">' in response.text
    assert '<label for="password">' in response.text
    assert 'name="next" value="/bench"' in response.text


def test_sign_in_sets_the_cookie_and_goes_on(web_client: TestClient, session: Session) -> None:
    user = make_user(session, role=Role.TECHNICIAN, email="tech@example.test")
    session.commit()
    response = web_client.post(
        "/sign-in", data={"email": "Tech@Example.test", "password": PASSWORD, "next": "/bench"}
    )
    assert response.status_code == 303
    assert response.headers["location"] == "/bench"
    assert SESSION_COOKIE in response.cookies
    set_cookie = response.headers["set-cookie"].lower()
    assert "httponly" in set_cookie
    assert "samesite=lax" in set_cookie
    home = web_client.get("/")
    assert home.status_code == 200
    assert user.full_name in home.text


def test_wrong_password_keeps_the_email_and_says_why(
    web_client: TestClient, session: Session
) -> None:
    make_user(session, email="tech@example.test")
    session.commit()
    response = web_client.post("/sign-in", data={"email": "tech@example.test", "password": "no"})
    assert response.status_code == 401
    assert is_full_page(response.text)
    assert 'value="tech@example.test"' in response.text
    assert "do not match an active account" in response.text
    assert SESSION_COOKIE not in response.cookies


def test_repeated_failures_are_counted_and_lock_the_account(
    web_client: TestClient, session: Session
) -> None:
    # The failure count must survive the refused request (service.accounts.signin rule).
    make_user(session, email="tech@example.test")
    session.commit()
    statuses = [
        web_client.post(
            "/sign-in", data={"email": "tech@example.test", "password": "wrong"}
        ).status_code
        for _ in range(3)
    ]
    assert statuses == [401, 401, 401]
    session.commit()
    assert [row.failures for row in session.exec(select(SignInThrottle))] == [3]
    locked = web_client.post("/sign-in", data={"email": "tech@example.test", "password": PASSWORD})
    assert locked.status_code == 429
    assert "Too many failed sign-ins" in locked.text


def test_missing_fields_are_refused_with_422(web_client: TestClient) -> None:
    response = web_client.post("/sign-in", data={"email": "", "password": ""})
    assert response.status_code == 422
    assert "Enter both your email address and your password" in response.text


@pytest.mark.parametrize("target", ["//elsewhere.example/x", "https://elsewhere.example", "/\\x"])
def test_sign_in_never_redirects_off_site(
    web_client: TestClient, session: Session, target: str
) -> None:
    make_user(session, email="tech@example.test")
    session.commit()
    response = web_client.post(
        "/sign-in", data={"email": "tech@example.test", "password": PASSWORD, "next": target}
    )
    assert response.status_code == 303
    assert response.headers["location"] == "/"


def test_htmx_sign_in_answers_with_hx_redirect(web_client: TestClient, session: Session) -> None:
    make_user(session, email="tech@example.test")
    session.commit()
    response = web_client.post(
        "/sign-in",
        data={"email": "tech@example.test", "password": PASSWORD, "next": "/bench"},
        headers={"HX-Request": "true"},
    )
    assert response.status_code == 200
    assert response.headers["hx-redirect"] == "/bench"
    assert "HX-Request" in response.headers["vary"]


# ---------- sign out ----------


def test_sign_out_without_csrf_is_refused(web_client: TestClient, session: Session) -> None:
    user = make_user(session)
    sign_in_cookie(session, web_client, user)
    response = web_client.post("/sign-out")
    assert response.status_code == 403
    assert is_full_page(response.text)
    assert "CSRF token missing or wrong" in response.text


def test_sign_out_revokes_the_session(web_client: TestClient, session: Session) -> None:
    user = make_user(session)
    csrf = sign_in_cookie(session, web_client, user)
    response = web_client.post("/sign-out", data={"csrf_token": csrf["X-CSRF-Token"]})
    assert response.status_code == 303
    assert response.headers["location"] == "/sign-in?flash=signed-out"
    token = session.exec(AccessToken.__table__.select()).first()  # type: ignore[attr-defined]
    assert token is not None
    assert token.revoked_at is not None
    web_client.cookies.clear()
    page = web_client.get("/sign-in?flash=signed-out")
    assert "You are signed out." in page.text


# ---------- home ----------


def test_home_sends_visitors_to_sign_in(web_client: TestClient) -> None:
    response = web_client.get("/")
    assert response.status_code == 303
    assert response.headers["location"] == "/sign-in"


def test_technician_home_lists_only_my_active_tests(
    web_client: TestClient, session: Session
) -> None:
    me = make_user(session, role=Role.TECHNICIAN)
    other = make_user(session, role=Role.TECHNICIAN, organisation=None)
    mine = make_sample(session, lab_id="26-0101")
    theirs = make_sample(session, lab_id="26-0102")
    done = make_sample(session, lab_id="26-0103")
    make_test(session, sample=mine, technician_id=me.id, state="running")
    make_test(session, sample=theirs, technician_id=other.id, state="running")
    make_test(session, sample=done, technician_id=me.id, state="approved")
    sign_in_cookie(session, web_client, me)
    page = web_client.get("/")
    assert page.status_code == 200
    assert "My tests" in page.text
    assert "26-0101" in page.text
    assert "26-0102" not in page.text
    assert "26-0103" not in page.text
    assert 'data-state="running"' in page.text


def test_client_home_lists_only_their_own_projects(
    web_client: TestClient, session: Session
) -> None:
    client_org = make_organisation(session, name="Alder Works")
    other_org = make_organisation(session, name="Birch Civil")
    user = make_user(session, role=Role.CLIENT, organisation=client_org)
    ours = make_project(session, client=client_org, number="P-OURS", name="Reservoir liner")
    make_project(session, client=other_org, number="P-THEIRS", name="Quarry cap")
    make_sample(session, project=ours)
    make_sample(session, project=ours)
    sign_in_cookie(session, web_client, user)
    page = web_client.get("/")
    assert "P-OURS" in page.text
    assert "2 samples" in page.text
    assert "P-THEIRS" not in page.text


@pytest.mark.parametrize("role", [Role.LAB_MANAGER, Role.REVIEWER, Role.ADMIN])
def test_office_home_shows_counts_and_the_queue(
    web_client: TestClient, session: Session, role: Role
) -> None:
    lab = make_organisation(session, kind=OrganisationKind.LAB, name="Lab")
    user = make_user(session, role=role, organisation=lab)
    make_test(session, state="submitted")
    make_test(session, state="submitted", technician_id=user.id)
    sign_in_cookie(session, web_client, user)
    page = web_client.get("/")
    assert page.status_code == 200
    assert 'href="/queue"' in page.text
    assert 'data-testid="state-counts"' in page.text
    if role == Role.ADMIN:
        assert 'id="review-title"' not in page.text
    else:
        # Nobody reviews their own test: one of the two submitted tests is listed.
        listed = page.text.split('id="review-title"')[1]
        assert listed.count('href="/tests/') == 1


# ---------- search ----------


def test_search_opens_the_sample_by_lab_id(web_client: TestClient, session: Session) -> None:
    user = make_user(session)
    sample = make_sample(session, lab_id="26-0042")
    sign_in_cookie(session, web_client, user)
    response = web_client.get("/search", params={"q": " 26-0042 "})
    assert response.status_code == 303
    assert response.headers["location"] == f"/samples/{sample.id}"
    htmx = web_client.get("/search", params={"q": "26-0042"}, headers={"HX-Request": "true"})
    assert htmx.headers["hx-redirect"] == f"/samples/{sample.id}"


def test_search_lists_several_matches_as_page_or_fragment(
    web_client: TestClient, session: Session
) -> None:
    user = make_user(session)
    make_sample(session, lab_id="26-0050", client_sample_id="BH1-U3")
    make_sample(session, lab_id="26-0051", client_sample_id="bh1-u3")
    sign_in_cookie(session, web_client, user)
    page = web_client.get("/search", params={"q": "BH1-U3"})
    assert page.status_code == 200
    assert is_full_page(page.text)
    assert "26-0050" in page.text
    assert "26-0051" in page.text
    fragment = web_client.get("/search", params={"q": "BH1-U3"}, headers={"HX-Request": "true"})
    assert fragment.status_code == 200
    assert not is_full_page(fragment.text)
    assert 'id="search-results"' in fragment.text
    assert fragment.headers["vary"] == "HX-Request"


def test_client_cannot_find_another_clients_sample(
    web_client: TestClient, session: Session
) -> None:
    ours = make_organisation(session, name="Alder Works")
    user = make_user(session, role=Role.CLIENT, organisation=ours)
    make_sample(session, lab_id="26-0077")  # another client's project
    sign_in_cookie(session, web_client, user)
    response = web_client.get("/search", params={"q": "26-0077"})
    assert response.status_code == 404
    assert "No sample you can see" in response.text


def test_search_needs_sign_in(web_client: TestClient) -> None:
    response = web_client.get("/search", params={"q": "26-0001"})
    assert response.status_code == 303
    assert response.headers["location"] == "/sign-in?next=/search%3Fq%3D26-0001"


# ---------- errors as HTML for pages, JSON for the API ----------


def test_page_needing_a_role_answers_403_as_a_page(
    web_client: TestClient, session: Session
) -> None:
    user = make_user(session, role=Role.CLIENT)
    sign_in_cookie(session, web_client, user)
    response = web_client.get("/bench")
    assert response.status_code == 403
    assert is_full_page(response.text)
    assert "this needs one of the roles" in response.text


def test_htmx_request_without_session_is_sent_to_sign_in(web_client: TestClient) -> None:
    response = web_client.post(
        "/bench/preview",
        data={"method": "falling_head"},
        headers={"HX-Request": "true", "HX-Current-URL": "http://testserver/bench"},
    )
    assert response.status_code == 401
    assert response.headers["hx-redirect"] == "/sign-in?next=/bench"


def test_unknown_page_is_an_html_404_but_the_api_keeps_json(web_client: TestClient) -> None:
    page = web_client.get("/no-such-page")
    assert page.status_code == 404
    assert is_full_page(page.text)
    assert "There is no page at /no-such-page" in page.text
    fragment = web_client.get("/no-such-page", headers={"HX-Request": "true"})
    assert fragment.status_code == 404
    assert not is_full_page(fragment.text)
    api = web_client.get("/api/v1/no-such-thing")
    assert api.status_code == 404
    assert api.headers["content-type"] == "application/problem+json"
    assert api.json()["status"] == 404
    assert api.json()["detail"] == "there is nothing at /api/v1/no-such-thing"


def test_api_service_errors_stay_json(web_client: TestClient) -> None:
    response = web_client.get("/api/v1/auth/tokens")
    assert response.status_code == 401
    assert response.headers["content-type"] == "application/problem+json"
    assert response.json()["code"] == "not_authenticated"


def test_web_error_handling_installs_once(web_client: TestClient) -> None:
    from service.web.errors import install_web_error_handling

    app = web_client.app
    install_web_error_handling(app)  # type: ignore[arg-type]
    assert web_client.get("/no-such-page").status_code == 404


def test_footer_carries_the_usual_cautions(web_client: TestClient) -> None:
    text = web_client.get("/sign-in").text
    assert "licensed engineer under local codes and regulations" in text
    assert "the hydraulic conductivity of the soil in the field can differ" in text


def _certify(session: Session, test: PermeabilityTest, number: str, issuer: User) -> None:
    """A certificate row reporting `test` (the search reads its number only)."""
    sample = session.get(Sample, test.sample_id)
    assert sample is not None
    assert test.id is not None
    assert issuer.id is not None
    certificate = Certificate(
        number=number,
        kind="sample",
        project_id=sample.project_id,
        sample_id=sample.id,
        issued_by_id=issuer.id,
        pdf=b"%PDF-",
        sha256="0" * 64,
        signature="-",
        key_id="-",
        verification_code=f"CODE-{number[-4:]}",
    )
    session.add(certificate)
    session.flush()
    assert certificate.id is not None
    session.add(CertificateTest(certificate_id=certificate.id, test_id=test.id))
    session.commit()


@pytest.mark.parametrize(
    ("typed", "found"),
    [
        ("0417", ["26-0417"]),  # part of a lab ID
        ("bh-07/u2", ["26-0418"]),  # a client's sample ID, letter case ignored
        ("rv-2026", ["26-0417", "26-0418"]),  # part of a project number
        ("SC-26-0417", ["26-0417"]),  # a certificate number
        ("%", []),  # wildcards are taken as typed
        ("_", []),
    ],
)
def test_search_finds_partial_ids_client_ids_projects_and_certificates(
    web_client: TestClient, session: Session, typed: str, found: list[str]
) -> None:
    user = make_user(session, role=Role.LAB_MANAGER)
    project = make_project(session, number="RV-2026-014")
    first = make_sample(session, project=project, lab_id="26-0417", client_sample_id="BH-05/U1")
    make_sample(session, project=project, lab_id="26-0418", client_sample_id="BH-07/U2")
    make_sample(session, lab_id="26-0500", client_sample_id="TP-1")  # another project
    _certify(session, make_test(session, sample=first), "SC-26-0417", user)
    sign_in_cookie(session, web_client, user)
    response = web_client.get("/search", params={"q": typed}, follow_redirects=False)
    if len(found) == 1:
        assert response.status_code == 303
        sample = session.exec(select(Sample).where(Sample.lab_id == found[0])).one()
        assert response.headers["location"] == f"/samples/{sample.id}"
    elif found:
        assert response.status_code == 200
        listed = re.findall(r'<a href="/samples/\d+">([^<]+)</a>', response.text)
        assert sorted(listed) == found
        assert "project RV-2026-014" in response.text
    else:
        assert response.status_code == 404


def test_a_client_search_by_project_number_stays_in_their_projects(
    web_client: TestClient, session: Session
) -> None:
    ours = make_organisation(session, name="Alder Works")
    user = make_user(session, role=Role.CLIENT, organisation=ours)
    make_sample(
        session, project=make_project(session, client=ours, number="AW-11"), lab_id="26-0601"
    )
    make_sample(session, project=make_project(session, number="AW-12"), lab_id="26-0602")
    sign_in_cookie(session, web_client, user)
    response = web_client.get("/search", params={"q": "AW-1"}, follow_redirects=False)
    assert response.status_code == 303  # one sample of theirs: opened
    assert response.headers["location"].startswith("/samples/")
    mine = session.exec(select(Sample).where(Sample.lab_id == "26-0601")).one()
    assert response.headers["location"] == f"/samples/{mine.id}"
