"""Issuing, superseding and withdrawing certificates, and checking that one is genuine.

Issuing freezes a certificate: the PDF bytes are stored with their SHA-256 and the lab's
Ed25519 signature, and the tests it reports move to 'issued'. A correction is issued as the
next revision of the same certificate number, which supersedes the old one; the old PDF is
kept and the verification page says what replaced it.

The certificate's state (issued, superseded, withdrawn, with times and successor) is a signed
record too (`state_statement`), re-signed at every change; every issue and withdrawal makes a
signed checkpoint of the logs, and the certificate records the one it was issued under.
Checking a certificate verifies both signatures with the key that was valid when each was
made (the key history of service/certificates/signing.py)."""

from __future__ import annotations

import secrets
from collections.abc import Collection, Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from sqlmodel import Session, col, func, select

from service.access import get_visible, is_client
from service.accounts.models import User
from service.audit import chain, checkpoints
from service.audit.models import AuditEvent, ChainHead
from service.audit.service import apply_changes, decode_changes, record_created
from service.certificates.document import build_document
from service.certificates.models import Certificate, CertificateTest
from service.certificates.render import render_pdf
from service.certificates.signing import (
    TrustedKey,
    key_check,
    load_signing_key,
    register_key,
    sha256_hex,
    timestamp,
    trusted_keys,
)
from service.common import CertificateKind, CertificateState, Role, SignOffMeaning, TestState
from service.db import utcnow
from service.errors import InvalidInput, InvalidTransition, NotFound, PermissionDenied
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest
from service.paging import MAX_LIMIT, paginate
from service.projects.models import Project
from service.samples.models import Sample
from service.signoffs.models import SignOff

ISSUERS = frozenset({Role.REVIEWER, Role.LAB_MANAGER})
CODE_ALPHABET = "ABCDEFGHJKMNPQRSTUVWXYZ23456789"  # no 0/O, 1/I/L: read aloud or typed safely
CODE_GROUPS = 3
REPORTABLE = (TestState.APPROVED, TestState.ISSUED)


def new_verification_code() -> str:
    groups = ("".join(secrets.choice(CODE_ALPHABET) for _ in range(4)) for _ in range(CODE_GROUPS))
    return "-".join(groups)


def normalise_code(code: str) -> str:
    """Accept the code typed in lower case, with spaces or without its dashes."""
    compact = "".join(ch for ch in code.upper() if ch.isalnum())
    return "-".join(compact[i : i + 4] for i in range(0, len(compact), 4))


def sample_certificate_number(sample: Sample) -> str:
    return f"SC-{sample.lab_id}"


def project_certificate_number(project: Project) -> str:
    assert project.id is not None
    return f"PS-{project.id:05d}"


def _require_issuer(actor: User) -> None:
    if actor.role not in ISSUERS:
        raise PermissionDenied(
            "issuing or withdrawing a certificate needs a reviewer or lab manager"
        )


def current_tests(
    tests: Sequence[PermeabilityTest], states: Collection[str] = REPORTABLE
) -> list[PermeabilityTest]:
    """Per test series, the latest revision in `states` (by default approved or issued)."""
    latest: dict[tuple[int, int], PermeabilityTest] = {}
    for test in tests:
        if test.state not in states:
            continue
        key = (test.sample_id, test.series)
        if key not in latest or test.revision > latest[key].revision:
            latest[key] = test
    return sorted(latest.values(), key=lambda t: (t.sample_id, t.series))


def _latest_certificate(session: Session, number: str) -> Certificate | None:
    return session.exec(
        select(Certificate)
        .where(Certificate.number == number)
        .order_by(col(Certificate.revision).desc())
    ).first()


def _unique_code(session: Session) -> str:
    while True:
        code = new_verification_code()
        taken = session.exec(
            select(Certificate.id).where(Certificate.verification_code == code)
        ).first()
        if taken is None:
            return code


def _freeze(
    session: Session,
    *,
    kind: CertificateKind,
    project: Project,
    groups: Sequence[tuple[Sample, Sequence[PermeabilityTest]]],
    number: str,
    previous: Certificate | None,
    reason: str,
    actor: User,
    now: datetime,
) -> Certificate:
    """Render, hash and sign the PDF and store the certificate with the tests it reports."""
    assert actor.id is not None
    assert project.id is not None
    key = load_signing_key()
    code = _unique_code(session)
    revision = previous.revision + 1 if previous else 1
    document = build_document(
        session,
        kind=kind,
        project=project,
        samples=groups,
        number=number,
        revision=revision,
        verification_code=code,
        issued_at=now,
        issued_by=actor,
        key_id=key.key_id,
        supersedes=f"{previous.number} rev {previous.revision}" if previous else "",
        supersede_reason=reason,
    )
    pdf = render_pdf(document)
    # Taken after rendering: certificate issues wait for each other only from here to commit.
    checkpoint_seq = checkpoints.reserve(session)
    register_key(session, key, now)
    certificate = Certificate(
        number=number,
        revision=revision,
        kind=kind,
        state=CertificateState.ISSUED,
        project_id=project.id,
        sample_id=groups[0][0].id if kind == CertificateKind.SAMPLE else None,
        supersedes_id=previous.id if previous else None,
        reason=reason,
        issued_by_id=actor.id,
        issued_at=now,
        pdf=pdf,
        sha256=sha256_hex(pdf),
        signature=key.sign(pdf),
        key_id=key.key_id,
        verification_code=code,
        checkpoint_seq=checkpoint_seq,
        state_seq=1,
        state_changed_at=now,
        state_key_id=key.key_id,
    )
    certificate.state_signature = key.sign(state_statement(certificate, ""))
    session.add(certificate)
    session.flush()
    assert certificate.id is not None
    for _sample, tests in groups:
        for test in tests:
            assert test.id is not None
            session.add(CertificateTest(certificate_id=certificate.id, test_id=test.id))
    record_created(session, certificate, actor_id=actor.id)
    if previous is not None:
        changes: dict[str, Any] = {"superseded_by_id": certificate.id}
        if previous.state == CertificateState.ISSUED:
            changes["state"] = CertificateState.SUPERSEDED
        restate(session, previous, changes, successor=certificate, actor=actor, now=now)
    session.flush()
    return certificate


_STATE_FIELDS = (
    "verification_code",
    "number",
    "revision",
    "sha256",
    "issued_at",
    "checkpoint_seq",
    "state",
    "state_seq",
    "state_changed_at",
)


def state_statement(
    certificate: Certificate, successor_code: str, changes: Mapping[str, Any] | None = None
) -> bytes:
    """What a certificate's state signature signs (its columns, with `changes` applied), as
    UTF-8 lines:

        seepline certificate state 1
        code <verification code>
        number <number>
        revision <revision>
        sha256 <SHA-256 of the PDF, hex>
        issued <ISO 8601 UTC>
        checkpoint <sequence of the checkpoint it was issued under, or ->
        state <issued | superseded | withdrawn>
        state_seq <1 at issue, +1 at each change>
        changed <ISO 8601 UTC of the last change>
        superseded_by <verification code of the successor, or ->
    """
    values = {name: getattr(certificate, name) for name in _STATE_FIELDS} | dict(changes or {})
    changed = values["state_changed_at"] or values["issued_at"]
    lines = [
        "seepline certificate state 1",
        f"code {values['verification_code']}",
        f"number {values['number']}",
        f"revision {values['revision']}",
        f"sha256 {values['sha256']}",
        f"issued {timestamp(values['issued_at'])}",
        f"checkpoint {values['checkpoint_seq'] or '-'}",
        f"state {values['state']}",
        f"state_seq {values['state_seq']}",
        f"changed {timestamp(changed)}",
        f"superseded_by {successor_code or '-'}",
    ]
    return "".join(line + "\n" for line in lines).encode()


def restate(
    session: Session,
    certificate: Certificate,
    changes: dict[str, Any],
    *,
    successor: Certificate | None,
    actor: User,
    now: datetime,
) -> None:
    """Change a certificate's state fields and re-sign its state record, in one audit row."""
    key = load_signing_key()
    changes = {**changes, "state_seq": certificate.state_seq + 1, "state_changed_at": now}
    successor_code = successor.verification_code if successor else ""
    changes["state_signature"] = key.sign(state_statement(certificate, successor_code, changes))
    changes["state_key_id"] = key.key_id
    apply_changes(session, certificate, changes, actor_id=actor.id)


def issue_sample_certificate(
    session: Session,
    sample_id: int,
    *,
    actor: User,
    reason: str = "",
    now: datetime | None = None,
) -> Certificate:
    """Issue (or re-issue as the next revision) the certificate of one sample.

    Reports, per test series, the latest approved or issued revision; at least one of them
    must be newly approved, unless the sample's last certificate was withdrawn."""
    _require_issuer(actor)
    now = now or utcnow()
    sample = session.get(Sample, sample_id)
    if sample is None:
        raise NotFound(f"sample {sample_id} not found")
    project = session.get(Project, sample.project_id)
    assert project is not None
    all_tests = session.exec(
        select(PermeabilityTest).where(PermeabilityTest.sample_id == sample_id)
    ).all()
    tests = current_tests(all_tests)
    number = sample_certificate_number(sample)
    previous = _latest_certificate(session, number)
    newly_approved = [t for t in tests if t.state == TestState.APPROVED]
    reissue = previous is not None and previous.state == CertificateState.WITHDRAWN
    if not newly_approved and not (reissue and tests):
        states = sorted({t.state for t in all_tests})
        raise InvalidTransition(
            f"sample {sample.lab_id} has no approved test to certify "
            f"(its tests are: {', '.join(states) or 'none'}); only approved tests reach a "
            "certificate",
            detail={"sample_id": sample_id, "test_states": states},
        )
    if not reason:
        reason = "; ".join(
            f"test {t.series} revision {t.revision}: {t.correction_reason}"
            for t in newly_approved
            if t.revision > 1 and t.correction_reason
        )
    certificate = _freeze(
        session,
        kind=CertificateKind.SAMPLE,
        project=project,
        groups=[(sample, tests)],
        number=number,
        previous=previous,
        reason=reason[:1000],
        actor=actor,
        now=now,
    )
    reported = {t.id for t in tests}
    for test in newly_approved:
        assert test.id is not None
        lab_tests.mark_issued(session, test.id, actor=actor)  # the lifecycle's approved -> issued
        _sign_issued(session, test, actor, certificate, now)
    # Revisions replaced by a correction on this certificate stop being current.
    for test in all_tests:
        if (
            test.id not in reported
            and test.state == TestState.ISSUED
            and any(t.series == test.series and t.revision > test.revision for t in tests)
        ):
            apply_changes(session, test, {"state": TestState.SUPERSEDED}, actor_id=actor.id)
    _anchor(session, certificate, now)
    return certificate


# Tests a draft may show: reviewed or on their way to review (the draft is what review checks).
DRAFT_STATES = frozenset({TestState.SUBMITTED, TestState.APPROVED, TestState.ISSUED})


def draft_sample_certificate(
    session: Session, sample_id: int, *, actor: User, now: datetime | None = None
) -> bytes:
    """The sample's certificate as it would be issued now, as a watermarked draft PDF: not
    numbered, not signed, nothing stored (no certificate row, no audit row, no checkpoint)."""
    _require_issuer(actor)
    sample = session.get(Sample, sample_id)
    if sample is None:
        raise NotFound(f"sample {sample_id} not found")
    project = session.get(Project, sample.project_id)
    assert project is not None
    all_tests = session.exec(
        select(PermeabilityTest).where(PermeabilityTest.sample_id == sample_id)
    ).all()
    tests = current_tests(all_tests, DRAFT_STATES)
    if not tests:
        raise InvalidTransition(
            f"sample {sample.lab_id} has no submitted or approved test to show in a draft",
            detail={"sample_id": sample_id},
        )
    document = build_document(
        session,
        kind=CertificateKind.SAMPLE,
        project=project,
        samples=[(sample, tests)],
        number="",
        revision=0,
        verification_code="",
        issued_at=now or utcnow(),
        issued_by=actor,
        key_id="",
        draft=True,
    )
    return render_pdf(document)


def _anchor(session: Session, certificate: Certificate, now: datetime) -> None:
    """The checkpoint the certificate names: it signs the heads this issue moved."""
    made = checkpoints.make_checkpoint(session, reason="certificate", now=now)
    assert made.seq == certificate.checkpoint_seq, "the checkpoint lock was not held"


def _sign_issued(
    session: Session, test: PermeabilityTest, actor: User, certificate: Certificate, now: datetime
) -> None:
    assert test.id is not None
    assert actor.id is not None
    session.add(
        SignOff(
            test_id=test.id,
            user_id=actor.id,
            role=actor.role,
            meaning=SignOffMeaning.ISSUED,
            content_hash=certificate.sha256,
            test_version=test.version,
            note=f"certificate {certificate.number} rev {certificate.revision}",
            signed_at=now,
        )
    )
    session.flush()


def issue_project_certificate(
    session: Session,
    project_id: int,
    *,
    actor: User,
    reason: str = "",
    now: datetime | None = None,
) -> Certificate:
    """Issue a project summary of every currently issued test (next revision if one exists)."""
    _require_issuer(actor)
    now = now or utcnow()
    project = session.get(Project, project_id)
    if project is None:
        raise NotFound(f"project {project_id} not found")
    rows = session.exec(
        select(PermeabilityTest, Sample)
        .join(Sample, col(Sample.id) == col(PermeabilityTest.sample_id))
        .where(Sample.project_id == project_id)
        .order_by(col(Sample.lab_id))
    ).all()
    samples = {sample.id: sample for _test, sample in rows}
    tests = [t for t in current_tests([t for t, _s in rows]) if t.state == TestState.ISSUED]
    if not tests:
        raise InvalidTransition(
            f"project {project.number} has no issued test to summarise; issue the sample "
            "certificates first",
            detail={"project_id": project_id},
        )
    groups: list[tuple[Sample, list[PermeabilityTest]]] = []
    for sample_id in sorted({t.sample_id for t in tests}, key=lambda s: samples[s].lab_id):
        groups.append((samples[sample_id], [t for t in tests if t.sample_id == sample_id]))
    number = project_certificate_number(project)
    certificate = _freeze(
        session,
        kind=CertificateKind.PROJECT,
        project=project,
        groups=groups,
        number=number,
        previous=_latest_certificate(session, number),
        reason=reason[:1000],
        actor=actor,
        now=now,
    )
    _anchor(session, certificate, now)
    return certificate


def withdraw_certificate(
    session: Session,
    certificate_id: int,
    *,
    actor: User,
    reason: str,
    now: datetime | None = None,
) -> Certificate:
    """Withdraw an issued certificate; the PDF stays downloadable and verification says so."""
    _require_issuer(actor)
    reason = reason.strip()
    if not reason or len(reason) > 1000:
        raise InvalidInput(
            "a withdrawal needs a reason",
            detail=[
                {
                    "loc": ["body", "reason"],
                    "msg": f"reason: got {reason!r}; accepted: the reason for withdrawing, "
                    "1 to 1000 characters",
                    "type": "value_error",
                }
            ],
        )
    certificate = session.get(Certificate, certificate_id)
    if certificate is None:
        raise NotFound(f"certificate {certificate_id} not found")
    if certificate.state != CertificateState.ISSUED:
        raise InvalidTransition(
            f"certificate {certificate.number} rev {certificate.revision} is {certificate.state}; "
            "only an issued (current) certificate can be withdrawn",
            detail={"state": certificate.state},
        )
    now = now or utcnow()
    # The checkpoint lock before the certificate's head, in the order issuing takes them.
    checkpoints.reserve(session)
    successor = (
        session.get(Certificate, certificate.superseded_by_id)
        if certificate.superseded_by_id
        else None
    )
    restate(
        session,
        certificate,
        {"state": CertificateState.WITHDRAWN, "withdrawn_at": now, "reason": reason},
        successor=successor,
        actor=actor,
        now=now,
    )
    checkpoints.make_checkpoint(session, reason="certificate", now=now)
    return certificate


def list_certificates(
    session: Session,
    *,
    user: User,
    project_id: int | None = None,
    sample_id: int | None = None,
    limit: int = MAX_LIMIT,
    offset: int = 0,
) -> tuple[list[Certificate], int]:
    """One page of the certificates the user may see, narrowed to a project or a sample
    (404 if that is not visible), and how many there are."""
    query = select(Certificate).join(Project, col(Project.id) == col(Certificate.project_id))
    if project_id is not None:
        get_visible(session, Project, project_id, user, "project")
        query = query.where(Certificate.project_id == project_id)
    if sample_id is not None:
        get_visible(session, Sample, sample_id, user, "sample")
        query = query.where(Certificate.sample_id == sample_id)
    if is_client(user):
        query = query.where(Project.client_id == user.organisation_id)
    query = query.order_by(col(Certificate.number), col(Certificate.revision))
    return paginate(session, query, limit=limit, offset=offset)


def current_certificates(session: Session, sample_ids: Sequence[int]) -> dict[int, Certificate]:
    """Each sample's certificate in force (state issued)."""
    if not sample_ids:
        return {}
    found = session.exec(
        select(Certificate).where(
            col(Certificate.sample_id).in_(list(sample_ids)),
            Certificate.state == CertificateState.ISSUED,
        )
    ).all()
    return {c.sample_id: c for c in found if c.sample_id is not None}


def tests_per_certificate(session: Session, certificate_ids: Sequence[int]) -> dict[int, int]:
    """How many tests each certificate reports."""
    if not certificate_ids:
        return {}
    rows = session.exec(
        select(CertificateTest.certificate_id, func.count())
        .where(col(CertificateTest.certificate_id).in_(list(certificate_ids)))
        .group_by(col(CertificateTest.certificate_id))
    ).all()
    return {certificate_id: int(count) for certificate_id, count in rows}


def get_certificate(session: Session, certificate_id: int, *, user: User) -> Certificate:
    return get_visible(session, Certificate, certificate_id, user, "certificate")


def find_by_code(session: Session, code: str) -> Certificate:
    normalised = normalise_code(code)
    certificate = session.exec(
        select(Certificate).where(Certificate.verification_code == normalised)
    ).first()
    if certificate is None:
        raise NotFound(f"no certificate has the verification code '{code[:40]}'")
    return certificate


def tests_of(session: Session, certificate: Certificate) -> list[PermeabilityTest]:
    return list(
        session.exec(
            select(PermeabilityTest)
            .join(CertificateTest, col(CertificateTest.test_id) == col(PermeabilityTest.id))
            .where(CertificateTest.certificate_id == certificate.id)
            .order_by(col(PermeabilityTest.id))
        ).all()
    )


@dataclass(frozen=True)
class CertificateStatus:
    """What the public verification page shows about one certificate (no client details).

    `problem` is set when the stored state cannot be confirmed (its signed state record or its
    audit record does not match); the page then shows no state as fact."""

    verification_code: str
    number: str
    revision: int
    kind: str
    state: str
    is_current: bool
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
    checkpoint_seq: int | None = None
    problem: str = ""

    @property
    def confirmed(self) -> bool:
        return not self.problem

    @property
    def headline(self) -> str:
        name = f"Certificate {self.number} rev {self.revision}"
        if self.problem:
            return (
                f"{name}: its state cannot be confirmed ({self.problem}). Do not rely on it; "
                "ask the laboratory."
            )
        if self.state == CertificateState.ISSUED:
            return f"{name} is issued and current."
        if self.state == CertificateState.SUPERSEDED:
            return f"{name} is superseded by {self.superseded_by}. Use the newer revision."
        text = f"{name} was withdrawn"
        if self.superseded_by:
            text += f" and replaced by {self.superseded_by}"
        return text + "."


def _record_problem(session: Session, certificate: Certificate) -> str:
    """The certificate's own audit chain must hold and end in its present state record: a
    state put back together with an older signature is caught here (the full walk against
    the checkpoints is `seepline verify-logs`)."""
    assert certificate.id is not None
    key = f"certificate:{certificate.id}"
    rows = session.exec(
        select(AuditEvent).where(AuditEvent.chain == key).order_by(col(AuditEvent.seq))
    ).all()
    head = session.get(ChainHead, chain.head_name("audit", key))
    found, _pending = chain.walk_chain(key, rows, head, ())
    if found is not None:
        return f"its audit record is broken: {found.problem}"
    signed = ""
    for row in rows:
        signed = decode_changes(row).get("state_signature", {}).get("new") or signed
    if signed != certificate.state_signature:
        return "its state differs from the last state recorded in its audit record"
    return ""


def state_problem(
    session: Session, certificate: Certificate, keys: dict[str, TrustedKey] | None = None
) -> str:
    """Empty when the signed state record and the audit record agree with the stored state."""
    keys = keys if keys is not None else trusted_keys(session)
    newer = (
        session.get(Certificate, certificate.superseded_by_id)
        if certificate.superseded_by_id
        else None
    )
    problem = key_check(
        keys,
        certificate.state_key_id,
        certificate.state_changed_at or certificate.issued_at,
        state_statement(certificate, newer.verification_code if newer else ""),
        certificate.state_signature,
    )
    if problem:
        return f"its signed state record does not match: {problem}"
    return _record_problem(session, certificate)


def pdf_problem(
    session: Session,
    certificate: Certificate,
    data: bytes | None = None,
    keys: dict[str, TrustedKey] | None = None,
) -> str:
    """Empty when `data` (default: the stored PDF) hashes to the certificate's SHA-256 and
    carries the lab's signature by the key valid when it was issued."""
    data = certificate.pdf if data is None else data
    if sha256_hex(data) != certificate.sha256:
        return "the file differs from the one issued"
    keys = keys if keys is not None else trusted_keys(session)
    return key_check(keys, certificate.key_id, certificate.issued_at, data, certificate.signature)


def certificate_status(session: Session, certificate: Certificate) -> CertificateStatus:
    from service.certificates.document import lab_party

    issuer = session.get(User, certificate.issued_by_id)
    newer = (
        session.get(Certificate, certificate.superseded_by_id)
        if certificate.superseded_by_id
        else None
    )
    older = (
        session.get(Certificate, certificate.supersedes_id) if certificate.supersedes_id else None
    )
    problem = state_problem(session, certificate)
    return CertificateStatus(
        verification_code=certificate.verification_code,
        number=certificate.number,
        revision=certificate.revision,
        kind=certificate.kind,
        state=certificate.state,
        is_current=certificate.state == CertificateState.ISSUED and not problem,
        issued_at=certificate.issued_at,
        issued_by=issuer.full_name if issuer else "-",
        lab_name=lab_party(session).name,
        sha256=certificate.sha256,
        key_id=certificate.key_id,
        signature=certificate.signature,
        reason=certificate.reason,
        withdrawn_at=certificate.withdrawn_at,
        superseded_by=f"{newer.number} rev {newer.revision}" if newer else "",
        superseded_by_code=newer.verification_code if newer else "",
        supersedes=f"{older.number} rev {older.revision}" if older else "",
        supersedes_code=older.verification_code if older else "",
        checkpoint_seq=certificate.checkpoint_seq,
        problem=problem,
    )


@dataclass(frozen=True)
class UploadCheck:
    """The answer to 'is this PDF genuine and current?'."""

    sha256: str
    genuine: bool
    current: bool
    message: str
    status: CertificateStatus | None


def check_upload(session: Session, data: bytes) -> UploadCheck:
    """Genuine means: the bytes hash to a stored certificate AND its signature verifies with
    the lab's key that was valid when it was issued. Current needs its state confirmed too."""
    digest = sha256_hex(data)
    if not data.startswith(b"%PDF-"):
        return UploadCheck(
            digest, False, False, "The file is not a PDF; upload the certificate PDF.", None
        )
    certificate = session.exec(select(Certificate).where(Certificate.sha256 == digest)).first()
    if certificate is None:
        return UploadCheck(
            digest,
            False,
            False,
            "Not genuine: no certificate with this content was issued by this laboratory. "
            "The file was changed after issue, or it is not one of ours.",
            None,
        )
    status = certificate_status(session, certificate)
    problem = pdf_problem(session, certificate, data)
    if problem:
        return UploadCheck(digest, False, False, f"Cannot confirm: {problem}.", status)
    if not status.confirmed:
        message = f"Genuine file, but {status.headline[0].lower()}{status.headline[1:]}"
    elif status.is_current:
        message = f"Genuine and current: {status.headline}"
    else:
        message = f"Genuine, but not current: {status.headline}"
    return UploadCheck(digest, True, status.is_current, message, status)


def sign_missing_states(session: Session) -> int:
    """Sign the state record of certificates issued before states were signed (run by
    `seepline migrate`, which only the lab runs); answers how many."""
    unsigned = session.exec(select(Certificate).where(Certificate.state_signature == "")).all()
    if not unsigned:
        return 0
    key = load_signing_key()
    register_key(session, key, utcnow())
    for certificate in unsigned:
        newer = (
            session.get(Certificate, certificate.superseded_by_id)
            if certificate.superseded_by_id
            else None
        )
        changes: dict[str, Any] = {
            "state_changed_at": certificate.withdrawn_at or certificate.issued_at,
            "state_key_id": key.key_id,
        }
        changes["state_signature"] = key.sign(
            state_statement(certificate, newer.verification_code if newer else "", changes)
        )
        apply_changes(session, certificate, changes, actor_id=None)
    return len(unsigned)
