"""The paging every list of the JSON API takes (?limit=&offset=) and answers with (the page
shape: service/paging.py)."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Annotated, TypedDict, TypeVar

from fastapi import Depends, Query

from service.paging import DEFAULT_LIMIT, MAX_LIMIT, Page

RowT = TypeVar("RowT")
ItemT = TypeVar("ItemT")

Limit = Annotated[int, Query(ge=1, le=MAX_LIMIT, description="page size")]
Offset = Annotated[int, Query(ge=0, description="rows to skip")]


class Window(TypedDict):
    limit: int
    offset: int


@dataclass(frozen=True, slots=True)
class PageAsked:
    """The page a client asked for."""

    limit: int
    offset: int

    @property
    def window(self) -> Window:
        """`limit` and `offset` as keywords for a service's list function."""
        return {"limit": self.limit, "offset": self.offset}

    def of(self, rows: Sequence[RowT], total: int, read: Callable[[RowT], ItemT]) -> Page[ItemT]:
        """A page of rows already cut to this page, each turned into its response model."""
        return Page[ItemT](
            items=[read(row) for row in rows], total=total, limit=self.limit, offset=self.offset
        )

    def cut(self, rows: Sequence[RowT], read: Callable[[RowT], ItemT]) -> Page[ItemT]:
        """This page of a whole list."""
        return self.of(rows[self.offset : self.offset + self.limit], len(rows), read)


def page_asked(limit: Limit = DEFAULT_LIMIT, offset: Offset = 0) -> PageAsked:
    return PageAsked(limit, offset)


Paging = Annotated[PageAsked, Depends(page_asked)]
