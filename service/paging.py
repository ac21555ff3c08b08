"""Paging shared by every list: one page shape (items, total, limit, offset) and the query
helpers that fill it."""

from __future__ import annotations

import base64
import binascii
import json
from collections.abc import Callable, Sequence
from typing import Any, Generic, TypeVar

from pydantic import BaseModel, Field
from sqlmodel import Session, func, select
from sqlmodel.sql.expression import SelectOfScalar

from service.errors import invalid

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


class KeysetPage(Page[ItemT], Generic[ItemT]):
    """A page of a list that can also be paged by keyset: `next_after` goes on from it."""

    next_after: str | None = Field(
        default=None,
        description="send it back as `after` for the next page, which then costs the same "
        "as the first (null on the last page)",
    )


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


def encode_after(values: Sequence[Any]) -> str:
    """A keyset position (the sort key of a page's last row) as an opaque, URL-safe text."""
    raw = json.dumps(list(values), separators=(",", ":")).encode()
    return base64.urlsafe_b64encode(raw).decode().rstrip("=")


def decode_after(text: str, size: int) -> list[Any]:
    """The keyset position `encode_after` gave, or a 422 naming the `after` parameter."""
    try:
        values = json.loads(base64.urlsafe_b64decode(text + "=" * (-len(text) % 4)))
    except (binascii.Error, ValueError, UnicodeDecodeError):
        values = None
    if not isinstance(values, list) or len(values) != size or not all(map(_usable, values)):
        raise refused_position(text)
    return values


def _usable(value: Any) -> bool:
    """A keyset value a database takes: a short text or an integer within 64 bits."""
    if isinstance(value, bool):
        return False
    if isinstance(value, int):
        return abs(value) < 2**62
    return isinstance(value, str) and len(value) <= 40


def refused_position(text: str) -> Exception:
    """The 422 of an `after` the list did not give."""
    return invalid(
        ("query", "after"),
        "is not a position this list gave",
        value=text,
        accepted="the `next_after` of the page before, unchanged",
        label="after",
    )
