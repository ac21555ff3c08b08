"""Refusals of the reduction engine: each names the field, the value received, what is accepted."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass, replace
from typing import Any

Loc = tuple[str | int, ...]


def field_name(loc: Loc) -> str:
    """Render a location as a path: ``("trials", 2, "duration")`` -> ``trials[2].duration``."""
    out = ""
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += f".{part}" if out else part
    return out or "request"


@dataclass(frozen=True, slots=True)
class InputProblem:
    """One refused input.

    Parameters
    ----------
    loc : tuple of str or int
        Path of the field in the request, e.g. ``("trials", 2, "duration")``.
    reason : str
        Why it is refused, e.g. ``"must be greater than zero"``.
    value : Any
        The value exactly as received (JSON-compatible).
    accepted : str
        What the field accepts, e.g. ``"a duration greater than zero, such as '120 s'"``.
    kind : str
        Machine-readable category, e.g. ``"wrong_dimension"``, ``"impossible_test"``.
    """

    loc: Loc
    reason: str
    value: Any
    accepted: str
    kind: str = "value_error"

    @property
    def msg(self) -> str:
        """``<field>: <reason> (got <value>); accepted: <accepted>``."""
        if self.value is None:
            shown = "nothing"
        elif isinstance(self.value, str):
            shown = f"'{self.value}'"
        else:
            shown = repr(self.value)
        if len(shown) > 80:
            shown = shown[:77] + "..."
        return f"{field_name(self.loc)}: {self.reason} (got {shown}); accepted: {self.accepted}"


class EngineInputError(ValueError):
    """The engine refuses its input; carries one or more :class:`InputProblem`.

    The first problem is exposed as ``loc``, ``value``, ``accepted`` and ``kind`` for
    callers that report a single field.
    """

    def __init__(self, problems: Iterable[InputProblem]) -> None:
        self.problems: tuple[InputProblem, ...] = tuple(problems)
        if not self.problems:
            raise ValueError("EngineInputError needs at least one problem")
        super().__init__("; ".join(p.msg for p in self.problems))

    @classmethod
    def single(
        cls, loc: Loc, value: Any, accepted: str, reason: str, kind: str = "value_error"
    ) -> EngineInputError:
        """Build an error holding one problem."""
        return cls([InputProblem(loc, reason, value, accepted, kind)])

    @property
    def loc(self) -> Loc:
        """Location of the first problem."""
        return self.problems[0].loc

    @property
    def value(self) -> Any:
        """Value received in the first problem's field."""
        return self.problems[0].value

    @property
    def accepted(self) -> str:
        """What the first problem's field accepts."""
        return self.problems[0].accepted

    @property
    def kind(self) -> str:
        """Category of the first problem."""
        return self.problems[0].kind

    def prefixed(self, *prefix: str | int) -> EngineInputError:
        """Return the same problems with ``prefix`` put in front of every location."""
        return EngineInputError(replace(p, loc=(*prefix, *p.loc)) for p in self.problems)
