"""The public certificate check: /verify/{code} (state, hash, signer), /verify (upload a PDF),
the lab's signing keys (/.well-known/seepline-signing-key, the current one;
/.well-known/seepline-signing-keys, every one with its validity period) and the signed
checkpoints of the custody and audit logs (/.well-known/seepline-checkpoints, paged). No
sign-in needed. The app also makes a checkpoint when the last is older than the configured
interval (a background task here)."""

from __future__ import annotations

import asyncio
import contextlib
import logging
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from typing import Annotated, Any

from fastapi import APIRouter, FastAPI, File, Query, Request, UploadFile
from fastapi.responses import Response

from service.audit import checkpoints
from service.certificates.service import (
    certificate_status,
    check_upload,
    find_by_code,
    normalise_code,
    pdf_problem,
)
from service.certificates.signing import ALGORITHM, load_signing_key, published_keys
from service.config import get_settings
from service.db import session_scope, utcnow
from service.deps import OptionalUser, SessionDep
from service.errors import NotFound
from service.exchange.files import FileTooLarge, read_limited
from service.web.htmx import redirect, render
from service.web.pages import layout_context

WELL_KNOWN_KEY = "/.well-known/seepline-signing-key"
WELL_KNOWN_KEYS = "/.well-known/seepline-signing-keys"
WELL_KNOWN_CHECKPOINTS = "/.well-known/seepline-checkpoints"
CHECKPOINT_PAGE = 100
# How often the background task asks whether a checkpoint is due (at most the interval).
POLL_SECONDS = 300.0
log = logging.getLogger(__name__)


def _checkpoint_if_due() -> int | None:
    with session_scope() as session:
        if not checkpoints.is_due(session, utcnow()):
            return None
    with session_scope(write=True) as session:
        made = checkpoints.checkpoint_if_due(session)
        return made.seq if made else None


async def _checkpoints_at_intervals(minutes: int) -> None:
    """Make the opportunistic checkpoint when due; a failure is logged and tried again."""
    while True:
        await asyncio.sleep(min(POLL_SECONDS, minutes * 60.0))
        try:
            await asyncio.to_thread(_checkpoint_if_due)
        except Exception:  # a database hiccup must not end the task
            log.exception("the interval checkpoint failed; trying again later")


@asynccontextmanager
async def require_signing_key(_app: FastAPI) -> AsyncIterator[None]:
    """Start-up refuses to run without a signing key (production never generates one), and
    starts the interval checkpoints."""
    load_signing_key()
    minutes = get_settings().checkpoint_interval_minutes
    task = asyncio.create_task(_checkpoints_at_intervals(minutes)) if minutes > 0 else None
    yield
    if task is not None:
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task


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


@router.get(WELL_KNOWN_KEYS, include_in_schema=True, tags=["certificates"])
def signing_keys(session: SessionDep) -> dict[str, Any]:
    """Every key the lab has signed with and the period each was in use, with the signature
    that vouches for it: certificates and checkpoints verify with the key valid when they
    were signed."""
    listed = published_keys(session)
    return {
        "signed_statement": "seepline signing key 1 / key / public / valid_from / valid_until, "
        "one per line; an endorsement (by the successor) includes valid_until, an "
        "introduction (by the predecessor) has '-' there",
        "keys": listed,
    }


@router.get(WELL_KNOWN_CHECKPOINTS, include_in_schema=True, tags=["certificates"])
def checkpoint_list(
    request: Request,
    session: SessionDep,
    after: Annotated[int, Query(ge=0, le=2**31 - 1, description="sequence to start after")] = 0,
    limit: Annotated[int, Query(ge=1, le=CHECKPOINT_PAGE, description="page size")] = 100,
) -> dict[str, Any]:
    """The signed checkpoints of the custody and audit logs, oldest first; keep a copy:
    `seepline verify-logs --checkpoints FILE` checks the logs against it."""
    items = checkpoints.page(session, after=after, limit=limit)
    latest = checkpoints.latest(session)
    following = ""
    if items and latest is not None and items[-1].seq < latest.seq:
        following = f"{request.url.path}?after={items[-1].seq}&limit={limit}"
    return {
        "format": checkpoints.EXPORT_FORMAT,
        "version": 1,
        "latest": latest.seq if latest else None,
        "items": [checkpoints.published(c) for c in items],
        "next": following or None,
        "body_layout": checkpoints.__doc__,
    }


@router.get("/verify")
def verify_form(
    request: Request,
    user: OptionalUser,
    code: Annotated[str, Query(max_length=100)] = "",
) -> Response:
    """The check page: a box for the certificate's verification code (which leads to the
    result page of that code, as its QR code does) and the PDF upload."""
    typed = normalise_code(code)
    if typed:
        return redirect(request, f"/verify/{typed}")
    if code:  # typed, but nothing of it is a letter or digit
        message = "Verification code: type the code printed at the foot of the certificate."
        context = layout_context(request, user, code_error=message, code_typed=code[:100])
        return render(request, "verify/verify.html", context, status_code=422)
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
def verify_pdf(
    verification_code: str, request: Request, session: SessionDep, user: OptionalUser
) -> Response:
    """The PDF as issued, for whoever holds its code (superseded and withdrawn ones too); a
    stored file that no longer matches its hash and signature is not served."""
    certificate = find_by_code(session, verification_code)
    problem = pdf_problem(session, certificate)
    if problem:
        found = certificate_status(session, certificate)
        return render(
            request,
            "verify/verify.html",
            layout_context(request, user, status=found, pdf_error=problem),
            status_code=409,
        )
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
