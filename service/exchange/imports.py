"""Imports: trial readings from a logger's CSV, and sample schedules from CSV or XLSX.

Every refusal names the file's row and column (row 1 is the header). Nothing is stored when
any row is refused: a schedule is checked in full, then received in one batch."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from pydantic import ValidationError
from sqlmodel import Session

from service.access import get_visible
from service.accounts.models import User
from service.common import Priority, SampleType
from service.errors import FieldProblem, InvalidInput, problems_from_validation
from service.exchange.files import Table
from service.lab_tests import reduction
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest, Trial
from service.lab_tests.schemas import TrialCreate, TrialWritten
from service.quantities import LENGTH, TIME, Kind, unit_refusal
from service.samples.service import SampleBatch, SampleIn, check_samples, receive_samples


def cell_label(row_number: int, column: str) -> str:
    """A cell of the file in words: "Row 7 · depth_top" (row 1 is the header)."""
    return f"Row {row_number} · {column}"


def cell_problem(
    row_number: int, column: str, value: Any, reason: str, accepted: str = "", kind: str = ""
) -> FieldProblem:
    """A refused cell, at ``("file", "row", n, "column", header)``."""
    return FieldProblem(
        ("file", "row", row_number, "column", column),
        reason,
        value if value != "" else None,
        accepted,
        kind or "value_error",
        cell_label(row_number, column),
    )


# --- readings ------------------------------------------------------------------------------


@dataclass(frozen=True)
class ReadingsImport:
    """Readings in the reduction contract's shape, and the file row each came from."""

    readings: list[dict[str, str]]
    rows: list[int]
    time_header: str = "time"
    head_header: str = "head"


def _unit_problem(field_name: str, unit: str, kind: Kind) -> FieldProblem | None:
    reason = unit_refusal(unit, kind)
    if reason is None:
        return None
    return FieldProblem(
        (field_name,), reason, unit, f"a {kind.name} unit such as {kind.examples}", "unit"
    )


def parse_readings(
    table: Table, *, time_column: str, head_column: str, time_unit: str, head_unit: str
) -> ReadingsImport:
    """Read a time and a head column as typed numbers in the chosen units.

    Times must rise from row to row; heads must be above zero. Blank rows are skipped."""
    problems: list[FieldProblem] = []
    columns = ", ".join(f"'{h}'" for h in table.header)
    indexes: dict[str, int] = {}
    for name, wanted in (("time_column", time_column), ("head_column", head_column)):
        index = table.column_index(wanted)
        if index is None:
            problems.append(
                FieldProblem(
                    (name,),
                    "is not a column of the file's header",
                    wanted,
                    f"one of {columns} or a column number from 1 to {len(table.header)}",
                    "unknown_column",
                )
            )
        else:
            indexes[name] = index
    if len(indexes) == 2 and indexes["time_column"] == indexes["head_column"]:
        problems.append(
            FieldProblem(
                ("head_column",),
                "is the same column as the time column",
                head_column,
                "two different columns",
                "same_column",
            )
        )
    for name, unit, kind in (("time_unit", time_unit, TIME), ("head_unit", head_unit, LENGTH)):
        found = _unit_problem(name, unit, kind)
        if found:
            problems.append(found)
    if problems:
        raise InvalidInput(f"{len(problems)} problem(s) with the chosen columns", problems=problems)

    time_index, head_index = indexes["time_column"], indexes["head_column"]
    time_name, head_name = table.header[time_index], table.header[head_index]
    readings: list[dict[str, str]] = []
    rows: list[int] = []
    last_time: float | None = None
    for offset, row in enumerate(table.rows):
        number = table.first_row + offset
        if not any(cell.strip() for cell in row):
            continue
        values: dict[str, float] = {}
        for key, index, name, rule in (
            ("time", time_index, time_name, "a number of zero or more, such as 600"),
            ("head", head_index, head_name, "a number greater than zero, such as 110.7"),
        ):
            text = row[index].strip()
            if not text:
                problems.append(cell_problem(number, name, text, "is empty", rule, "missing"))
                continue
            try:
                value = float(text)
            except ValueError:
                problems.append(
                    cell_problem(number, name, text, "is not a number", rule, "not_a_number")
                )
                continue
            if not math.isfinite(value):
                problems.append(
                    cell_problem(number, name, text, "is not a finite number", rule, "not_finite")
                )
            elif key == "time" and value < 0:
                problems.append(cell_problem(number, name, text, "is negative", rule, "negative"))
            elif key == "head" and value <= 0:
                problems.append(
                    cell_problem(number, name, text, "is not above zero", rule, "not_positive")
                )
            else:
                values[key] = value
        if "time" in values:
            if last_time is not None and values["time"] <= last_time:
                problems.append(
                    cell_problem(
                        number,
                        time_name,
                        row[time_index].strip(),
                        f"does not come after the previous reading's time {last_time:g}",
                        "times that rise from row to row",
                        "time_order",
                    )
                )
            last_time = values["time"]
        if len(values) == 2:
            readings.append(
                {
                    "time": f"{row[time_index].strip()} {time_unit.strip()}",
                    "head": f"{row[head_index].strip()} {head_unit.strip()}",
                }
            )
            rows.append(number)
    if not problems and len(readings) < 2:
        problems.append(
            FieldProblem(
                ("file",),
                f"has {len(readings)} reading(s)",
                None,
                "at least two rows with a time and a head",
                "too_few_readings",
            )
        )
    if problems:
        raise InvalidInput(f"{len(problems)} problem(s) in the file", problems=problems)
    return ReadingsImport(
        readings=readings, rows=rows, time_header=time_name, head_header=head_name
    )


def readings_trial(imported: ReadingsImport, temperature: str | None) -> dict[str, Any]:
    """The trial to record, in the contract's shape (what the trials endpoint accepts)."""
    trial: dict[str, Any] = {"readings": imported.readings}
    if temperature:
        trial["temperature"] = temperature.strip()
    return trial


def save_readings(
    session: Session,
    test_id: int,
    imported: ReadingsImport,
    *,
    temperature: str | None,
    idempotency_key: str | None,
    user: User,
) -> TrialWritten:
    """Record the imported run as a new trial through the lifecycle (same rules, same
    idempotency, same live reduction as a trial typed at the bench)."""
    data = TrialCreate.model_validate(readings_trial(imported, temperature))
    return lab_tests.record_trial(
        session, test_id, data, idempotency_key=idempotency_key, actor=user
    )


def preview_readings(
    session: Session,
    test_id: int,
    imported: ReadingsImport,
    *,
    temperature: str | None,
    user: User,
) -> dict[str, Any]:
    """Reduce the imported run alone with the test's specimen and apparatus; stores nothing.

    An engine refusal of a reading (a head that rises, say) is reported against its file row."""
    test = get_visible(session, PermeabilityTest, test_id, user, "test")
    trial = readings_trial(imported, temperature)
    run = Trial(test_id=test_id, seq=1, idempotency_key="-", entries=trial)
    reduced = reduction.reduce_stored(session, test, trials=[run])
    if reduced.result is None:
        raise InvalidInput(
            "the engine refused the imported readings",
            problems=[_file_problem(p, imported) for p in reduced.problems],
        )
    return {"test_id": test_id, "trial": trial, "rows": imported.rows, "reduction": reduced.result}


def _file_problem(item: FieldProblem, imported: ReadingsImport) -> FieldProblem:
    """An engine refusal of the imported run, at the file's row and column where it has one."""
    loc = item.loc
    if len(loc) >= 4 and loc[:3] == ("trials", 0, "readings") and isinstance(loc[3], int):
        row = imported.rows[loc[3]] if loc[3] < len(imported.rows) else 0
        column = imported.time_header if loc[4:5] == ("time",) else imported.head_header
        return cell_problem(row, column, item.value, item.reason, item.accepted, item.kind)
    if loc[:2] == ("trials", 0) and loc[2:] == ("temperature",):
        return item.at(("temperature",), "Temperature")
    return item.at(("test", *loc))


# --- sample schedules ----------------------------------------------------------------------

SCHEDULE_COLUMNS = {
    "client_sample_id": "the client's sample ID (text)",
    "location": "a location name of the project, e.g. BH-03",
    "depth_top": "a depth with its unit, e.g. '1.50 m' (or a number under 'depth_top [m]')",
    "depth_bottom": "a depth with its unit, not above depth_top",
    "sample_type": ", ".join(t.value for t in SampleType),
    "description": "text",
    "condition": "condition on arrival (text)",
    "seal_intact": "yes or no (blank: not recorded)",
    "storage_place": "e.g. 'Cold room B / 4'",
    "priority": ", ".join(p.value for p in Priority),
}
REQUIRED_SCHEDULE_COLUMNS = ("sample_type",)
_YES = {"yes", "y", "true", "1", "intact"}
_NO = {"no", "n", "false", "0", "broken"}


@dataclass
class SchedulePreview:
    rows: list[dict[str, Any]] = field(default_factory=list)
    errors: list[FieldProblem] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return not self.errors and bool(self.rows)


def _split_header(text: str) -> tuple[str, str]:
    """'depth_top [m]' -> ('depth_top', 'm'); 'Depth top' -> ('depth_top', '')."""
    name, unit = text, ""
    if "[" in text and text.rstrip().endswith("]"):
        name, unit = text.split("[", 1)
        unit = unit.rstrip()[:-1].strip()
    return name.strip().casefold().replace(" ", "_"), unit


def _header_problem(text: str, reason: str, accepted: str, kind: str) -> FieldProblem:
    return cell_problem(1, text, text, reason, accepted, kind)


def _columns(table: Table, preview: SchedulePreview) -> dict[str, tuple[int, str, str]]:
    """The schedule's columns by key: (index, header as written, unit in the header)."""
    columns: dict[str, tuple[int, str, str]] = {}
    for index, text in enumerate(table.header):
        if not text:
            continue
        key, unit = _split_header(text)
        problem: FieldProblem | None = None
        if key not in SCHEDULE_COLUMNS:
            problem = _header_problem(
                text, "is not a schedule column", ", ".join(SCHEDULE_COLUMNS), "unknown_column"
            )
        elif key in columns:
            problem = _header_problem(text, "appears twice", "each column once", "duplicate_column")
        elif unit and key not in ("depth_top", "depth_bottom"):
            problem = _header_problem(text, "takes no unit", f"'{key}'", "unit")
        elif unit and (found := _unit_problem(text, unit, LENGTH)) is not None:
            problem = _header_problem(text, found.reason, found.accepted, "unit")
        if problem is not None:
            preview.errors.append(problem)
        else:
            columns[key] = (index, text, unit)
    for key in REQUIRED_SCHEDULE_COLUMNS:
        if key not in columns:
            preview.errors.append(
                FieldProblem(
                    ("file", "row", 1),
                    f"has no '{key}' column",
                    None,
                    "a header with at least " + ", ".join(REQUIRED_SCHEDULE_COLUMNS),
                    "missing_column",
                    "Row 1 (the header)",
                )
            )
    return columns


def _cell(
    key: str, value: str, unit: str, number: int, text: str, preview: SchedulePreview
) -> tuple[bool, Any]:
    """(accepted, the value for the sample) of one non-empty cell."""
    if key == "seal_intact":
        if value.casefold() in _YES:
            return True, True
        if value.casefold() in _NO:
            return True, False
        preview.errors.append(
            cell_problem(number, text, value, "is not yes or no", SCHEDULE_COLUMNS[key], "choice")
        )
        return False, None
    if key in ("sample_type", "priority"):
        return True, value.casefold()
    if not unit:
        return True, value
    try:
        float(value)
    except ValueError:
        preview.errors.append(
            cell_problem(
                number,
                text,
                value,
                f"is not a number of {unit}",
                f"a number such as 1.5 (the unit {unit} is in the header)",
                "not_a_number",
            )
        )
        return False, None
    return True, f"{value} {unit}"


def read_schedule(table: Table) -> SchedulePreview:
    """Check every row's shape (types, choices, numbers) and name each refusal's row and column.

    Project-dependent checks (location names, depth order, duplicates) are made by the
    reception service; see `check_schedule`."""
    preview = SchedulePreview()
    columns = _columns(table, preview)
    if preview.errors:
        return preview
    for offset, raw in enumerate(table.rows):
        number = table.first_row + offset
        if not any(cell.strip() for cell in raw):
            continue
        data: dict[str, Any] = {}
        headers = {key: text for key, (_, text, _) in columns.items()}
        row_ok = True
        for key, (index, text, unit) in columns.items():
            value = raw[index].strip()
            if value:
                accepted, data[key] = _cell(key, value, unit, number, text, preview)
                row_ok = row_ok and accepted
        data = {k: v for k, v in data.items() if v is not None}
        try:
            row = SampleIn.model_validate(data)
        except ValidationError as exc:
            for problem in problems_from_validation(exc.errors()):
                key = str(problem.loc[0]) if problem.loc else "row"
                preview.errors.append(
                    cell_problem(
                        number,
                        headers.get(key, key),
                        data.get(key),
                        problem.reason,
                        problem.accepted or SCHEDULE_COLUMNS.get(key, ""),
                        problem.kind,
                    )
                )
            row_ok = False
        if row_ok:
            preview.rows.append(
                {
                    "row": number,
                    **row.model_dump(mode="json", exclude_defaults=True),
                    "sample_type": row.sample_type.value,
                }
            )
    if not preview.errors and not preview.rows:
        preview.errors.append(
            FieldProblem(
                ("file",),
                "has no data rows below the header",
                None,
                "one row per sample",
                "no_rows",
            )
        )
    return preview


def _reception_problems(
    problems: list[FieldProblem], preview: SchedulePreview, headers: dict[str, str]
) -> list[FieldProblem]:
    """The reception service's refusals at ("samples", i, field) as the file's row and
    column; anything else as it is."""
    out = []
    for item in problems:
        loc = item.loc
        at = loc[1] if len(loc) >= 3 and loc[0] == "samples" else None
        if isinstance(at, int) and at < len(preview.rows):
            key = str(loc[2])
            number = preview.rows[at]["row"]
            column = headers.get(key, key)
            reason = item.reason
            if item.kind == "duplicate":
                reason = f"appears more than once: is also row {_first_row(preview, at, key)}"
            out.append(cell_problem(number, column, item.value, reason, item.accepted, item.kind))
        else:
            out.append(item)
    return out


def _first_row(preview: SchedulePreview, at: int, key: str) -> int:
    """The file row of the first row that has the same `key` value as row `at` (letter case
    ignored, as the duplicate check does)."""
    value = str(preview.rows[at].get(key, "")).casefold()
    rows = (row["row"] for row in preview.rows if str(row.get(key, "")).casefold() == value)
    return int(next(rows))


def _batch(preview: SchedulePreview, received_at: Any, delivered_by: str) -> Any:
    samples = [{k: v for k, v in row.items() if k != "row"} for row in preview.rows]
    return SampleBatch.model_validate(
        {"received_at": received_at, "delivered_by": delivered_by, "samples": samples}
    )


def check_schedule(
    session: Session,
    project_id: int,
    table: Table,
    *,
    actor: User,
    received_at: Any = None,
    delivered_by: str = "",
) -> SchedulePreview:
    """Everything `save_schedule` would refuse, without storing anything, in one pass: the
    rows whose cells read are checked against the project (locations, depth order,
    duplicates) even when other rows are refused, so no row shows as ready that a second
    check would refuse."""
    preview = read_schedule(table)
    if not preview.rows:
        return preview
    headers = {_split_header(h)[0]: h for h in table.header}
    try:
        batch = _batch(preview, received_at, delivered_by)
    except ValidationError as exc:
        preview.errors.extend(problems_from_validation(exc.errors()))
        return preview
    problems = check_samples(session, project_id, batch, actor=actor)
    preview.errors.extend(_reception_problems(problems, preview, headers))
    return preview


def save_schedule(
    session: Session,
    project_id: int,
    table: Table,
    *,
    actor: User,
    received_at: Any = None,
    delivered_by: str = "",
) -> list[Any]:
    """Receive every row of the schedule as one batch, or refuse the file and store nothing."""
    preview = check_schedule(
        session, project_id, table, actor=actor, received_at=received_at, delivered_by=delivered_by
    )
    if preview.errors:
        raise InvalidInput(
            f"{len(preview.errors)} problem(s) in the schedule", problems=preview.errors
        )
    return receive_samples(
        session, project_id, _batch(preview, received_at, delivered_by), actor=actor
    )
