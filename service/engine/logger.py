"""Logger readings: rows of a logger file, already read as text, turned into typed SI readings.

The apparatus's mapping says which column holds the time (elapsed, with its unit, or a clock
time with its format) and which columns hold which quantities in which units. Every refusal
names the file's row and column header; nothing is returned until every row is clean.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime

from service.engine.errors import EngineInputError, InputProblem, Loc
from service.engine.units import TIME, Kind, accepted_text, conversion_for

MAX_PROBLEMS = 50
"""Cell refusals listed one by one; beyond this, one line says how many more there are."""

_NUMBER = re.compile(r"^[-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d{1,3})?$")
_DECIMAL_COMMA = re.compile(r"^[-+]?\d+,\d+$")


@dataclass(frozen=True, slots=True)
class TimeColumn:
    """Where the time is and how to read it: exactly one of ``unit`` and ``datetime_format``.

    Attributes
    ----------
    column : str
        Header text (case and surrounding space ignored) or a 1-based column number.
    unit : str or None
        Unit of an elapsed time, e.g. ``"min"``.
    datetime_format : str or None
        ``"iso"`` for ISO 8601 (how spreadsheet date cells arrive), or a ``strptime``
        pattern such as ``"%d/%m/%Y %H:%M:%S"``.
    """

    column: str
    unit: str | None = None
    datetime_format: str | None = None


@dataclass(frozen=True, slots=True)
class Channel:
    """One logged quantity.

    Attributes
    ----------
    quantity : str
        The name the readings are keyed by, e.g. ``"cell_pressure"``.
    column : str
        Header text or 1-based column number.
    unit : str
        Unit of the numbers in the column, e.g. ``"kPa"``.
    kind : Kind
        Physical kind the unit must have (``units.PRESSURE``...).
    required : bool
        An empty cell is refused; otherwise it reads as None.
    """

    quantity: str
    column: str
    unit: str
    kind: Kind
    required: bool = True


@dataclass(frozen=True, slots=True)
class LoggerMapping:
    """The time column and the channels of one apparatus's logger files."""

    time: TimeColumn
    channels: tuple[Channel, ...]


@dataclass(frozen=True, slots=True)
class LoggerRow:
    """One clean row.

    Attributes
    ----------
    row : int
        The file's row number (the header is row 1 unless told otherwise).
    time_s : float
        Elapsed time [s]: the column's value for an elapsed time; seconds since
        ``time_zero`` (or the first row) for a clock time.
    clock : datetime or None
        The clock time as read.
    values : mapping of str to float or None
        Each quantity in its canonical SI unit (temperatures in °C).
    texts : mapping of str to str
        Each cell exactly as in the file, by quantity, and the time under ``"time"``.
    """

    row: int
    time_s: float
    clock: datetime | None
    values: Mapping[str, float | None]
    texts: Mapping[str, str]


@dataclass(frozen=True, slots=True)
class LoggerReadings:
    """The typed readings of a logger file, rows in file order."""

    rows: tuple[LoggerRow, ...]
    headers: Mapping[str, str]

    @property
    def times_s(self) -> tuple[float, ...]:
        """Elapsed times of all rows [s]."""
        return tuple(r.time_s for r in self.rows)

    def series(self, quantity: str) -> tuple[float | None, ...]:
        """One quantity over all rows, SI."""
        return tuple(r.values[quantity] for r in self.rows)


def column_index(header: Sequence[str], wanted: str) -> int | None:
    """Find a column by header text (case and surrounding space ignored) or by 1-based number."""
    names = [h.strip().casefold() for h in header]
    key = wanted.strip().casefold()
    if key and key in names:
        return names.index(key)
    if key.isdigit() and 1 <= int(key) <= len(header):
        return int(key) - 1
    return None


def cell_message(problem: InputProblem) -> str:
    """Render a refusal as a person reads it: ``row 12, column 'Cell (kPa)': ...``."""
    loc = problem.loc
    if len(loc) == 5 and loc[0] == "file" and loc[1] == "row" and loc[3] == "column":
        text = str(problem.value) if problem.value is not None else ""
        shown = f"'{text[:40]}'" if text else "an empty cell"
        return (
            f"row {loc[2]}, column '{loc[4]}': {problem.reason} (got {shown}); "
            f"accepted: {problem.accepted}"
        )
    return problem.msg


def _number(text: str) -> tuple[float | None, str]:
    """Read the cell's number, or None and why not."""
    if _DECIMAL_COMMA.match(text):
        return None, "uses a decimal comma; write a decimal point"
    if not _NUMBER.match(text):
        return None, "is not a number"
    value = float(text)
    if not math.isfinite(value):
        return None, "is not a finite number"
    return value, ""


def _read_clock(text: str, fmt: str) -> datetime | None:
    try:
        if fmt == "iso":
            return datetime.fromisoformat(text)
        return datetime.strptime(text, fmt)
    except ValueError:
        return None


def _mapping_problems(
    header: Sequence[str], mapping: LoggerMapping
) -> tuple[list[InputProblem], dict[str, int]]:
    problems: list[InputProblem] = []
    columns: dict[str, int] = {}
    listed = ", ".join(f"'{h}'" for h in header[:20])
    choose = f"one of {listed} or a column number from 1 to {len(header)}"

    def add(loc: Loc, value: object, accepted: str, reason: str, kind: str) -> None:
        problems.append(InputProblem(loc, reason, value, accepted, kind))

    t = mapping.time
    if (t.unit is None) == (t.datetime_format is None):
        add(
            ("mapping", "time"),
            None,
            "either a unit for an elapsed time, such as 'min', or a date-time format",
            "needs exactly one of the two",
            "bad_mapping",
        )
    if t.unit is not None:
        try:
            conversion_for(t.unit.strip(), TIME)
        except ValueError as exc:
            add(
                ("mapping", "time", "unit"),
                t.unit,
                accepted_text(TIME, positive=False),
                str(exc),
                "wrong_dimension",
            )
    if (
        t.datetime_format is not None
        and t.datetime_format != "iso"
        and "%" not in t.datetime_format
    ):
        add(
            ("mapping", "time", "datetime_format"),
            t.datetime_format,
            "'iso' or a pattern such as '%d/%m/%Y %H:%M:%S'",
            "is not a date-time pattern",
            "bad_mapping",
        )
    index = column_index(header, t.column)
    if index is None:
        add(
            ("mapping", "time", "column"),
            t.column,
            choose,
            "is not a column of the file",
            "unknown_column",
        )
    else:
        columns["time"] = index
    seen: dict[int, str] = {index: "time"} if index is not None else {}
    for ch in mapping.channels:
        loc: Loc = ("mapping", ch.quantity)
        if ch.quantity in columns or ch.quantity == "time":
            add(loc, ch.quantity, "each quantity mapped once", "is mapped twice", "duplicate")
            continue
        try:
            conversion_for(ch.unit.strip(), ch.kind)
        except ValueError as exc:
            add(
                (*loc, "unit"),
                ch.unit,
                accepted_text(ch.kind, positive=False),
                str(exc),
                "wrong_dimension",
            )
        found = column_index(header, ch.column)
        if found is None:
            add(
                (*loc, "column"), ch.column, choose, "is not a column of the file", "unknown_column"
            )
        elif found in seen:
            add(
                (*loc, "column"),
                ch.column,
                "a column no other quantity uses",
                f"is already mapped to {seen[found]}",
                "same_column",
            )
        else:
            seen[found] = ch.quantity
            columns[ch.quantity] = found
    return problems, columns


def parse_logger_rows(
    header: Sequence[str],
    rows: Sequence[Sequence[str]],
    mapping: LoggerMapping,
    *,
    first_row: int = 2,
    time_zero: datetime | None = None,
) -> LoggerReadings:
    """Turn a logger file's text rows into typed readings, or refuse with every bad cell.

    Parameters
    ----------
    header : sequence of str
        The header row's texts.
    rows : sequence of sequence of str
        Data rows as text (``service.exchange.files.read_table`` gives them).
    mapping : LoggerMapping
        The apparatus's time column and channels.
    first_row : int
        File row number of ``rows[0]``.
    time_zero : datetime or None
        For a clock-time column: the instant elapsed times count from (e.g. when the
        consolidation pressure was applied); the first clean row when None.

    Returns
    -------
    LoggerReadings

    Notes
    -----
    Each number is read by Python and converted with the one unit registry
    (``units.conversion_for``): value_SI = factor·value + offset. Rows whose mapped cells
    are all blank are skipped. Times must rise strictly from row to row. Clock times are
    taken as the logger wrote them (no time-zone or daylight-saving change is applied).

    Raises
    ------
    EngineInputError
        Problems located ``("mapping", ...)`` for the mapping, and
        ``("file", "row", n, "column", header)`` for cells (render with
        :func:`cell_message`); at most ``MAX_PROBLEMS`` cells, then one summary.
    """
    problems, columns = _mapping_problems(header, mapping)
    if problems:
        raise EngineInputError(problems)
    t = mapping.time
    time_name = header[columns["time"]].strip()
    names = {ch.quantity: header[columns[ch.quantity]].strip() for ch in mapping.channels}
    convs = {ch.quantity: conversion_for(ch.unit.strip(), ch.kind) for ch in mapping.channels}
    time_conv = conversion_for(t.unit.strip(), TIME) if t.unit is not None else None
    cell_problems: list[InputProblem] = []

    def refuse(number: int, column: str, text: str, reason: str, accepted: str, kind: str) -> None:
        cell_problems.append(
            InputProblem(("file", "row", number, "column", column), reason, text, accepted, kind)
        )

    out: list[LoggerRow] = []
    last_time: float | None = None
    zero = time_zero
    time_accepted = (
        f"an elapsed time in {t.unit}, a number such as 12.5"
        if t.unit is not None
        else f"a date and time written as {t.datetime_format}"
    )
    for offset, row in enumerate(rows):
        number = first_row + offset
        cells = {
            q: (row[i].strip() if i < len(row) else "")
            for q, i in (("time", columns["time"]), *((q, columns[q]) for q in names))
        }
        if not any(cells.values()):
            continue
        time_text = cells["time"]
        time_s: float | None = None
        clock: datetime | None = None
        if not time_text:
            refuse(number, time_name, "", "is empty", time_accepted, "missing")
        elif time_conv is not None:
            value, why = _number(time_text)
            if value is None:
                refuse(number, time_name, time_text, why, time_accepted, "not_a_number")
            else:
                time_s = value * time_conv.factor + time_conv.offset
        else:
            assert t.datetime_format is not None  # _mapping_problems
            clock = _read_clock(time_text, t.datetime_format)
            if clock is None:
                refuse(
                    number,
                    time_name,
                    time_text,
                    "is not a date and time in the chosen format",
                    time_accepted,
                    "bad_datetime",
                )
            else:
                if zero is None:
                    zero = clock
                try:
                    time_s = (clock - zero).total_seconds()
                except TypeError:  # one of them carries a time zone, the other not
                    refuse(
                        number,
                        time_name,
                        time_text,
                        "mixes clock times with and without a time zone",
                        "clock times all with or all without a time zone",
                        "bad_datetime",
                    )
        if time_s is not None:
            if last_time is not None and time_s <= last_time:
                refuse(
                    number,
                    time_name,
                    time_text,
                    "does not come after the previous row's time",
                    "times that rise from row to row",
                    "time_order",
                )
            last_time = time_s
        values: dict[str, float | None] = {}
        for ch in mapping.channels:
            text = cells[ch.quantity]
            accepted = f"a number in {ch.unit}, such as 101.3"
            if not text:
                if ch.required:
                    refuse(number, names[ch.quantity], "", "is empty", accepted, "missing")
                values[ch.quantity] = None
                continue
            value, why = _number(text)
            if value is None:
                refuse(number, names[ch.quantity], text, why, accepted, "not_a_number")
                continue
            conv = convs[ch.quantity]
            values[ch.quantity] = value * conv.factor + conv.offset
        if time_s is not None and len(values) == len(mapping.channels):
            out.append(LoggerRow(number, time_s, clock, values, cells))
    if not cell_problems and not out:
        cell_problems.append(
            InputProblem(
                ("file",), "no data rows", len(rows), "at least one row of readings", "too_few"
            )
        )
    if cell_problems:
        shown = cell_problems[:MAX_PROBLEMS]
        if len(cell_problems) > MAX_PROBLEMS:
            more = len(cell_problems) - MAX_PROBLEMS
            shown.append(
                InputProblem(
                    ("file",),
                    f"and {more} more refused cells",
                    more,
                    "a file whose every mapped cell reads",
                    "too_many_problems",
                )
            )
        raise EngineInputError(shown)
    headers = {"time": time_name, **names}
    return LoggerReadings(rows=tuple(out), headers=headers)
