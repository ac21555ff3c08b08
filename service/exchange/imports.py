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
from service.common import ApparatusKind, Priority, SampleType
from service.engine import EngineInputError, parse_request, reduce, result_to_dict
from service.engine.units import LENGTH, TIME, conversion_for
from service.errors import InvalidInput
from service.exchange.files import Table, problem
from service.lab_tests.models import PermeabilityTest
from service.lab_tests.payload import build_request
from service.lab_tests.schemas import TrialCreate
from service.lab_tests.service import (
    apparatus_of,
    default_uncertainties,
    record_trial,
    saturation_of,
    specimen_of,
)
from service.samples.service import SampleBatch, SampleIn, receive_samples

PERMEAMETERS = (ApparatusKind.RIGID_WALL_PERMEAMETER, ApparatusKind.FLEXIBLE_WALL_PERMEAMETER)


def _cell_loc(row_number: int, column: str) -> list[str | int]:
    return ["file", "row", row_number, "column", column]


def _cell_problem(
    row_number: int, column: str, text: str, reason: str, accepted: str, kind: str
) -> dict[str, Any]:
    shown = f"'{text[:40]}'" if text else "an empty cell"
    return problem(
        _cell_loc(row_number, column),
        f"row {row_number}, column '{column}': {reason} (got {shown}); accepted: {accepted}",
        kind,
    )


# --- readings ------------------------------------------------------------------------------


@dataclass(frozen=True)
class ReadingsImport:
    """Readings in the reduction contract's shape, and the file row each came from."""

    readings: list[dict[str, str]]
    rows: list[int]
    time_header: str = "time"
    head_header: str = "head"


def _unit_problem(field_name: str, unit: str, kind: Any) -> dict[str, Any] | None:
    try:
        conversion_for(unit.strip(), kind)
    except ValueError as exc:
        return problem(
            ["body", field_name],
            f"{field_name}: {exc} (got '{unit[:30]}'); accepted: a {kind.name} unit such as "
            f"{kind.examples}",
            "unit",
        )
    return None


def parse_readings(
    table: Table, *, time_column: str, head_column: str, time_unit: str, head_unit: str
) -> ReadingsImport:
    """Read a time and a head column as typed numbers in the chosen units.

    Times must rise from row to row; heads must be above zero. Blank rows are skipped."""
    problems: list[dict[str, Any]] = []
    columns = ", ".join(f"'{h}'" for h in table.header)
    indexes: dict[str, int] = {}
    for name, wanted in (("time_column", time_column), ("head_column", head_column)):
        index = table.column_index(wanted)
        if index is None:
            problems.append(
                problem(
                    ["body", name],
                    f"{name}: no column '{wanted[:40]}' in the file's header; accepted: one of "
                    f"{columns} or a column number from 1 to {len(table.header)}",
                    "unknown_column",
                )
            )
        else:
            indexes[name] = index
    if len(indexes) == 2 and indexes["time_column"] == indexes["head_column"]:
        problems.append(
            problem(
                ["body", "head_column"],
                f"head_column: '{head_column}' is the same column as time_column; accepted: "
                "two different columns",
                "same_column",
            )
        )
    for name, unit, kind in (("time_unit", time_unit, TIME), ("head_unit", head_unit, LENGTH)):
        found = _unit_problem(name, unit, kind)
        if found:
            problems.append(found)
    if problems:
        raise InvalidInput(f"{len(problems)} problem(s) with the chosen columns", detail=problems)

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
            try:
                value = float(text)
            except ValueError:
                problems.append(
                    _cell_problem(number, name, text, "is not a number", rule, "not_a_number")
                )
                continue
            if not math.isfinite(value):
                problems.append(
                    _cell_problem(number, name, text, "is not a finite number", rule, "not_finite")
                )
            elif key == "time" and value < 0:
                problems.append(_cell_problem(number, name, text, "is negative", rule, "negative"))
            elif key == "head" and value <= 0:
                problems.append(
                    _cell_problem(number, name, text, "is not above zero", rule, "not_positive")
                )
            else:
                values[key] = value
        if "time" in values:
            if last_time is not None and values["time"] <= last_time:
                problems.append(
                    _cell_problem(
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
            problem(
                ["file"],
                f"file: {len(readings)} reading(s) found; accepted: at least two rows with a "
                "time and a head",
                "too_few_readings",
            )
        )
    if problems:
        raise InvalidInput(f"{len(problems)} problem(s) in the file", detail=problems)
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
) -> tuple[int, dict[str, Any]]:
    """Record the imported run as a new trial through the lifecycle (same rules, same
    idempotency, same live reduction as a trial typed at the bench)."""
    data = TrialCreate.model_validate(readings_trial(imported, temperature))
    return record_trial(session, test_id, data, idempotency_key=idempotency_key, actor=user)


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
    apparatus = apparatus_of(session, test_id)
    trial = readings_trial(imported, temperature)
    request = build_request(
        test,
        specimen=specimen_of(session, test_id),
        trials=[],
        saturation=saturation_of(session, test_id),
        permeameter=next((a for a in apparatus if a.kind in PERMEAMETERS), None),
    )
    request["trials"] = [trial]
    try:
        # The same default uncertainties (from the register) as the lifecycle's reduction.
        reduction = result_to_dict(reduce(parse_request(request, default_uncertainties(apparatus))))
    except EngineInputError as exc:
        raise InvalidInput(
            "the engine refused the imported readings", detail=_engine_problems(exc, imported)
        ) from None
    return {"test_id": test_id, "trial": trial, "rows": imported.rows, "reduction": reduction}


def _engine_problems(exc: EngineInputError, imported: ReadingsImport) -> list[dict[str, Any]]:
    out = []
    for item in exc.problems:
        loc = list(item.loc)
        if (
            len(loc) >= 4
            and loc[0] == "trials"
            and loc[2] == "readings"
            and isinstance(loc[3], int)
        ):
            row = imported.rows[loc[3]] if loc[3] < len(imported.rows) else None
            field_name = loc[4] if len(loc) > 4 else "head"
            column = imported.time_header if field_name == "time" else imported.head_header
            out.append(
                problem(
                    ["file", "row", row or 0, "column", str(column)],
                    f"row {row}, column '{column}': {item.reason} (got '{item.value}'); "
                    f"accepted: {item.accepted}",
                    item.kind,
                )
            )
        elif loc[:1] == ["trials"] and loc[2:] == ["temperature"]:
            out.append(
                problem(["body", "temperature"], item.msg.replace("trials[0].", ""), item.kind)
            )
        else:
            out.append(problem(["test", *loc], item.msg, item.kind))
    return out


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
    errors: list[dict[str, Any]] = field(default_factory=list)

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


def read_schedule(table: Table) -> SchedulePreview:
    """Check every row's shape (types, choices, numbers) and name each refusal's row and column.

    Project-dependent checks (location names, depth order, duplicates) are made by the
    reception service; see `check_schedule`."""
    preview = SchedulePreview()
    columns: dict[str, tuple[int, str, str]] = {}  # key -> (index, header text, unit)
    for index, text in enumerate(table.header):
        if not text:
            continue
        key, unit = _split_header(text)
        if key not in SCHEDULE_COLUMNS:
            preview.errors.append(
                problem(
                    _cell_loc(1, text),
                    f"row 1, column '{text}': not a schedule column; accepted: "
                    + ", ".join(SCHEDULE_COLUMNS),
                    "unknown_column",
                )
            )
            continue
        if key in columns:
            preview.errors.append(
                problem(
                    _cell_loc(1, text),
                    f"row 1, column '{text}': appears twice; accepted: each column once",
                    "duplicate_column",
                )
            )
            continue
        if unit and key not in ("depth_top", "depth_bottom"):
            preview.errors.append(
                problem(
                    _cell_loc(1, text),
                    f"row 1, column '{text}': takes no unit; accepted: '{key}'",
                    "unit",
                )
            )
            continue
        if unit:
            found = _unit_problem(text, unit, LENGTH)
            if found:
                found["loc"] = _cell_loc(1, text)
                preview.errors.append(found)
                continue
        columns[key] = (index, text, unit)
    for key in REQUIRED_SCHEDULE_COLUMNS:
        if key not in columns:
            preview.errors.append(
                problem(
                    ["file", "row", 1],
                    f"row 1: no '{key}' column; accepted: a header with at least "
                    + ", ".join(REQUIRED_SCHEDULE_COLUMNS),
                    "missing_column",
                )
            )
    if preview.errors:
        return preview
    for offset, raw in enumerate(table.rows):
        number = table.first_row + offset
        if not any(cell.strip() for cell in raw):
            continue
        data: dict[str, Any] = {}
        headers: dict[str, str] = {}
        row_ok = True
        for key, (index, text, unit) in columns.items():
            value = raw[index].strip()
            headers[key] = text
            if not value:
                continue
            if key == "seal_intact":
                if value.casefold() in _YES:
                    data[key] = True
                elif value.casefold() in _NO:
                    data[key] = False
                else:
                    preview.errors.append(
                        _cell_problem(
                            number, text, value, "is not yes or no", SCHEDULE_COLUMNS[key], "choice"
                        )
                    )
                    row_ok = False
                continue
            if key in ("sample_type", "priority"):
                value = value.casefold()
            if unit:
                try:
                    float(value)
                except ValueError:
                    preview.errors.append(
                        _cell_problem(
                            number,
                            text,
                            value,
                            f"is not a number of {unit}",
                            f"a number such as 1.5 (the unit {unit} is in the header)",
                            "not_a_number",
                        )
                    )
                    row_ok = False
                    continue
                value = f"{value} {unit}"
            data[key] = value
        try:
            row = SampleIn.model_validate(data)
        except ValidationError as exc:
            for error in exc.errors():
                key = str(error["loc"][0]) if error["loc"] else "row"
                text = headers.get(key, key)
                accepted = SCHEDULE_COLUMNS.get(key, "")
                preview.errors.append(
                    _cell_problem(
                        number,
                        text,
                        str(data.get(key, "")),
                        error["msg"].lower(),
                        accepted,
                        error["type"],
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
            problem(
                ["file"],
                "file: no data rows below the header; accepted: one row per sample",
                "no_rows",
            )
        )
    return preview


def _reception_problems(
    exc: InvalidInput, preview: SchedulePreview, headers: dict[str, str]
) -> list[dict[str, Any]]:
    """Map the reception service's ('body', 'samples', i, field) refusals to file rows."""
    out = []
    for item in exc.detail or []:
        loc = list(item.get("loc", []))
        if (
            len(loc) >= 4
            and loc[1] == "samples"
            and isinstance(loc[2], int)
            and loc[2] < len(preview.rows)
        ):
            number = preview.rows[loc[2]]["row"]
            key = str(loc[3])
            column = headers.get(key, key)
            out.append(
                problem(
                    _cell_loc(number, column),
                    f"row {number}, column '{column}': {item['msg']}",
                    item.get("type", "value_error"),
                )
            )
        else:
            out.append(item)
    return out


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
    """Everything `save_schedule` would refuse, without storing anything: the batch is received
    inside a savepoint that is always rolled back."""
    preview = read_schedule(table)
    if preview.errors:
        return preview
    headers = {_split_header(h)[0]: h for h in table.header}
    try:
        batch = _batch(preview, received_at, delivered_by)
    except ValidationError as exc:
        preview.errors.extend(
            problem(["body", *e["loc"]], f"{'.'.join(map(str, e['loc']))}: {e['msg']}", e["type"])
            for e in exc.errors()
        )
        return preview
    savepoint = session.begin_nested()
    try:
        receive_samples(session, project_id, batch, actor=actor)
    except InvalidInput as exc:
        preview.errors.extend(_reception_problems(exc, preview, headers))
    finally:
        savepoint.rollback()
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
            f"{len(preview.errors)} problem(s) in the schedule", detail=preview.errors
        )
    return receive_samples(
        session, project_id, _batch(preview, received_at, delivered_by), actor=actor
    )
