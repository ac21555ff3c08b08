"""Paging shared by every list: one page shape (items, total, limit, offset) and the query
helpers that fill it."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any, Generic, TypeVar

from pydantic import BaseModel
from sqlmodel import Session, func, select
from sqlmodel.sql.expression import SelectOfScalar

ItemT = TypeVar("ItemT")
RowT = TypeVar("RowT")

DEFAULT_LIMIT = 50
MAX_LIMIT = 500


class Page(BaseModel, Generic[ItemT]):
    """One page of a list: the items, how many match in all, and where the page starts."""

    items: list[ItemT]
    total: int
    limit: int
    offset: int


def contains_pattern(text: str) -> str:
    """A LIKE pattern (escape character backslash) that finds `text` anywhere, as typed:
    % and _ are matched literally, not as wildcards."""
    escaped = text.strip().lower().replace("\\", "\\\\").replace("%", "\\%")
    return "%" + escaped.replace("_", "\\_") + "%"


def count_of(session: Session, query: SelectOfScalar[Any]) -> int:
    """How many rows `query` matches (ordering dropped)."""
    counted = select(func.count()).select_from(query.order_by(None).subquery())
    return int(session.exec(counted).one())


def paginate(
    session: Session, query: SelectOfScalar[Any], *, limit: int, offset: int
) -> tuple[list[Any], int]:
    """The rows of one page of `query` and the total it matches."""
    total = count_of(session, query)
    rows = list(session.exec(query.limit(limit).offset(offset)).all())
    return rows, total


def page_of(
    rows: Sequence[RowT], total: int, limit: int, offset: int, read: Callable[[RowT], ItemT]
) -> Page[ItemT]:
    """A `Page` of `rows` turned into their response models by `read`."""
    return Page[ItemT](items=[read(row) for row in rows], total=total, limit=limit, offset=offset)
