"""Lab IDs: short enough to write on a tube (`26-0417`), unique, in receipt order."""

from __future__ import annotations

from datetime import datetime

from sqlmodel import Session, col, func, select

from service.samples.models import Sample


def next_lab_ids(session: Session, count: int, *, when: datetime) -> list[str]:
    """The next `count` free lab IDs for the year of `when` (two-digit year, four-digit serial).

    The caller's transaction holds the write lock (SQLite) or the unique constraint on
    `sample.lab_id` refuses a concurrent duplicate (PostgreSQL), so IDs are never reused."""
    prefix = f"{when:%y}-"
    last = session.exec(
        select(Sample.lab_id)
        .where(col(Sample.lab_id).startswith(prefix))
        .order_by(func.length(Sample.lab_id).desc(), col(Sample.lab_id).desc())
        .limit(1)
    ).first()
    start = int(last.split("-", 1)[1]) + 1 if last else 1
    width = max(4, len(str(start + count - 1)))
    return [f"{prefix}{serial:0{width}d}" for serial in range(start, start + count)]
