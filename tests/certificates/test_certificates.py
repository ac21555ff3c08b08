"""Certificates: content from the database, signing, revisions, withdrawal, access scoping."""

from __future__ import annotations

import base64
import io

import pytest
from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives.serialization import load_pem_public_key
from fastapi.testclient import TestClient
from pypdf import PdfReader
from sqlmodel import Session, select

from service.audit.service import history
from service.certificates.models import Certificate
from service.certificates.service import (
    check_upload,
    issue_project_certificate,
    issue_sample_certificate,
    normalise_code,
)
from service.common import CertificateState, Role, TestState
from service.errors import InvalidTransition, PermissionDenied
from service.lab_tests.models import PermeabilityTest
from service.signoffs.models import SignOff
from tests.auth_helpers import bearer
from tests.certificates.arrange import (
    HEADS_CM,
    World,
    add_approved_test,
    expected_k_method_c,
)
from tests.factories import make_organisation, make_user


def pdf_text(pdf: bytes) -> str:
    return "\n".join(page.extract_text() for page in PdfReader(io.BytesIO(pdf)).pages)


def written(value: float) -> str:
    """A figure as a certificate prints it: three significant figures times a power of ten
    with a superscript exponent (typography: common practice, no source)."""
    mantissa, exponent = f"{value:.2E}".split("E")
    superscript = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")
    return f"{mantissa} × 10{str(int(exponent)).translate(superscript)}"


def issue(session: Session, world: World) -> Certificate:
    assert world.sample.id is not None
    certificate = issue_sample_certificate(session, world.sample.id, actor=world.manager)
    session.commit()
    return certificate


def test_stored_k_agrees_with_the_method_c_equation(world: World) -> None:
    # Falling headwater / rising tailwater equation of ASTM D5084 Method C (from memory);
    # every trial at 20.0 degC, so k20 = k at test temperature.
    assert world.test.result is not None
    for (h1, h2), output in zip(HEADS_CM, world.test.result["trials"], strict=True):
        assert output["k_ref_m_per_s"] == pytest.approx(expected_k_method_c(h1, h2), rel=1e-6)


def test_pdf_text_shows_the_stored_numbers(session: Session, world: World) -> None:
    certificate = issue(session, world)
    text = pdf_text(certificate.pdf)
    result = world.test.result
    assert result is not None
    summary = result["result"]
    assert f"{written(summary['k_ref_m_per_s'])} m/s" in text
    for output in result["trials"]:
        assert written(output["k_ref_m_per_s"]) in text
    u = summary["expanded_u_rel"] * summary["k_ref_m_per_s"]
    assert f"± {written(u)} m/s" in " ".join(text.split())  # justified lines space words out
    assert f"{result['specimen']['dry_density_kg_per_m3']:.0f} kg/m³" in text
    assert "E-" not in text  # never programmers' notation
    assert f"{result['specimen']['void_ratio']:.3f}" in text
    assert f"{result['specimen']['degree_of_saturation'] * 100:.1f} %" in text
    for typed in ("71.10 mm", "73.20 mm", "560.0 g", "22.4 %", "550 kPa", "h₁ 125.0 cm"):
        assert typed in text
    assert "26-0107" in text
    assert "BH-07/U3" in text
    assert "4.50 m to 4.95 m" in text
    assert "ASTM D5084" in text
    assert "Complies" in text
    assert certificate.number in text
    assert certificate.verification_code in text
    pages = len(PdfReader(io.BytesIO(certificate.pdf)).pages)
    assert 2 <= pages <= 3
    for page in range(1, pages + 1):  # every page numbered "n of N"
        assert f"Page {page} of {pages}" in text
    assert "licensed engineer" in text
    assert "field can differ" in text
    for name in ("Tam Ridley", "Ines Varga", "Olu Brand"):
        assert name in text


def test_pdf_embeds_a_font_that_prints_symbols_and_any_script(
    session: Session, world: World
) -> None:
    # A client name in Greek and Cyrillic (scripts DejaVu Sans covers), and the symbols the
    # core PDF fonts lose.
    world.client_org.name = "Γεωτεχνική Κοιλάδας · Геотехника Долины"
    session.add(world.client_org)
    session.commit()
    certificate = issue(session, world)
    text = pdf_text(certificate.pdf)
    assert "Γεωτεχνική Κοιλάδας · Геотехника Долины" in text
    assert "× 10⁻" in text
    assert "≤" in text
    assert "±" in text
    assert "cm²" in text
    fonts = {
        str(font.get("/BaseFont", ""))
        for page in PdfReader(io.BytesIO(certificate.pdf)).pages
        for font in page["/Resources"]["/Font"].values()
        for font in [font.get_object()]
    }
    assert any("DejaVu" in name for name in fonts), fonts


def test_issuing_moves_tests_to_issued_with_a_sign_off_and_audit(
    session: Session, world: World
) -> None:
    certificate = issue(session, world)
    session.refresh(world.test)
    assert world.test.state == TestState.ISSUED
    assert world.test.issued_at is not None
    signoff = session.exec(
        select(SignOff).where(SignOff.test_id == world.test.id, SignOff.meaning == "issued")
    ).one()
    assert signoff.content_hash == certificate.sha256
    assert signoff.user_id == world.manager.id
    assert world.test.id is not None
    assert certificate.id is not None
    test_changes = history(session, "permeability_test", world.test.id)
    assert ("approved", "issued") in [(e.old_value, e.new_value) for e in test_changes]
    assert "sha256" in {e.field for e in history(session, "certificate", certificate.id)}


def test_only_approved_tests_reach_a_certificate(session: Session, world: World) -> None:
    world.test.state = TestState.SUBMITTED
    session.add(world.test)
    session.commit()
    assert world.sample.id is not None
    with pytest.raises(InvalidTransition, match="no approved test"):
        issue_sample_certificate(session, world.sample.id, actor=world.manager)


def test_issuing_twice_without_a_new_approval_is_refused(session: Session, world: World) -> None:
    issue(session, world)
    assert world.sample.id is not None
    with pytest.raises(InvalidTransition):
        issue_sample_certificate(session, world.sample.id, actor=world.manager)


@pytest.mark.parametrize("role", [Role.TECHNICIAN, Role.CLIENT, Role.ADMIN])
def test_only_reviewers_and_managers_issue(session: Session, world: World, role: Role) -> None:
    user = make_user(
        session, role=role, organisation=world.client_org if role == Role.CLIENT else world.lab
    )
    assert world.sample.id is not None
    with pytest.raises(PermissionDenied):
        issue_sample_certificate(session, world.sample.id, actor=user)


def test_signature_verifies_with_the_published_key(
    session: Session, client: TestClient, world: World
) -> None:
    certificate = issue(session, world)
    published = client.get("/.well-known/seepline-signing-key").json()
    assert published["algorithm"] == "Ed25519"
    assert published["key_id"] == certificate.key_id
    downloaded = client.get(
        f"/api/v1/certificates/{certificate.id}/pdf", headers=bearer(session, world.client_user)
    )
    assert downloaded.status_code == 200
    assert downloaded.headers["content-type"] == "application/pdf"
    public_key = load_pem_public_key(published["public_key_pem"].encode())
    # Ed25519 verification by the cryptography library (RFC 8032); raises if it fails.
    public_key.verify(base64.b64decode(certificate.signature), downloaded.content)  # type: ignore[union-attr,call-arg]


def test_changing_one_byte_fails_verification(session: Session, world: World) -> None:
    certificate = issue(session, world)
    tampered = bytearray(certificate.pdf)
    middle = len(tampered) // 2
    tampered[middle] = (tampered[middle] + 1) % 256
    report = check_upload(session, bytes(tampered))
    assert not report.genuine
    assert "Not genuine" in report.message
    from service.certificates.signing import load_signing_key

    with pytest.raises(InvalidSignature):
        load_signing_key().public_key.verify(
            base64.b64decode(certificate.signature), bytes(tampered)
        )
    assert check_upload(session, certificate.pdf).genuine


def test_a_correction_supersedes_the_old_revision(
    session: Session, client: TestClient, world: World
) -> None:
    first = issue(session, world)
    world.test.state = TestState.ISSUED
    correction = add_approved_test(
        session,
        sample=world.sample,
        technician=world.technician,
        reviewer=world.reviewer,
        permeameter=world.permeameter,
        length_text="72.30 mm",
        revision=2,
        supersedes=world.test,
        correction_reason="Specimen length transcribed as 73.20 mm; the datasheet reads 72.30 mm.",
    )
    session.commit()
    assert world.sample.id is not None
    second = issue_sample_certificate(session, world.sample.id, actor=world.manager)
    session.commit()
    session.refresh(first)
    session.refresh(world.test)
    assert (second.number, second.revision) == (first.number, 2)
    assert second.supersedes_id == first.id
    assert first.state == CertificateState.SUPERSEDED
    assert first.superseded_by_id == second.id
    assert world.test.state == TestState.SUPERSEDED
    assert session.get(PermeabilityTest, correction.id).state == TestState.ISSUED  # type: ignore[union-attr]
    text = pdf_text(second.pdf)
    assert f"replaces certificate {first.number} rev 1" in text
    assert "72.30 mm" in text
    assert correction.result is not None
    assert f"{written(correction.result['result']['k_ref_m_per_s'])} m/s" in text

    page = client.get(f"/verify/{first.verification_code}")
    assert page.status_code == 200
    assert 'data-state="superseded"' in page.text
    assert f"superseded by {second.number} rev 2" in page.text
    assert f"/verify/{second.verification_code}" in page.text
    api = client.get(f"/api/v1/certificates/verify/{first.verification_code}").json()
    assert api["state"] == "superseded"
    assert api["is_current"] is False
    assert api["superseded_by"] == f"{second.number} rev 2"
    old_pdf = client.get(
        f"/api/v1/certificates/{first.id}/pdf", headers=bearer(session, world.client_user)
    )
    assert old_pdf.content == first.pdf
    uploaded = client.post(
        "/api/v1/certificates/verify", files={"file": ("old.pdf", first.pdf, "application/pdf")}
    ).json()
    assert uploaded["genuine"] is True
    assert uploaded["current"] is False
    assert "superseded" in uploaded["message"]


def test_withdrawal_needs_a_reason_and_shows_on_verification(
    session: Session, client: TestClient, world: World
) -> None:
    certificate = issue(session, world)
    headers = bearer(session, world.reviewer)
    url = f"/api/v1/certificates/{certificate.id}/withdraw"
    refused = client.post(url, json={"reason": "  "}, headers=headers)
    assert refused.status_code == 422
    assert refused.json()["errors"][0]["loc"] == ["body", "reason"]
    done = client.post(url, json={"reason": "Issued to the wrong client contact."}, headers=headers)
    assert done.status_code == 200
    assert done.json()["state"] == "withdrawn"
    again = client.post(url, json={"reason": "twice"}, headers=headers)
    assert again.status_code == 409
    page = client.get(f"/verify/{certificate.verification_code}")
    assert 'data-state="withdrawn"' in page.text
    assert "Issued to the wrong client contact." in page.text
    upload = client.post("/verify", files={"pdf": ("c.pdf", certificate.pdf, "application/pdf")})
    assert upload.status_code == 200
    assert 'data-genuine="yes"' in upload.text
    assert 'data-current="no"' in upload.text


def test_a_withdrawn_certificate_can_be_reissued_as_the_next_revision(
    session: Session, client: TestClient, world: World
) -> None:
    first = issue(session, world)
    response = client.post(
        f"/api/v1/certificates/{first.id}/withdraw",
        json={"reason": "Client name misspelt."},
        headers=bearer(session, world.manager),
    )
    assert response.status_code == 200
    reissued = client.post(
        f"/api/v1/certificates/samples/{world.sample.id}", headers=bearer(session, world.manager)
    )
    assert reissued.status_code == 201
    assert reissued.json()["revision"] == 2
    status = client.get(f"/api/v1/certificates/verify/{first.verification_code}").json()
    assert status["state"] == "withdrawn"
    assert status["superseded_by"] == f"{first.number} rev 2"


def test_issue_and_list_through_the_api(session: Session, client: TestClient, world: World) -> None:
    response = client.post(
        f"/api/v1/certificates/samples/{world.sample.id}",
        json={"reason": ""},
        headers=bearer(session, world.reviewer),
    )
    assert response.status_code == 201
    body = response.json()
    assert body["test_ids"] == [world.test.id]
    assert body["verify_url"].endswith(f"/verify/{body['verification_code']}")
    assert "pdf" not in body
    listed = client.get(
        "/api/v1/certificates",
        params={"sample_id": world.sample.id},
        headers=bearer(session, world.client_user),
    )
    assert [c["id"] for c in listed.json()["items"]] == [body["id"]]
    assert listed.json()["total"] == 1
    technician = client.post(
        f"/api/v1/certificates/samples/{world.sample.id}",
        headers=bearer(session, world.technician),
    )
    assert technician.status_code == 403


def test_a_client_of_another_organisation_gets_404(
    session: Session, client: TestClient, world: World
) -> None:
    certificate = issue(session, world)
    stranger = make_user(session, role=Role.CLIENT, organisation=make_organisation(session))
    headers = bearer(session, stranger)
    for url in (
        f"/api/v1/certificates/{certificate.id}",
        f"/api/v1/certificates/{certificate.id}/pdf",
        f"/api/v1/certificates?project_id={world.project.id}",
        f"/api/v1/certificates?sample_id={world.sample.id}",
    ):
        assert client.get(url, headers=headers).status_code == 404, url
    assert client.get("/api/v1/certificates", headers=headers).json()["items"] == []
    own = client.get(
        f"/api/v1/certificates/{certificate.id}", headers=bearer(session, world.client_user)
    )
    assert own.status_code == 200


def test_project_summary_lists_the_issued_tests(session: Session, world: World) -> None:
    assert world.project.id is not None
    with pytest.raises(InvalidTransition, match="no issued test"):
        issue_project_certificate(session, world.project.id, actor=world.manager)
    issue(session, world)
    summary = issue_project_certificate(session, world.project.id, actor=world.manager)
    session.commit()
    text = pdf_text(summary.pdf)
    assert world.test.result is not None
    assert "Project summary" in text
    assert "26-0107" in text
    assert written(world.test.result["result"]["k_ref_m_per_s"]) in text
    assert summary.kind == "project"
    second = issue_project_certificate(session, world.project.id, actor=world.manager)
    session.commit()
    session.refresh(summary)
    assert second.revision == 2
    assert summary.state == CertificateState.SUPERSEDED


def test_verification_page_for_an_unknown_code_is_404(client: TestClient, engine: object) -> None:
    page = client.get("/verify/ABCD-EFGH-JKMN")
    assert page.status_code == 404
    assert 'data-state="unknown"' in page.text
    assert client.get("/api/v1/certificates/verify/ABCD-EFGH-JKMN").status_code == 404


def test_codes_are_accepted_as_typed(session: Session, client: TestClient, world: World) -> None:
    certificate = issue(session, world)
    typed = certificate.verification_code.replace("-", " ").lower()
    assert normalise_code(typed) == certificate.verification_code
    page = client.get(f"/verify/{certificate.verification_code.replace('-', '').lower()}")
    assert page.status_code == 200
    assert certificate.sha256 in page.text


def test_upload_refuses_a_non_pdf_and_a_file_too_large(
    session: Session, client: TestClient, world: World, monkeypatch: pytest.MonkeyPatch
) -> None:
    issue(session, world)
    not_pdf = client.post(
        "/api/v1/certificates/verify", files={"file": ("x.pdf", b"hello", "application/pdf")}
    ).json()
    assert not_pdf["genuine"] is False
    assert "not a PDF" in not_pdf["message"]
    from service.config import get_settings

    monkeypatch.setattr(get_settings(), "verify_upload_max_bytes", 1024)
    big = b"%PDF-" + b"0" * 2048
    api = client.post(
        "/api/v1/certificates/verify", files={"file": ("big.pdf", big, "application/pdf")}
    )
    assert api.status_code == 413
    assert "file" in api.json()["detail"]
    page = client.post("/verify", files={"pdf": ("big.pdf", big, "application/pdf")})
    assert page.status_code == 413
    assert "larger than" in page.text
    missing = client.post("/verify", data={})
    assert missing.status_code == 422
