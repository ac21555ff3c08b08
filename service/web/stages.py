"""The stages of a flexible-wall test on a tablet: a stepper on the test page, one page per
stage with its form (numbers on a decimal keypad, a unit picker beside each), its plot, and
the whole test's stages summarised. Rules in service/stages/."""

from __future__ import annotations

import re
from collections.abc import Mapping
from datetime import datetime
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import Response
from markupsafe import Markup
from sqlmodel import Session
from starlette.datastructures import UploadFile

from service.accounts.models import User
from service.deps import LabStaff, SessionDep
from service.errors import NotFound, invalid
from service.exchange.files import read_table
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest
from service.lab_tests.reduction import Entry
from service.samples.models import Sample
from service.stages import loggers
from service.stages import service as stages
from service.stages.fields import STAGE_IDS, STAGES, StageSpec, stage_spec
from service.stages.models import TestStage
from service.stages.service import StageWrite
from service.stages.summary import plot_data, summarise
from service.web import stage_plots
from service.web.htmx import PostedForm, redirect, render
from service.web.pages import layout_context
from service.web.refusals import attempt, form_errors

router = APIRouter(prefix="/tests", include_in_schema=False)

BLANK_ROWS = 3
# The units offered beside a number, per kind of quantity (the first is the default).
UNIT_CHOICES: dict[str, tuple[str, ...]] = {
    "pressure": ("kPa", "psi", "bar", "MPa"),
    "volume": ("mL", "cm**3", "L"),
    "time": ("min", "s", "h", "d"),
    "length": ("mm", "cm", "m", "in"),
    "mass": ("g", "kg", "lb"),
    "area": ("cm**2", "mm**2", "in**2"),
    "temperature": ("degC", "degF"),
    "fraction or percentage": ("%",),
}
UNIT_WORDS = {"cm**3": "cm³", "cm**2": "cm²", "mm**2": "mm²", "in**2": "in²", "degC": "°C",
              "degF": "°F"}  # fmt: skip
_NUMBER_THEN_UNIT = re.compile(r"^\s*([-+]?[0-9.]+(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")


def units_of(entry: Entry) -> tuple[str, ...]:
    """The unit picker's choices for an entry: its own display unit first."""
    choices = UNIT_CHOICES.get(entry.kind.name, ())
    own = entry.units.si if entry.units is not None else ""
    return (own, *(u for u in choices if u != own)) if own else choices


def _split(text: Any) -> tuple[str, str]:
    """'445 kPa' -> ('445', 'kPa'); anything else stays whole in the number field."""
    if not isinstance(text, str):
        return "", ""
    match = _NUMBER_THEN_UNIT.match(text)
    return (match.group(1), match.group(2)) if match else (text, "")


def _join(number: str, unit: str) -> str:
    """The typed value: the number with the unit picked, unless a unit was typed with it."""
    number = number.strip()
    if not number or re.search(r"[A-Za-z%°]", number):
        return number
    return f"{number} {unit}".strip()


def _field_values(spec: StageSpec, row: TestStage | None) -> dict[str, str]:
    """Form values from a stored stage: number and unit apart."""
    values: dict[str, str] = {}
    if row is None:
        return values
    for entry in spec.entries:
        raw = row.typed.get(entry.id)
        if entry.is_flag:
            values[f"e.{entry.id}"] = "on" if raw else ""
        elif entry.is_quantity and not entry.is_number:
            values[f"e.{entry.id}"], values[f"e.{entry.id}.unit"] = _split(raw)
        else:
            values[f"e.{entry.id}"] = str(raw or "")
    for group in spec.groups:
        for j, typed_row in enumerate(row.typed.get(group.id, [])):
            for entry in group.entries:
                raw = typed_row.get(entry.id)
                key = f"g.{group.id}.{j}.{entry.id}"
                if entry.is_flag:
                    values[key] = "on" if raw else ""
                elif entry.is_quantity and not entry.is_number:
                    values[key], unit = _split(raw)
                    values.setdefault(f"g.{group.id}.{entry.id}.unit", unit)
                else:
                    values[key] = str(raw or "")
    for name in ("started_at", "ended_at"):
        when = getattr(row, name)
        values[name] = when.strftime("%Y-%m-%dT%H:%M") if when else ""
    return values


def _row_count(spec: StageSpec, group_id: str, values: Mapping[str, str]) -> int:
    group = spec.group(group_id)
    if group.single:
        return 1
    used = [int(k.split(".")[2]) for k in values if k.startswith(f"g.{group_id}.") and
            k.split(".")[2].isdigit()]  # fmt: skip
    return (max(used) + 1 if used else 0) + BLANK_ROWS


def _posted(spec: StageSpec, form: Mapping[str, Any]) -> tuple[dict[str, str], dict[str, Any]]:
    """(what the form showed, the StageWrite body) from a posted stage form."""
    values = {k: v for k, v in form.items() if isinstance(v, str)}
    entries: dict[str, Any] = {}
    for entry in spec.entries:
        raw = values.get(f"e.{entry.id}", "")
        if entry.is_flag:
            entries[entry.id] = raw == "on"
        elif entry.is_quantity and not entry.is_number:
            entries[entry.id] = _join(raw, values.get(f"e.{entry.id}.unit", "")) or None
        else:
            entries[entry.id] = raw.strip() or None
    groups: dict[str, list[dict[str, Any]]] = {}
    for group in spec.groups:
        rows = []
        for j in range(min(_row_count(spec, group.id, values), stages.MAX_ROWS + 1)):
            row: dict[str, Any] = {}
            for entry in group.entries:
                raw = values.get(f"g.{group.id}.{j}.{entry.id}", "")
                if entry.is_flag:
                    if raw == "on":
                        row[entry.id] = True
                elif entry.is_quantity and not entry.is_number:
                    unit = values.get(f"g.{group.id}.{entry.id}.unit", "")
                    if raw.strip():
                        row[entry.id] = _join(raw, unit)
                elif raw.strip():
                    row[entry.id] = raw.strip()
            if row:
                rows.append(row)
        if rows:
            groups[group.id] = rows
    body: dict[str, Any] = {"entries": entries, "groups": groups}
    for name in ("started_at", "ended_at"):
        text = values.get(name, "").strip()
        try:
            body[name] = datetime.fromisoformat(text) if text else None
        except ValueError:
            body[name] = text  # refused by the model, by its label
    version = values.get("version", "")
    body["version"] = int(version) if version.isdigit() else None
    return values, body


def _name_of() -> Any:
    """Form names for the stage's problem locations (rows by their number on the form)."""

    def name_of(loc: tuple[Any, ...]) -> str | None:
        parts = [str(p) for p in loc if p != "body"]
        if len(parts) >= 2 and parts[0] == "entries":
            return f"e.{parts[1]}"
        if len(parts) >= 4 and parts[0] == "groups":
            return f"g.{parts[1]}.{parts[2]}.{parts[3]}"
        if parts and parts[0] in ("started_at", "ended_at"):
            return parts[0]
        return None

    return name_of


def _remap_rows(spec: StageSpec, values: Mapping[str, str]) -> dict[str, dict[int, int]]:
    """Position in the body -> row number on the form, per group (blank rows were dropped)."""
    out: dict[str, dict[int, int]] = {}
    for group in spec.groups:
        kept = [
            j
            for j in range(_row_count(spec, group.id, values))
            if any(values.get(f"g.{group.id}.{j}.{e.id}", "").strip() for e in group.entries)
        ]
        out[group.id] = dict(enumerate(kept))
    return out


def load_test(session: Session, test_id: int, user: User) -> tuple[PermeabilityTest, Sample]:
    test = lab_tests.get_test(session, test_id, actor=user)
    sample = session.get(Sample, test.sample_id)
    assert sample is not None
    return test, sample


def _plots(rows: Mapping[str, TestStage], only: str | None = None) -> dict[str, Markup]:
    data = plot_data(rows)
    out: dict[str, Markup] = {}
    if "b" in data and only in (None, "saturation"):
        out["saturation"] = Markup(stage_plots.b_back_pressure_svg(*data["b"]))
    if "volume" in data and only in (None, "consolidation") and len(data["volume"][0]) > 1:
        out["root_time"] = Markup(stage_plots.volume_root_time_svg(*data["volume"]))
        if sum(1 for t in data["volume"][0] if t > 0) > 1:
            out["log_time"] = Markup(stage_plots.volume_log_time_svg(*data["volume"]))
    if "k_time" in data and only in (None, "permeation"):
        out["k_time"] = Markup(stage_plots.k_stage_svg(*data["k_time"], against="time"))
        if "k_pore" in data:
            out["k_pore"] = Markup(stage_plots.k_stage_svg(*data["k_pore"], against="pore_volumes"))
    return out


def stages_context(session: Session, test: PermeabilityTest) -> dict[str, Any]:
    """What the stepper and the summary need (the review page uses it too)."""
    rows = stages.stages_of(session, test.id or 0)
    return {
        "needs_stages": stages.needs_stages(session, test),
        "stage_summary": summarise(rows),
        "stage_plots": _plots(rows),
    }


def _context(
    request: Request, session: Session, user: User, test_id: int, stage: str | None = None
) -> dict[str, Any]:
    test, sample = load_test(session, test_id, user)
    rows = stages.stages_of(session, test.id or 0)
    spec = stage_spec(stage) if stage else None
    return layout_context(
        request,
        user,
        **_logger_context(session, test, stage),
        test=test,
        sample=sample,
        needs_stages=stages.needs_stages(session, test),
        can_record=lab_tests.Action.RECORD in lab_tests.allowed_actions(test, user),
        stage_summary=summarise(rows),
        stage_ids=STAGE_IDS,
        current=stage,
        spec=spec,
        row=rows.get(stage) if stage else None,
        values=_field_values(spec, rows.get(stage)) if spec and stage else {},
        errors={},
        general=[],
        units_of=units_of,
        unit_words=UNIT_WORDS,
        row_count=lambda group_id, values: _row_count(spec, group_id, values) if spec else 0,
        plots=_plots(rows, stage) if stage else _plots(rows),
        next_stage=_next(stage),
        saved=request.query_params.get("saved") == "1",
        columns_saved=request.query_params.get("columns") == "1",
    )


def _logger_context(session: Session, test: PermeabilityTest, stage: str | None) -> dict[str, Any]:
    """The permeameter whose logger files the stage takes, and how they are read."""
    if stage not in loggers.CHANNELS:
        return {"takes_logger": False}
    permeameter = loggers.permeameter_of(session, test.id or 0)
    row = loggers.mapping_of(session, permeameter.id or 0, stage) if permeameter else None
    return {
        "takes_logger": True,
        "logger_permeameter": permeameter,
        "logger_mapping": row.mapping if row else None,
        "logger_labels": {e.id: e.label for e in loggers.channel_entries(stage)},
        "logger_missing": False,
    }


def _next(stage: str | None) -> str | None:
    if stage is None or stage not in STAGE_IDS:
        return None
    index = STAGE_IDS.index(stage)
    return STAGE_IDS[index + 1] if index + 1 < len(STAGE_IDS) else None


@router.get("/{test_id}/stages")
def stages_page(request: Request, test_id: int, user: LabStaff, session: SessionDep) -> Response:
    """The stages of a flexible-wall test: the stepper (the test page loads it) and, as a
    page, every stage summarised with its plots."""
    context = _context(request, session, user, test_id)
    return render(request, "tests/stages/page.html", context, fragment="tests/stages/_stepper.html")


@router.get("/{test_id}/stages/{stage}")
def stage_page(
    request: Request, test_id: int, stage: str, user: LabStaff, session: SessionDep
) -> Response:
    """One stage's form, its plot, and the stepper."""
    if stage not in STAGE_IDS:
        raise NotFound(f"no stage {stage!r} (stages: {', '.join(STAGE_IDS)})")
    context = _context(request, session, user, test_id, stage)
    return render(request, "tests/stages/stage.html", context, fragment="tests/stages/_form.html")


@router.post("/{test_id}/stages/{stage}")
def save_stage(
    request: Request,
    test_id: int,
    stage: str,
    user: LabStaff,
    session: SessionDep,
    form: PostedForm,
) -> Response:
    """Record a stage; a refusal comes back with every message beside its field and
    everything typed kept (nothing stored); saved, the stage opens again with its outcome."""
    spec = stage_spec(stage)
    if spec is None:
        raise NotFound(f"no stage {stage!r} (stages: {', '.join(STAGE_IDS)})")
    values, body = _posted(spec, form)
    positions = _remap_rows(spec, values)
    with attempt(session) as tried:
        stages.write_stage(session, test_id, stage, StageWrite.model_validate(body), actor=user)
    if not tried.refused:
        # Readings come in over hours: the stage stays open, with fresh rows below.
        return redirect(request, f"/tests/{test_id}/stages/{stage}?saved=1")
    problems = []
    for p in tried.problems:
        loc = list(p.loc)
        if len(loc) >= 3 and loc[0] == "groups" and isinstance(loc[2], int):
            loc[2] = positions.get(str(loc[1]), {}).get(loc[2], loc[2])
        problems.append(p.at(tuple(loc)))
    errors, general = form_errors(problems, _name_of())
    if not tried.problems and tried.refused:
        general = [tried.message]
    context = _context(request, session, user, test_id, stage)
    context.update(values=values, errors=errors, general=general, saved=False)
    return render(
        request,
        "tests/stages/stage.html",
        context,
        fragment="tests/stages/_form.html",
        status_code=tried.status,
    )


def _logger_upload(upload: Any) -> tuple[bytes, str]:
    """The posted logger file's bytes and name (refused when missing or over the limit)."""
    if not isinstance(upload, UploadFile) or not upload.filename:
        raise invalid(("file",), "is missing", accepted="a CSV or XLSX logger file")
    try:
        data = upload.file.read(loggers.LOGGER_LIMIT + 1)
    finally:
        upload.file.close()
    if len(data) > loggers.LOGGER_LIMIT:
        raise invalid(
            ("file",),
            f"is larger than {loggers.LOGGER_LIMIT // 1024} KiB",
            accepted=f"a file of at most {loggers.LOGGER_LIMIT // 1024} KiB",
        )
    return data, upload.filename


@router.post("/{test_id}/stages/{stage}/logger")
def import_logger_file(
    request: Request,
    test_id: int,
    stage: str,
    user: LabStaff,
    session: SessionDep,
    form: PostedForm,
) -> Response:
    """A logger file taken in as the stage's readings with the permeameter's mapping; every
    refused cell listed by row and column, nothing stored until the file is clean."""
    if stage not in loggers.CHANNELS:
        raise NotFound(f"no logger stage {stage!r} (stages: {', '.join(loggers.CHANNELS)})")
    with attempt(session) as tried:
        data, filename = _logger_upload(form.get("file"))
        table = read_table(data, filename, field="file")
        loggers.import_readings(session, test_id, stage, table, actor=user)
    if not tried.refused:
        return redirect(request, f"/tests/{test_id}/stages/{stage}?saved=1")
    context = _context(request, session, user, test_id, stage)
    context["general"] = [
        p.label if p.loc and p.loc[0] == "file" and p.label else p.msg for p in tried.problems
    ] or [tried.message]
    context["saved"] = False
    if isinstance(tried.error, loggers.MappingMissing):
        context.update(logger_missing=True, general=[])  # said with a link to set them up
    return render(
        request,
        "tests/stages/stage.html",
        context,
        fragment="tests/stages/_form.html",
        status_code=tried.status,
    )


__all__ = ["STAGES", "router", "stages_context"]
