"""Writing and reading the audit trail: one hash-chained row per created or changed record,
holding every changed field as JSON (old and new value).

A row goes into the chain of the record that owns it (see OWNERS): a test's trials,
specimen, saturation steps, sign-offs and apparatus list are in the test's chain
("permeability_test:42"), a project's locations in the project's, a user's access tokens in
the user's; every other record owns its own chain ("sample:17", "certificate:3"). Writers of
different records never wait for each other: a test's writers already hold the test."""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import date, datetime
from typing import Any

from sqlmodel import Session, SQLModel, col, select

from service.audit import chain
from service.audit.models import AuditEvent

# Secrets, the chain's own links, and derived columns (the queue's keys: service/queue_keys.py).
_SKIPPED = {
    "password_hash",
    "token_hash",
    "csrf_token",
    "pdf",
    "row_hash",
    "prev_hash",
    "queue_due_date",
    "queue_rank",
}
# Records kept in another record's chain: table -> (the column naming the owner, its table).
OWNERS: dict[str, tuple[str, str]] = {
    "trial": ("test_id", "permeability_test"),
    "specimen": ("test_id", "permeability_test"),
    "saturation_step": ("test_id", "permeability_test"),
    "sign_off": ("test_id", "permeability_test"),
    "test_apparatus": ("test_id", "permeability_test"),
    "reading": ("trial_id", "trial"),
    "location": ("project_id", "project"),
    "series_member": ("series_id", "compaction_series"),
    "compaction_curve_point": ("series_id", "compaction_series"),
    "access_token": ("user_id", "app_user"),
}


def _value(value: Any) -> Any:
    """A JSON value for the audit row: text, numbers, booleans, lists and objects as they are;
    times as ISO 8601; anything else (and non-finite numbers) as its text."""
    if value is None or isinstance(value, bool | int | str):
        return value
    if isinstance(value, float):
        return value if math.isfinite(value) else str(value)
    if isinstance(value, datetime | date):
        return value.isoformat()
    if isinstance(value, dict | list):
        return json.loads(json.dumps(value, default=str))
    return str(value)


def encode_changes(changes: Mapping[str, tuple[Any, Any]]) -> str:
    """The canonical JSON text stored in `changes` (keys sorted, no spaces)."""
    payload = {
        name: {"old": _value(old), "new": _value(new)} for name, (old, new) in changes.items()
    }
    return json.dumps(payload, sort_keys=True, separators=(",", ":"), default=str)


def entity_name(row: SQLModel) -> str:
    return str(getattr(type(row), "__tablename__", type(row).__name__.lower()))


def _model(table: str) -> type[SQLModel] | None:
    for mapper in SQLModel._sa_registry.mappers:
        if getattr(mapper.class_, "__tablename__", None) == table:
            return mapper.class_
    return None


def chain_of(session: Session, entity: str, entity_id: int, row: SQLModel | None = None) -> str:
    """The chain key an audit row of (entity, entity_id) goes into, following OWNERS."""
    while entity in OWNERS:
        column, owner = OWNERS[entity]
        if row is None:
            model = _model(entity)
            row = session.get(model, entity_id) if model is not None else None
        owner_id = getattr(row, column, None) if row is not None else None
        if owner_id is None:
            break
        entity, entity_id, row = owner, int(owner_id), None
    return f"{entity}:{entity_id}"


def _write(
    session: Session,
    *,
    entity: str,
    entity_id: int,
    changes: Mapping[str, tuple[Any, Any]],
    actor_id: int | None,
    row: SQLModel | None = None,
) -> None:
    key = chain_of(session, entity, entity_id, row)
    event = AuditEvent(
        chain=key,
        seq=0,
        entity=entity,
        entity_id=entity_id,
        changes=encode_changes(changes),
        actor_id=actor_id,
        prev_hash="",
        row_hash="",
    )
    chain.append(session, "audit", key, event)


def record_change(
    session: Session,
    *,
    entity: str,
    entity_id: int,
    field: str,
    old: Any,
    new: Any,
    actor_id: int | None,
) -> None:
    """Log one changed field of a record (one audit row)."""
    _write(
        session, entity=entity, entity_id=entity_id, changes={field: (old, new)}, actor_id=actor_id
    )


def record_created(session: Session, row: SQLModel, *, actor_id: int | None) -> None:
    """Log a new record as one audit row of every set field (old value null)."""
    row_id = getattr(row, "id", None)
    assert row_id is not None, "flush the row before auditing it"
    changes = {
        name: (None, value)
        for name in type(row).model_fields
        if name not in _SKIPPED
        and name != "id"
        and (value := getattr(row, name)) not in (None, "", [], {})
    }
    _write(
        session,
        entity=entity_name(row),
        entity_id=row_id,
        changes=changes,
        actor_id=actor_id,
        row=row,
    )


def apply_changes(
    session: Session, row: SQLModel, changes: dict[str, Any], *, actor_id: int | None
) -> list[str]:
    """Set each changed field, audit them in one row, bump `version`; returns the names that
    changed."""
    changed: list[str] = []
    audited: dict[str, tuple[Any, Any]] = {}
    row_id = getattr(row, "id", None)
    assert row_id is not None
    for name, new in changes.items():
        old = getattr(row, name)
        if old == new:
            continue
        setattr(row, name, new)
        changed.append(name)
        if name not in _SKIPPED:
            audited[name] = (old, new)
    if audited:
        _write(
            session,
            entity=entity_name(row),
            entity_id=row_id,
            changes=audited,
            actor_id=actor_id,
            row=row,
        )
    if changed and hasattr(row, "version"):
        row.version += 1
    session.add(row)
    session.flush()
    return changed


# --- reading ---------------------------------------------------------------------------------


def _text(value: Any) -> str | None:
    if value is None:
        return None
    if isinstance(value, dict | list):
        return json.dumps(value, sort_keys=True)
    if isinstance(value, bool):
        return "True" if value else "False"
    return str(value)


@dataclass(frozen=True)
class FieldChange:
    """One changed field, with the values as text (what pages, the API and tests read);
    fields changed together share `seq` and `row_hash` (one audit row of chain `chain`)."""

    seq: int
    chain: str
    entity: str
    entity_id: int
    field: str
    old_value: str | None
    new_value: str | None
    actor_id: int | None
    occurred_at: datetime
    row_hash: str


def decode_changes(event: AuditEvent) -> dict[str, dict[str, Any]]:
    """The row's changes as {field: {"old": value, "new": value}}."""
    decoded = json.loads(event.changes)
    return decoded if isinstance(decoded, dict) else {}


def field_changes(event: AuditEvent) -> list[FieldChange]:
    return [
        FieldChange(
            seq=event.seq,
            chain=event.chain,
            entity=event.entity,
            entity_id=event.entity_id,
            field=name,
            old_value=_text(values.get("old")),
            new_value=_text(values.get("new")),
            actor_id=event.actor_id,
            occurred_at=event.occurred_at,
            row_hash=event.row_hash,
        )
        for name, values in decode_changes(event).items()
    ]


def audit_rows(session: Session, entity: str, entity_id: int) -> list[AuditEvent]:
    """A record's audit rows, oldest first."""
    return list(
        session.exec(
            select(AuditEvent)
            .where(AuditEvent.entity == entity, AuditEvent.entity_id == entity_id)
            .order_by(col(AuditEvent.seq))
        ).all()
    )


def history(session: Session, entity: str, entity_id: int) -> list[FieldChange]:
    """A record's changes field by field, oldest first."""
    return [
        change
        for event in audit_rows(session, entity, entity_id)
        for change in field_changes(event)
    ]
