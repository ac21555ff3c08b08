"""Certificates: issue (per sample or project summary), list, download, withdraw, and the
public verification twins of the /verify page."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any

from fastapi import APIRouter, File, Query, UploadFile
from fastapi.responses import Response
from pydantic import BaseModel, Field
from sqlmodel import Session

from service.api.paging import Paging
from service.certificates.document import verify_url
from service.certificates.models import Certificate
from service.certificates.service import (
    CertificateStatus,
    certificate_status,
    check_upload,
    find_by_code,
    get_certificate,
    issue_project_certificate,
    issue_sample_certificate,
    list_certificates,
    tests_of,
    withdraw_certificate,
)
from service.config import get_settings
from service.deps import CurrentUser, Reviewer, SessionDep
from service.exchange.files import read_limited
from service.paging import Page

router = APIRouter(prefix="/api/v1/certificates", tags=["certificates"])


class IssueRequest(BaseModel):
    reason: str = Field(
        "", max_length=1000, description="why a new revision is issued (default: the corrections)"
    )


class WithdrawRequest(BaseModel):
    reason: str = Field(max_length=1000, description="why the certificate is withdrawn")


class CertificateRead(BaseModel):
    id: int
    number: str
    revision: int
    kind: str
    state: str
    project_id: int
    sample_id: int | None
    supersedes_id: int | None
    superseded_by_id: int | None
    reason: str
    issued_by_id: int
    issued_at: datetime
    withdrawn_at: datetime | None
    sha256: str
    signature: str
    key_id: str
    verification_code: str
    verify_url: str
    pdf_url: str
    test_ids: list[int]


class VerificationRead(BaseModel):
    verification_code: str
    number: str
    revision: int
    kind: str
    state: str
    is_current: bool
    headline: str
    issued_at: datetime
    issued_by: str
    lab_name: str
    sha256: str
    key_id: str
    signature: str
    reason: str
    withdrawn_at: datetime | None
    superseded_by: str
    superseded_by_code: str
    supersedes: str
    supersedes_code: str
    checkpoint_seq: int | None = Field(
        description="the signed log checkpoint the certificate was issued under"
    )
    confirmed: bool = Field(description="false when the stored state cannot be confirmed")
    problem: str = Field(description="why the state cannot be confirmed (empty if it can)")
    pdf_url: str


class UploadVerificationRead(BaseModel):
    sha256: str
    genuine: bool
    current: bool
    message: str
    certificate: VerificationRead | None


def certificate_read(session: Session, certificate: Certificate) -> CertificateRead:
    assert certificate.id is not None
    return CertificateRead(
        **certificate.model_dump(exclude={"pdf"}),
        verify_url=verify_url(certificate.verification_code),
        pdf_url=f"/api/v1/certificates/{certificate.id}/pdf",
        test_ids=[t.id for t in tests_of(session, certificate) if t.id is not None],
    )


def verification_read(found: CertificateStatus) -> VerificationRead:
    return VerificationRead(
        **{name: getattr(found, name) for name in found.__dataclass_fields__},
        headline=found.headline,
        confirmed=found.confirmed,
        pdf_url=f"/verify/{found.verification_code}/pdf",
    )


def pdf_response(certificate: Certificate) -> Response:
    filename = f"{certificate.number}-rev{certificate.revision}.pdf"
    return Response(
        certificate.pdf,
        media_type="application/pdf",
        headers={
            "Content-Disposition": f'attachment; filename="{filename}"',
            "X-Certificate-State": certificate.state,
            "X-Content-SHA256": certificate.sha256,
        },
    )


@router.get("/verify/{verification_code}", response_model=VerificationRead)
def verify_code(verification_code: str, session: SessionDep) -> VerificationRead:
    """Public: the state of the certificate with this code (no sign-in)."""
    return verification_read(certificate_status(session, find_by_code(session, verification_code)))


@router.post("/verify", response_model=UploadVerificationRead)
async def verify_upload(
    file: Annotated[UploadFile, File(description="the certificate PDF to check")],
    session: SessionDep,
) -> UploadVerificationRead:
    """Public: is this PDF genuine (hash stored and signature valid) and current?"""
    data = await read_limited(file, get_settings().verify_upload_max_bytes, "file")
    result = check_upload(session, data)
    return UploadVerificationRead(
        sha256=result.sha256,
        genuine=result.genuine,
        current=result.current,
        message=result.message,
        certificate=verification_read(result.status) if result.status else None,
    )


ISSUED: dict[str, Any] = {"response_model": CertificateRead, "status_code": 201}


@router.post("/samples/{sample_id}", **ISSUED)
def issue_for_sample(
    sample_id: int, session: SessionDep, user: Reviewer, body: IssueRequest | None = None
) -> CertificateRead:
    """Issue the sample's certificate (or its next revision) from its approved tests."""
    reason = body.reason if body else ""
    return certificate_read(
        session, issue_sample_certificate(session, sample_id, actor=user, reason=reason)
    )


@router.post("/projects/{project_id}", **ISSUED)
def issue_for_project(
    project_id: int, session: SessionDep, user: Reviewer, body: IssueRequest | None = None
) -> CertificateRead:
    """Issue a project summary of every currently issued test (or its next revision)."""
    reason = body.reason if body else ""
    return certificate_read(
        session, issue_project_certificate(session, project_id, actor=user, reason=reason)
    )


@router.get("", response_model=Page[CertificateRead])
def list_visible(
    session: SessionDep,
    user: CurrentUser,
    paging: Paging,
    project_id: Annotated[int | None, Query()] = None,
    sample_id: Annotated[int | None, Query()] = None,
) -> Page[CertificateRead]:
    """Certificates you may see, for a project or a sample; clients see their own only
    (another organisation's project or sample answers 404)."""
    rows, total = list_certificates(
        session, user=user, project_id=project_id, sample_id=sample_id, **paging.window
    )
    return paging.of(rows, total, lambda c: certificate_read(session, c))


@router.get("/{certificate_id}", response_model=CertificateRead)
def read_one(certificate_id: int, session: SessionDep, user: CurrentUser) -> CertificateRead:
    return certificate_read(session, get_certificate(session, certificate_id, user=user))


@router.get(
    "/{certificate_id}/pdf",
    response_class=Response,
    responses={200: {"content": {"application/pdf": {}}}},
)
def download_pdf(certificate_id: int, session: SessionDep, user: CurrentUser) -> Response:
    """The frozen PDF exactly as issued (superseded and withdrawn ones too)."""
    return pdf_response(get_certificate(session, certificate_id, user=user))


@router.post("/{certificate_id}/withdraw", response_model=CertificateRead)
def withdraw(
    certificate_id: int, body: WithdrawRequest, session: SessionDep, user: Reviewer
) -> CertificateRead:
    """Withdraw an issued certificate with a reason; verification then says so."""
    certificate = withdraw_certificate(session, certificate_id, actor=user, reason=body.reason)
    return certificate_read(session, certificate)
