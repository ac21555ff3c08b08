"""Refusals on pages, one way for every form: try the service call, and when it is refused
put each message beside its field (or atop the form), keep everything typed, and leave
nothing of the refused call in the database.

    with attempt(session) as tried:
        lab_tests.write_specimen(session, test_id, data, actor=user)
    if tried.refused:
        errors, general = tried.fields(prefixed("specimen"))

`attempt` runs the call in a savepoint: a refusal rolls back only what the call did, and the
request's transaction commits the rest (the page's own reads, a sign-in failure count).
Forms built with pydantic inside the block are refused the same way.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any

from pydantic import ValidationError
from sqlmodel import Session

from service.errors import (
    Conflict,
    FieldProblem,
    InvalidInput,
    Loc,
    PermissionDenied,
    ServiceError,
    StaleVersion,
    TooManyAttempts,
    capped,
    problems_from_validation,
)
from service.lab_tests.reduction import accepted_of, label

NameOf = Callable[[Loc], str | None]
FORM_REFUSALS: tuple[type[ServiceError], ...] = (
    InvalidInput,
    Conflict,
    PermissionDenied,
    TooManyAttempts,
)


def beside(problem: FieldProblem) -> str:
    """The message shown next to a field (the field's own label is already beside it)."""
    if problem.kind == "missing":
        return f"Needed: {problem.accepted or problem.reason}."
    reason = problem.reason[:1].upper() + problem.reason[1:]
    shown = ""
    if isinstance(problem.value, str | int | float) and not isinstance(problem.value, bool):
        shown = f" (you typed '{capped(str(problem.value), 60)}')"
    accepted = f" Accepted: {problem.accepted}." if problem.accepted else ""
    return f"{reason}{shown}.{accepted}".replace("..", ".")


def validation_refusal(exc: ValidationError, prefix: Loc = ()) -> InvalidInput:
    """A form model's refusal as an InvalidInput naming each field in words."""
    problems = problems_from_validation(
        exc.errors(), lambda loc: label((*prefix, *loc)), lambda loc: accepted_of((*prefix, *loc))
    )
    return InvalidInput(problems=[p.at((*prefix, *p.loc)) for p in problems])


def form_errors(
    problems: Iterable[FieldProblem], name_of: NameOf
) -> tuple[dict[str, dict[str, str]], list[str]]:
    """Refusals split into messages beside form fields (by form name) and messages for the
    whole form. `name_of(loc)` is the form field a location belongs to, or None."""
    by_field: dict[str, dict[str, str]] = {}
    general: list[str] = []
    for problem in problems:
        name = name_of(problem.loc)
        if name is None:
            general.append(problem.msg)
        elif name in by_field:
            by_field[name]["msg"] += " " + beside(problem)
        else:
            by_field[name] = {"msg": beside(problem), "kind": problem.kind, "label": problem.name}
    return by_field, general


def prefixed(prefix: str, known: Iterable[str] | None = None) -> NameOf:
    """Form names ``prefix.<field>`` (``trial.head_final``, ``trial.readings.2.time``); with
    `known`, only those first parts (others go atop the form)."""
    allowed = set(known) if known is not None else None

    def name_of(loc: Loc) -> str | None:
        parts = [str(p) for p in loc if p != "body"]
        if not parts or (allowed is not None and parts[0] not in allowed):
            return None
        return ".".join([prefix, *parts]) if prefix else ".".join(parts)

    return name_of


def simple_name(fields: Iterable[str], aliases: Mapping[str, str] | None = None) -> NameOf:
    """Form names of a flat form: the first part of the location if it is one of `fields`."""
    known = set(fields)
    renamed = dict(aliases or {})

    def name_of(loc: Loc) -> str | None:
        parts = [str(p) for p in loc if p != "body"]
        if not parts:
            return None
        first = renamed.get(parts[0], parts[0])
        return first if first in known else None

    return name_of


@dataclass
class Attempt:
    """How a service call went: nothing to say, or the refusal."""

    error: ServiceError | None = None

    @property
    def refused(self) -> bool:
        return self.error is not None

    @property
    def status(self) -> int:
        return self.error.status_code if self.error is not None else 200

    @property
    def message(self) -> str:
        return self.error.message if self.error is not None else ""

    @property
    def problems(self) -> Sequence[FieldProblem]:
        return self.error.problems if isinstance(self.error, InvalidInput) else ()

    @property
    def stale(self) -> StaleVersion | None:
        return self.error if isinstance(self.error, StaleVersion) else None

    @property
    def detail(self) -> dict[str, Any]:
        return self.error.detail if self.error is not None else {}

    def fields(self, name_of: NameOf) -> tuple[dict[str, dict[str, str]], list[str]]:
        """Messages beside fields, and the others (a refusal that names no field is one)."""
        if self.problems:
            return form_errors(self.problems, name_of)
        if not self.refused:
            return {}, []
        named = self.detail.get("field")
        name = name_of((named,)) if isinstance(named, str) else None
        if name is None:
            return {}, [self.message]
        kind = self.error.code if self.error is not None else ""
        return {name: {"msg": self.message[:1].upper() + self.message[1:], "kind": kind}}, []


@contextmanager
def attempt(
    session: Session, catch: tuple[type[ServiceError], ...] = FORM_REFUSALS
) -> Iterator[Attempt]:
    """Run a service call; a refusal of one of the `catch` kinds (or of a form model) is kept
    in the `Attempt` and what the call did is rolled back. Other errors propagate (a 404 is
    the error page)."""
    tried = Attempt()
    savepoint = session.begin_nested()
    try:
        yield tried
    except catch as exc:
        tried.error = exc
    except ValidationError as exc:
        tried.error = validation_refusal(exc)
    else:
        if savepoint.is_active:
            savepoint.commit()
        return
    if savepoint.is_active:  # a refusal that committed its own record (a failed password)
        savepoint.rollback()
