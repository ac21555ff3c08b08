"""No control character reaches the database: every flush checks the text it would write
(installed by create_app() and by service/models.py, which scripts and tests import).

One check for every way in (JSON API, pages, uploaded schedules and readings, the command
line): a text column, or a string inside a JSON column, holding a control character (see
service/text.py) is refused with InvalidInput (422) naming the field, before anything is
written. Refused, not stripped: what was typed is kept as typed or not at all. Only values
being written are checked, so text stored before this check does not block other edits.
"""

from __future__ import annotations

from typing import Any

import sqlalchemy as sa
from sqlalchemy.orm import Session, UOWTransaction

from service.errors import InvalidInput
from service.text import first_control_character


def _written_values(instance: Any, *, new: bool) -> list[tuple[str, Any]]:
    state = sa.inspect(instance)
    written = []
    for attribute in state.mapper.column_attrs:
        key = attribute.key
        if new:
            written.append((key, getattr(instance, key, None)))
        else:
            written.extend((key, value) for value in state.attrs[key].history.added)
    return written


def refuse_control_characters(
    session: Session, _context: UOWTransaction, _instances: object
) -> None:
    """before_flush: raise InvalidInput for the first written text with a control character."""
    for new, instances in ((True, session.new), (False, session.dirty)):
        for instance in instances:
            for key, value in _written_values(instance, new=new):
                found = first_control_character(value)
                if found is None:
                    continue
                path, message = found
                loc = ["body", key, *path]
                raise InvalidInput(
                    f"{'.'.join(map(str, loc[1:]))}: {message}",
                    detail=[{"loc": loc, "msg": message, "type": "control_character"}],
                )


def install() -> None:
    """Check every flush of every session (safe to call twice)."""
    if not sa.event.contains(Session, "before_flush", refuse_control_characters):
        sa.event.listen(Session, "before_flush", refuse_control_characters)
