"""/verify: the code box beside the PDF upload; a code typed there, like the QR code's link,
lands on the result page of that certificate."""

from __future__ import annotations

import re

from fastapi.testclient import TestClient
from sqlmodel import Session

from tests.certificates.arrange import World
from tests.certificates.test_certificates import issue


def test_the_check_page_offers_a_code_box_beside_the_upload(
    client: TestClient, engine: object
) -> None:
    page = client.get("/verify")
    assert page.status_code == 200
    assert re.search(r'<form action="/verify" method="get"[^>]*>', page.text)
    assert '<label for="f-code">Verification code</label>' in page.text
    assert 'name="pdf" type="file"' in page.text


def test_a_code_typed_loosely_lands_on_its_result(
    session: Session, client: TestClient, world: World
) -> None:
    certificate = issue(session, world)
    code = certificate.verification_code
    typed = " " + code.replace("-", " ").lower() + " "
    answer = client.get("/verify", params={"code": typed}, follow_redirects=False)
    assert answer.status_code == 303
    assert answer.headers["location"] == f"/verify/{code}"
    result = client.get(answer.headers["location"])
    assert result.status_code == 200
    assert 'data-testid="verify-status" data-state="issued"' in result.text
    assert certificate.sha256 in result.text
    # The QR code encodes the same result address (the printed link ends in /verify/<code>).
    assert certificate.verification_code in result.text


def test_a_code_of_punctuation_alone_is_refused_beside_the_box(
    client: TestClient, engine: object
) -> None:
    answer = client.get("/verify", params={"code": "-- ..."})
    assert answer.status_code == 422
    assert re.search(r'id="err-code"[^>]*><span>Verification code: type the code', answer.text)
    assert 'value="-- ..."' in answer.text  # what was typed is kept


def test_a_hostile_code_is_neither_run_nor_followed_off_site(
    client: TestClient, engine: object
) -> None:
    hostile = '"><script>alert(1)</script>//evil.example'
    answer = client.get("/verify", params={"code": hostile}, follow_redirects=False)
    assert answer.status_code == 303
    location = answer.headers["location"]
    assert location.startswith("/verify/")
    assert not location.startswith("//")
    assert "<" not in location
    assert "." not in location
    unknown = client.get(location)
    assert unknown.status_code == 404
    assert "<script>alert" not in unknown.text
