"""Errors of the domain, each knowing its HTTP status (no FastAPI import here).

Every error carries a sentence for people (`message`) and, in `detail`, the facts a client
may act on (the state and what it allows, both versions of a stale edit, seconds to wait):
the JSON API renders them as RFC 9457 problem details, the pages beside the form.
An `InvalidInput` carries one `FieldProblem` per refused field. Domain errors name fields by
their bare path (``("reason",)``, ``("trials", 2, "duration")``); the API adds ``body``.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any

Loc = tuple[str | int, ...]

# Where a location is not in the body: FastAPI's own prefixes, kept as they are.
PARAMETER_PLACES = frozenset({"body", "query", "path", "header", "cookie"})
# Lists whose items are named "<singular> <n>" in a label.
SINGULAR = {
    "samples": "Sample",
    "trials": "Trial",
    "readings": "Reading",
    "saturation": "Saturation step",
    "apparatus_ids": "Apparatus",
    "rows": "Row",
}


def field_path(loc: Sequence[str | int]) -> str:
    """A location as a path: ``("trials", 2, "duration")`` -> ``trials[2].duration``."""
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += f".{part}" if out else str(part)
    return out or "request"


def field_label(loc: Sequence[str | int]) -> str:
    """A location in words for a field the method catalogue does not describe:
    ``("samples", 3, "depth_top")`` -> ``Sample 4 · Depth top``; ``("reason",)`` -> ``Reason``.
    """
    words: list[str] = []
    parts = [p for p in loc if p not in PARAMETER_PLACES]
    for index, part in enumerate(parts):
        following = parts[index + 1] if index + 1 < len(parts) else None
        if isinstance(part, int):
            if index == 0 or not isinstance(parts[index - 1], str):
                words.append(f"Item {part + 1}")
            continue
        if isinstance(following, int):
            noun = SINGULAR.get(part, part.replace("_", " ").capitalize())
            words.append(f"{noun} {following + 1}")
            continue
        text = part.replace("_", " ")
        text = text[:-3] + " ID" if text.endswith(" id") else text
        words.append(text[:1].upper() + text[1:])
    return " · ".join(words) or "Request"


@dataclass(frozen=True, slots=True)
class FieldProblem:
    """One refused field.

    Parameters
    ----------
    loc : tuple of str or int
        The field's path without ``body``: ``("reason",)``, ``("trials", 2, "duration")``.
    reason : str
        Why, as the end of a sentence: ``"must be below the head at start"``.
    value : Any
        The value received (None when nothing was sent).
    accepted : str
        What the field accepts.
    kind : str
        A machine-readable category: ``"missing"``, ``"wrong_dimension"`` ...
    label : str
        The field in words with its position, ``"Trial 3 · Head at end"``; worked out from
        the path when empty.
    """

    loc: Loc
    reason: str
    value: Any = None
    accepted: str = ""
    kind: str = "value_error"
    label: str = ""

    @property
    def name(self) -> str:
        """The field in words."""
        return self.label or field_label(self.loc)

    @property
    def msg(self) -> str:
        """``Trial 3 · Head at end: must be below the head at start``."""
        return f"{self.name}: {self.reason}"

    def at(self, loc: Loc, label: str | None = None) -> FieldProblem:
        """The same problem at another location (and label)."""
        return replace(self, loc=loc, label=self.label if label is None else label)


def problem_from_dict(item: Mapping[str, Any]) -> FieldProblem:
    """A `FieldProblem` from the dict form ``{"loc", "msg", "type"}`` some callers build (the
    location kept as given); a leading ``"<field>: "`` of the message (the old way of naming
    it) is dropped."""
    loc = tuple(item.get("loc", ()))
    msg = str(item.get("msg", ""))
    bare = loc[1:] if loc[:1] == ("body",) else loc
    for prefix in (field_path(bare), field_path(loc[-1:]) if loc else ""):
        if prefix and msg.startswith(prefix + ": "):
            msg = msg[len(prefix) + 2 :]
            break
    return FieldProblem(
        loc,
        msg,
        item.get("input", item.get("value")),
        str(item.get("accepted", "")),
        str(item.get("type", "value_error")),
        str(item.get("label", "")),
    )


class ServiceError(Exception):
    """Base of every expected failure; the front doors render it with `status_code`.

    `detail` holds facts for the client beside the message (a mapping), rendered as members
    of the problem details."""

    status_code = 400
    code = "bad_request"
    title = "The request could not be handled"

    def __init__(self, message: str, *, detail: Mapping[str, Any] | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.detail: dict[str, Any] = dict(detail or {})


class NotFound(ServiceError):
    status_code, code, title = 404, "not_found", "Not found"


class NotAuthenticated(ServiceError):
    status_code, code, title = 401, "not_authenticated", "Sign in first"


class PermissionDenied(ServiceError):
    status_code, code, title = 403, "forbidden", "Not allowed"


class Conflict(ServiceError):
    status_code, code, title = 409, "conflict", "Conflict with the stored record"


class InvalidTransition(Conflict):
    code, title = "invalid_transition", "Not allowed in this state"


class StaleVersion(Conflict):
    """The record changed since the caller read it: `yours` (what was sent, with the version
    read) and `current` (the record now, with its version), both in the detail."""

    code, title = "stale_version", "Changed since you read it"

    def __init__(
        self,
        message: str,
        *,
        yours: Mapping[str, Any],
        current: Mapping[str, Any],
        detail: Mapping[str, Any] | None = None,
    ) -> None:
        super().__init__(
            message, detail={**(detail or {}), "yours": dict(yours), "current": dict(current)}
        )

    @property
    def yours(self) -> dict[str, Any]:
        return dict(self.detail["yours"])

    @property
    def current(self) -> dict[str, Any]:
        return dict(self.detail["current"])


class InvalidInput(ServiceError):
    """One or more fields refused; `problems` names each (`detail` for dicts of the same)."""

    status_code, code, title = 422, "invalid_input", "Some entries need attention"

    def __init__(
        self,
        message: str = "",
        *,
        problems: Iterable[FieldProblem] = (),
        detail: Iterable[Mapping[str, Any]] | Mapping[str, Any] | None = None,
    ) -> None:
        found = list(problems)
        if detail is not None and not isinstance(detail, Mapping):
            found += [problem_from_dict(item) for item in detail]
        self.problems: tuple[FieldProblem, ...] = tuple(found)
        if not message:
            message = (
                self.problems[0].msg
                if len(self.problems) == 1
                else (f"{len(self.problems)} entries need attention")
            )
        super().__init__(message, detail=detail if isinstance(detail, Mapping) else None)


def invalid(loc: Loc, reason: str, **facts: Any) -> InvalidInput:
    """A 422 naming one field: ``invalid(("reason",), "say why the trial is left out")``."""
    return InvalidInput(problems=[FieldProblem(loc, reason, **facts)])


class TooLarge(ServiceError):
    """A request body over the size limit; `detail` names the limit in bytes."""

    status_code, code, title = 413, "too_large", "Too large"


class TooManyAttempts(ServiceError):
    status_code, code, title = 429, "too_many_attempts", "Too many attempts"


class Unavailable(ServiceError):
    """The service cannot answer just now (the database is unreachable); `detail` may carry
    retry_after_seconds."""

    status_code = 503
    code = "unavailable"


class DatabaseNotMigrated(RuntimeError):
    """Raised at start-up when the database is behind the code's migrations."""


def require_version(
    row: Any,
    sent: int | None,
    what: str,
    *,
    yours: Mapping[str, Any],
    current: Mapping[str, Any] | None = None,
    required: bool = True,
) -> None:
    """Refuse an edit made against an older version of `row`: 409 with both versions.

    `yours` is what was sent; `current` the record as it is now (by default the row's own
    fields). Without a version: 422 when one is `required`, else no check."""
    if sent is None:
        if required:
            raise invalid(
                ("version",),
                f"send the version of the {what} you read",
                accepted="the version number the record had when you read it",
                kind="missing",
            )
        return
    actual = int(row.version)
    if sent != actual:
        now = dict(current) if current is not None else row.model_dump(mode="json")
        now.pop("result", None)
        raise StaleVersion(
            f"the {what} changed since you read it: you sent version {sent}, it is now "
            f"version {actual}; reload, compare, and send your change again",
            yours={**yours, "version": sent},
            current={**now, "version": actual},
        )


ECHO_LIMIT = 200


def capped(value: Any, limit: int = ECHO_LIMIT) -> Any:
    """`value` as it may be echoed back: text longer than `limit` characters cut with an
    ellipsis, lists and objects cut the same way once written out (a refusal never sends a
    multi-megabyte input back)."""
    if isinstance(value, str):
        return value if len(value) <= limit else value[: limit - 1] + "…"
    if isinstance(value, bytes):
        return capped(value.decode("utf-8", "replace"), limit)
    if isinstance(value, Mapping | list | tuple):
        text = repr(value)
        return value if len(text) <= limit else text[: limit - 1] + "…"
    return value


# The names pydantic appends to a location to say which branch of a union it tried.
_UNION_BRANCH = re.compile(
    r"^(str|float|int|bool|none|list\[.*\]|dict\[.*\]|function-.*|constrained-.*|"
    r"literal\[.*\]|tagged-union\[.*\]|[A-Z]\w*In|[A-Z]\w*Object)$"
)
_REASONS = {
    "missing": "is required",
    "extra_forbidden": "is not a field here",
    "json_invalid": "is not valid JSON",
}


_CHOICE_KINDS = frozenset({"literal_error", "enum"})
_QUOTED = re.compile(r"'([^']*)'")


def choice_words(expected: str) -> str:
    """pydantic's list of choices as plain words: "'tube', 'block' or 'bulk'" ->
    "tube, block, bulk"."""
    found = _QUOTED.findall(expected)
    return ", ".join(found) if found else expected


def problems_from_validation(
    errors: Iterable[Mapping[str, Any]],
    label: Callable[[Loc], str] = field_label,
    accepted_of: Callable[[Loc], str] = lambda _loc: "",
) -> list[FieldProblem]:
    """pydantic's refusals as field problems: the location as pydantic gives it (FastAPI's
    start with ``body``, ``query`` ...) without the name of a union's branch, pydantic's
    words without its "Value error," prefix, what is accepted where it says so (or as
    `accepted_of` describes the field)."""
    out: list[FieldProblem] = []
    seen: set[Loc] = set()
    for error in errors:
        loc = tuple(error.get("loc", ()))
        while loc and isinstance(loc[-1], str) and _UNION_BRANCH.match(loc[-1]):
            loc = loc[:-1]
        if loc in seen:  # one message per field, not one per branch of a union
            continue
        seen.add(loc)
        kind = str(error.get("type", "value_error"))
        reason = str(error.get("msg", ""))
        reason = reason.removeprefix("Value error, ").removeprefix("Assertion failed, ")
        accepted = ""
        if "; accepted: " in reason:
            reason, accepted = reason.split("; accepted: ", 1)
        for named in (".".join(map(str, loc)), field_path(loc[1:]), field_path(loc[-1:])):
            if named and reason.startswith(named + ": "):
                reason = reason[len(named) + 2 :]
                break
        ctx = error.get("ctx") or {}
        if isinstance(ctx, Mapping):
            accepted = str(ctx.get("accepted") or accepted)
            if not accepted and "expected" in ctx:
                accepted = f"one of {ctx['expected']}"
        reason = _REASONS.get(kind, reason[:1].lower() + reason[1:])
        if kind in _CHOICE_KINDS and isinstance(ctx, Mapping) and "expected" in ctx:
            # pydantic says "Input should be 'tube', 'block' or 'bulk'": plain words instead.
            reason = "choose one of: " + choice_words(str(ctx["expected"]))
            accepted = ""  # the reason says it; not twice
        elif not accepted:
            accepted = accepted_of(loc)
        value = error.get("input") if kind != "missing" else None
        out.append(FieldProblem(loc, reason, value, accepted, kind, label(loc)))
    return out
