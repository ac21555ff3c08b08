"""The logger columns of a permeameter, set from a stage page: which column of its logger
files holds the time and which hold each reading, with their units (a heading box and a
unit picker per quantity). Saved through the same rule as the API (service/stages/loggers)."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import Response
from sqlmodel import Session

from service.accounts.models import User
from service.deps import SessionDep
from service.errors import Conflict, Loc, NotFound
from service.stages import loggers
from service.stages.fields import stage_spec
from service.stages.models import LoggerMapping
from service.web.htmx import PostedForm, redirect, render
from service.web.pages import layout_context
from service.web.queue import StaffUser
from service.web.refusals import attempt, form_errors
from service.web.stages import UNIT_CHOICES, UNIT_WORDS, load_test, units_of

router = APIRouter(prefix="/tests", include_in_schema=False)

CLOCK = "clock:"  # a time picker value of this prefix is a date-time format, not a unit
TIME_CHOICES: tuple[tuple[str, str], ...] = (
    *((unit, f"elapsed, {unit}") for unit in UNIT_CHOICES["time"]),
    (CLOCK + "iso", "date and time, 2026-12-02 14:30:00"),
    (CLOCK + "%d/%m/%Y %H:%M:%S", "date and time, day/month/year 14:30:00"),
    (CLOCK + "%m/%d/%Y %H:%M:%S", "date and time, month/day/year 14:30:00"),
)


def _values(row: LoggerMapping | None) -> dict[str, str]:
    """Form values of a stored mapping."""
    if row is None:
        return {}
    time = row.mapping.get("time") or {}
    unit = time.get("unit") or CLOCK + str(time.get("datetime_format") or "")
    values = {"time.column": str(time.get("column", "")), "time.unit": unit}
    for name, channel in (row.mapping.get("channels") or {}).items():
        values[f"c.{name}.column"] = str(channel.get("column", ""))
        values[f"c.{name}.unit"] = str(channel.get("unit", ""))
        values[f"c.{name}.gaps"] = "" if channel.get("required", True) else "on"
    values["version"] = str(row.version)
    return values


def _body(stage: str, values: Mapping[str, str]) -> dict[str, Any]:
    """The MappingWrite body of a posted form: a quantity with no heading is left out."""
    picked = values.get("time.unit", "")
    time: dict[str, Any] = {"column": values.get("time.column", "").strip()}
    if picked.startswith(CLOCK):
        time["datetime_format"] = picked.removeprefix(CLOCK)
    else:
        time["unit"] = picked
    channels = {
        name: {
            "column": values[f"c.{name}.column"].strip(),
            "unit": values.get(f"c.{name}.unit", ""),
            "required": values.get(f"c.{name}.gaps") != "on",
        }
        for name in loggers.CHANNELS[stage]
        if values.get(f"c.{name}.column", "").strip()
    }
    version = values.get("version", "")
    return {
        "time": time,
        "channels": channels,
        "version": int(version) if version.isdigit() else None,
    }


def _name_of(loc: Loc) -> str | None:
    """The form field a mapping problem belongs to."""
    parts = [str(p) for p in loc if p != "body"]
    if parts[:1] == ["channels"]:
        parts = parts[1:]
        if len(parts) == 2 and parts[1] in ("column", "unit"):
            return f"c.{parts[0]}.{parts[1]}"
        return None
    if parts[:1] == ["time"]:
        return "time.column" if parts[1:] == ["column"] else "time.unit"
    return None


def _unit_pairs(entry: Any) -> list[tuple[str, str]]:
    """The unit picker of a reading: (value, as shown)."""
    return [(unit, UNIT_WORDS.get(unit, unit)) for unit in units_of(entry)]


def _context(
    request: Request, session: Session, user: User, test_id: int, stage: str
) -> dict[str, Any]:
    loggers.require_writer(user)
    test, sample = load_test(session, test_id, user)
    permeameter = loggers.permeameter_of(session, test.id or 0)
    row = loggers.mapping_of(session, permeameter.id or 0, stage) if permeameter else None
    return layout_context(
        request,
        user,
        test=test,
        sample=sample,
        spec=stage_spec(stage),
        permeameter=permeameter,
        channels=loggers.channel_entries(stage),
        time_choices=TIME_CHOICES,
        unit_pairs=_unit_pairs,
        row=row,
        values=_values(row),
        errors={},
        general=[],
    )


def _logger_stage(stage: str) -> str:
    if stage not in loggers.CHANNELS:
        raise NotFound(f"no logger stage {stage!r} (stages: {', '.join(loggers.CHANNELS)})")
    return stage


@router.get("/{test_id}/stages/{stage}/logger-columns")
def logger_columns_page(
    request: Request, test_id: int, stage: str, user: StaffUser, session: SessionDep
) -> Response:
    """The permeameter's logger columns for the stage: a heading and a unit per quantity."""
    context = _context(request, session, user, test_id, _logger_stage(stage))
    return render(
        request, "tests/stages/logger_columns.html", context, fragment="tests/stages/_columns.html"
    )


@router.post("/{test_id}/stages/{stage}/logger-columns")
def save_logger_columns(
    request: Request,
    test_id: int,
    stage: str,
    user: StaffUser,
    session: SessionDep,
    form: PostedForm,
) -> Response:
    """Save the logger columns; refused, each message comes back beside its field with
    everything typed kept; saved, the stage page opens again to take in a file."""
    context = _context(request, session, user, test_id, _logger_stage(stage))
    values = {k: v for k, v in form.items() if isinstance(v, str)}
    permeameter = context["permeameter"]
    with attempt(session) as tried:
        if permeameter is None:
            raise Conflict("this test uses no flexible-wall permeameter")
        data = loggers.MappingWrite.model_validate(_body(stage, values))
        loggers.save_mapping(session, permeameter.id, stage, data, actor=user)
    if not tried.refused:
        return redirect(request, f"/tests/{test_id}/stages/{stage}?columns=1")
    problems = [p.at(p.loc, loggers.mapping_label(stage, p.loc)) for p in tried.problems]
    errors, general = form_errors(problems, _name_of)
    context.update(
        values=values, errors=errors, general=general or ([] if problems else [tried.message])
    )
    return render(
        request,
        "tests/stages/logger_columns.html",
        context,
        fragment="tests/stages/_columns.html",
        status_code=tried.status,
    )
