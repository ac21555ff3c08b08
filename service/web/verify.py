"""The public certificate check: /verify/{code} (state, hash, signer), /verify (upload a PDF),
and the lab's published signing key at /.well-known/seepline-signing-key. No sign-in needed."""

from __future__ import annotations

from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from typing import Annotated, Any

from fastapi import APIRouter, FastAPI, File, Request, UploadFile
from fastapi.responses import Response

from service.certificates.service import certificate_status, check_upload, find_by_code
from service.certificates.signing import ALGORITHM, load_signing_key
from service.config import get_settings
from service.deps import OptionalUser, SessionDep
from service.errors import NotFound
from service.exchange.files import FileTooLarge, read_limited
from service.web.htmx import render
from service.web.pages import layout_context

WELL_KNOWN_KEY = "/.well-known/seepline-signing-key"


@asynccontextmanager
async def require_signing_key(_app: FastAPI) -> AsyncIterator[None]:
    """Start-up refuses to run without a signing key (production never generates one)."""
    load_signing_key()
    yield


router = APIRouter(include_in_schema=False, lifespan=require_signing_key)


def _pdf_response(pdf: bytes, filename: str, state: str) -> Response:
    return Response(
        pdf,
        media_type="application/pdf",
        headers={
            "Content-Disposition": f'attachment; filename="{filename}"',
            "X-Certificate-State": state,
        },
    )


@router.get(WELL_KNOWN_KEY, include_in_schema=True, tags=["certificates"])
def signing_key() -> dict[str, Any]:
    """The public key that verifies certificate signatures (Ed25519 over the PDF bytes)."""
    key = load_signing_key()
    return {
        "algorithm": ALGORITHM,
        "key_id": key.key_id,
        "public_key_pem": key.public_pem(),
        "signed_content": "the certificate PDF file, byte for byte",
        "signature_encoding": "base64",
    }


@router.get("/verify")
def verify_form(request: Request, user: OptionalUser) -> Response:
    return render(request, "verify/verify.html", layout_context(request, user))


@router.get("/verify/{verification_code}")
def verify_page(
    verification_code: str, request: Request, session: SessionDep, user: OptionalUser
) -> Response:
    try:
        found = certificate_status(session, find_by_code(session, verification_code))
    except NotFound:
        return render(
            request,
            "verify/verify.html",
            layout_context(request, user, unknown_code=verification_code[:40]),
            status_code=404,
        )
    return render(request, "verify/verify.html", layout_context(request, user, status=found))


@router.get("/verify/{verification_code}/pdf")
def verify_pdf(verification_code: str, session: SessionDep) -> Response:
    """The PDF as issued, for whoever holds its code (superseded and withdrawn ones too)."""
    certificate = find_by_code(session, verification_code)
    return _pdf_response(
        certificate.pdf,
        f"{certificate.number}-rev{certificate.revision}.pdf",
        certificate.state,
    )


@router.post("/verify")
async def verify_upload_page(
    request: Request,
    session: SessionDep,
    user: OptionalUser,
    pdf: Annotated[UploadFile | None, File()] = None,
) -> Response:
    limit = get_settings().verify_upload_max_bytes
    if pdf is None or not pdf.filename:
        return render(
            request,
            "verify/verify.html",
            layout_context(request, user, upload_error="Choose the certificate PDF to check."),
            fragment="verify/_upload_result.html",
            status_code=422,
        )
    try:
        data = await read_limited(pdf, limit, "pdf")
    except FileTooLarge:
        return render(
            request,
            "verify/verify.html",
            layout_context(
                request,
                user,
                upload_error=f"The file is larger than {limit // (1024 * 1024)} MiB; "
                "a certificate PDF is much smaller.",
            ),
            fragment="verify/_upload_result.html",
            status_code=413,
        )
    result = check_upload(session, data)
    return render(
        request,
        "verify/verify.html",
        layout_context(request, user, check=result, status=result.status),
        fragment="verify/_upload_result.html",
    )
