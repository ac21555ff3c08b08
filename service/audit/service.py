"""Writing the audit trail: one hash-chained event per changed field."""

from __future__ import annotations

import json
from datetime import date, datetime
from typing import Any

from sqlmodel import Session, SQLModel, col, select

from service.audit import chain
from service.audit.models import AuditEvent

# Columns that never go into the audit values (secrets, or bulky derived blobs).
_SKIPPED = {"password_hash", "token_hash", "csrf_token", "pdf", "row_hash", "prev_hash"}


def _text(value: Any) -> str | None:
    if value is None:
        return None
    if isinstance(value, datetime | date):
        return value.isoformat()
    if isinstance(value, dict | list):
        return json.dumps(value, sort_keys=True, default=str)
    return str(value)


def entity_name(row: SQLModel) -> str:
    return str(getattr(type(row), "__tablename__", type(row).__name__.lower()))


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
    chain.append(
        session,
        "audit",
        AuditEvent(
            seq=0,
            entity=entity,
            entity_id=entity_id,
            field=field,
            old_value=_text(old),
            new_value=_text(new),
            actor_id=actor_id,
            prev_hash="",
            row_hash="",
        ),
    )


def record_created(session: Session, row: SQLModel, *, actor_id: int | None) -> None:
    """Log a new record as one event per set field (old value empty)."""
    row_id = getattr(row, "id", None)
    assert row_id is not None, "flush the row before auditing it"
    for name in type(row).model_fields:
        value = getattr(row, name)
        if name in _SKIPPED or name == "id" or value in (None, "", [], {}):
            continue
        record_change(
            session,
            entity=entity_name(row),
            entity_id=row_id,
            field=name,
            old=None,
            new=value,
            actor_id=actor_id,
        )


def apply_changes(
    session: Session, row: SQLModel, changes: dict[str, Any], *, actor_id: int | None
) -> list[str]:
    """Set each changed field, audit it, bump `version`; returns the names that changed."""
    changed: list[str] = []
    row_id = getattr(row, "id", None)
    assert row_id is not None
    for name, new in changes.items():
        old = getattr(row, name)
        if old == new:
            continue
        setattr(row, name, new)
        changed.append(name)
        if name not in _SKIPPED:
            record_change(
                session,
                entity=entity_name(row),
                entity_id=row_id,
                field=name,
                old=old,
                new=new,
                actor_id=actor_id,
            )
    if changed and hasattr(row, "version"):
        row.version += 1
    session.add(row)
    session.flush()
    return changed


def history(session: Session, entity: str, entity_id: int) -> list[AuditEvent]:
    return list(
        session.exec(
            select(AuditEvent)
            .where(AuditEvent.entity == entity, AuditEvent.entity_id == entity_id)
            .order_by(col(AuditEvent.seq))
        ).all()
    )
