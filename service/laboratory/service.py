"""The laboratory's identity, read by certificates, page footers and exports, and kept by
the admin (every change audited). Nothing else names the laboratory."""

from __future__ import annotations

from typing import Any

from sqlmodel import Session, col, select

from service.accounts.models import Organisation, User
from service.audit.service import apply_changes, record_created
from service.common import OrganisationKind, Role
from service.errors import FieldProblem, InvalidInput, PermissionDenied, require_version
from service.laboratory.models import LabSettings

# The settings' fields as pages label them, with their longest accepted length.
FIELDS: dict[str, tuple[str, int]] = {
    "name": ("Laboratory name", 200),
    "address": ("Address", 500),
    "accreditation_body": ("Accreditation body", 200),
    "accreditation_number": ("Accreditation number", 100),
}


def lab_settings(session: Session) -> LabSettings:
    """The saved settings; before the admin saves any, the lab organisation's name and
    address (an unsaved row, id None), or blanks when there is no lab organisation yet."""
    saved = session.exec(select(LabSettings).order_by(col(LabSettings.id))).first()
    if saved is not None:
        return saved
    lab = session.exec(
        select(Organisation)
        .where(Organisation.kind == OrganisationKind.LAB)
        .order_by(col(Organisation.id))
    ).first()
    return LabSettings(name=lab.name if lab else "", address=lab.address if lab else "")


def accreditation_text(settings: LabSettings) -> str:
    """'Accredited by <body>, no. <number>', or '' when neither is set."""
    body = settings.accreditation_body.strip()
    number = settings.accreditation_number.strip()
    if not body and not number:
        return ""
    return "Accredited" + (f" by {body}" if body else "") + (f", no. {number}" if number else "")


def _checked(values: dict[str, Any]) -> dict[str, str]:
    problems = []
    cleaned: dict[str, str] = {}
    for name, raw in values.items():
        label, longest = FIELDS[name]
        text = str(raw).strip()
        if name == "name" and not text:
            problems.append(FieldProblem((name,), "must not be blank", accepted="the lab's name"))
        elif len(text) > longest:
            problems.append(
                FieldProblem(
                    (name,),
                    f"is {len(text)} characters long",
                    accepted=f"at most {longest} characters",
                    label=label,
                )
            )
        cleaned[name] = text
    if problems:
        raise InvalidInput(problems=problems)
    return cleaned


def save_lab_settings(
    session: Session, *, actor: User, version: int | None, values: dict[str, Any]
) -> LabSettings:
    """The admin sets the laboratory's identity; `values` holds any of FIELDS. The first save
    creates the row (audited as created), later ones need the version read (409 if stale)."""
    if actor.role != Role.ADMIN:
        raise PermissionDenied("the laboratory's settings are kept by an admin")
    unknown = set(values) - set(FIELDS)
    if unknown:
        raise InvalidInput(
            problems=[FieldProblem((name,), "is not a setting") for name in sorted(unknown)]
        )
    cleaned = _checked(values)
    current = lab_settings(session)
    if current.id is None:
        settings = LabSettings(**{**current.model_dump(exclude={"id", "version"}), **cleaned})
        _checked({"name": settings.name})
        session.add(settings)
        session.flush()
        record_created(session, settings, actor_id=actor.id)
        return settings
    require_version(current, version, "the laboratory settings", yours=cleaned)
    apply_changes(session, current, cleaned, actor_id=actor.id)
    return current
