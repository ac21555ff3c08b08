"""Reception: receive a batch of samples against a project from typed rows, or from a pasted or
uploaded sample schedule (CSV or XLSX), checked in full before anything is stored.

Every render of the form carries a fresh idempotency key in a hidden field; it stays with the
form through checks and refusals, so a double-tapped or retried save stores the batch once."""

from __future__ import annotations

import csv
import io
import uuid
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import Response
from pydantic import ValidationError
from sqlmodel import Session
from starlette.datastructures import UploadFile as StarletteUpload

from service.accounts.models import User
from service.common import Priority, SampleType
from service.config import get_settings
from service.deps import Reception, SessionDep
from service.errors import Conflict, FieldProblem, InvalidInput, Loc
from service.exchange.files import FileTooLarge, Table, read_table, read_upload
from service.exchange.imports import SCHEDULE_COLUMNS, SchedulePreview, check_schedule
from service.lab_tests import service as lab_tests
from service.lab_tests.schemas import TestCreate
from service.projects.models import Location, Project
from service.projects.service import get_project, list_locations, list_projects
from service.samples.service import SampleBatch, check_samples, receive_samples_once
from service.web.entries import METHOD_CHOICES, STANDARD_CHOICES
from service.web.htmx import render
from service.web.pages import layout_context
from service.web.refusals import (
    NameOf,
    attempt,
    beside,
    form_errors,
    simple_name,
    validation_refusal,
)

router = APIRouter(prefix="/reception", include_in_schema=False)

MAX_ROWS = 60
DEFAULT_ROWS = 3
PROJECT_CHOICES = 200
DEPTH_UNITS = (("m", "m"), ("cm", "cm"), ("mm", "mm"), ("ft", "ft"), ("in", "in"))
SAMPLE_TYPES = tuple((t.value, t.value.capitalize()) for t in SampleType)
PRIORITIES = tuple((p.value, p.value.capitalize()) for p in Priority)
SEAL_CHOICES = (("", "Not recorded"), ("yes", "Yes, intact"), ("no", "No, broken"))
# Each row's form fields and the value a fresh row starts with.
ROW_DEFAULTS: dict[str, str] = {
    "client_sample_id": "",
    "location": "",
    "depth_top": "",
    "depth_bottom": "",
    "depth_unit": "m",
    "sample_type": SampleType.TUBE.value,
    "description": "",
    "condition": "",
    "seal_intact": "",
    "storage_place": "",
    "priority": Priority.NORMAL.value,
}
ROW_LABELS = {
    "client_sample_id": "Client's sample ID",
    "location": "Location",
    "location_id": "Location",
    "depth_top": "Depth, top",
    "depth_bottom": "Depth, bottom",
    "depth_unit": "Depth unit",
    "sample_type": "Type",
    "description": "Description",
    "condition": "Condition on arrival",
    "seal_intact": "Seal intact",
    "storage_place": "Storage place",
    "priority": "Priority",
}


def new_key() -> str:
    """A fresh idempotency key for one rendering of a form."""
    return uuid.uuid4().hex


def with_unit(typed: str, unit: str) -> str | None:
    """A number typed into a numeric field, with the unit chosen beside it; text that already
    carries its own unit ('5 ft') is sent as typed; nothing typed is None."""
    text = typed.strip()
    if not text:
        return None
    try:
        float(text)
    except ValueError:
        return text
    return f"{text} {unit}"


# --- the reception form ----------------------------------------------------------------------


@dataclass(slots=True)
class ReceptionForm:
    """The reception form exactly as typed."""

    project_id: int | None = None
    entry: str = "rows"
    delivered_by: str = ""
    rows: list[dict[str, str]] = field(default_factory=list)
    schedule: str = ""
    idempotency_key: str = field(default_factory=new_key)
    # A test requested on every sample of the batch ("" = none), with its standard.
    test_method: str = ""
    test_standard: str = ""

    def filled(self) -> list[int]:
        """Rows with anything changed from a fresh row (blank rows are not received)."""
        return [
            index
            for index, row in enumerate(self.rows)
            if any(row.get(name, "").strip() != default for name, default in ROW_DEFAULTS.items())
        ]


def blank_rows(count: int) -> list[dict[str, str]]:
    return [dict(ROW_DEFAULTS) for _ in range(count)]


def read_form(form: Mapping[str, Any]) -> ReceptionForm:
    """The form from posted fields; unknown row fields are ignored, values kept as typed."""
    try:
        project_id: int | None = int(str(form.get("project_id", "")))
    except ValueError:
        project_id = None
    try:
        count = int(str(form.get("row_count", DEFAULT_ROWS)))
    except ValueError:
        count = DEFAULT_ROWS
    count = max(1, min(MAX_ROWS, count))
    rows = blank_rows(count)
    for key, value in form.items():
        parts = key.split(".")
        if len(parts) == 3 and parts[0] == "rows" and parts[1].isdigit() and isinstance(value, str):
            index, name = int(parts[1]), parts[2]
            if index < count and name in ROW_DEFAULTS:
                rows[index][name] = value
    key = str(form.get("idempotency_key", "")).strip()
    return ReceptionForm(
        project_id=project_id,
        entry="schedule" if form.get("entry") == "schedule" else "rows",
        delivered_by=str(form.get("delivered_by", "")),
        rows=rows,
        schedule=str(form.get("schedule", "")),
        idempotency_key=key or new_key(),
        test_method=str(form.get("test_method", "")).strip(),
        test_standard=str(form.get("test_standard", "")).strip(),
    )


def batch_payload(form: ReceptionForm) -> tuple[dict[str, Any], list[int]]:
    """The batch in the reception service's shape, and the form row of each sample sent."""
    indexes = form.filled()
    samples = []
    for index in indexes:
        row = form.rows[index]
        sample: dict[str, Any] = {
            name: row[name].strip()
            for name in ("client_sample_id", "description", "condition", "storage_place")
        }
        sample["sample_type"] = row["sample_type"]
        sample["priority"] = row["priority"]
        if row["location"].strip():
            sample["location_id"] = row["location"].strip()
        top = with_unit(row["depth_top"], row["depth_unit"])
        bottom = with_unit(row["depth_bottom"], row["depth_unit"])
        if top is not None:
            sample["depth_top"] = top
        if bottom is not None:
            sample["depth_bottom"] = bottom
        seal = {"yes": True, "no": False}.get(row["seal_intact"])
        if seal is not None:
            sample["seal_intact"] = seal
        samples.append(sample)
    payload = {"delivered_by": form.delivered_by.strip(), "samples": samples}
    return payload, indexes


def _row_name(indexes: list[int]) -> NameOf:
    """The form field of a batch refusal: ("samples", i, field) is row indexes[i]."""

    def name_of(loc: Loc) -> str | None:
        if loc[:1] == ("delivered_by",):
            return "delivered_by"
        if len(loc) >= 3 and loc[0] == "samples" and isinstance(loc[1], int):
            row = indexes[loc[1]] if loc[1] < len(indexes) else loc[1]
            name = "location" if loc[2] == "location_id" else str(loc[2])
            if name in ROW_DEFAULTS:
                return f"rows.{row}.{name}"
        return None

    return name_of


def _row_problems(problems: Iterable[FieldProblem], indexes: list[int]) -> list[FieldProblem]:
    """Batch refusals named as the form shows them: "Row 3 · Depth, bottom"."""
    out = []
    for problem in problems:
        loc = problem.loc
        if len(loc) >= 3 and loc[0] == "samples" and isinstance(loc[1], int):
            row = indexes[loc[1]] if loc[1] < len(indexes) else loc[1]
            words = ROW_LABELS.get(str(loc[2]), str(loc[2]).replace("_", " "))
            problem = problem.at(loc, f"Row {row + 1} · {words}")
        out.append(problem)
    return out


def _rows_refused(outcome: Outcome, problems: Iterable[FieldProblem], indexes: list[int]) -> None:
    errors, general = form_errors(_row_problems(problems, indexes), _row_name(indexes))
    outcome.errors.update(errors)
    outcome.general.extend(general)


@dataclass(slots=True)
class Outcome:
    """What the form shows after a check or a save."""

    errors: dict[str, dict[str, str]] = field(default_factory=dict)
    general: list[str] = field(default_factory=list)
    preview: SchedulePreview | None = None
    table: Table | None = None
    checked: bool = False
    received: dict[str, Any] | None = None
    conflict: bool = False

    @property
    def refused(self) -> bool:
        return bool(self.errors or self.general or (self.preview and self.preview.errors))


def _rows_batch(form: ReceptionForm, outcome: Outcome) -> tuple[SampleBatch | None, list[int]]:
    payload, indexes = batch_payload(form)
    if not indexes:
        outcome.general.append("Fill in at least one sample row; empty rows are left out.")
        return None, indexes
    try:
        return SampleBatch.model_validate(payload), indexes
    except ValidationError as exc:
        _rows_refused(outcome, validation_refusal(exc).problems, indexes)
        return None, indexes


def check_rows(session: Session, form: ReceptionForm, user: User) -> Outcome:
    """Everything the save would refuse; stores nothing."""
    outcome = Outcome(checked=True)
    _check_test_request(form, user, outcome)
    batch, indexes = _rows_batch(form, outcome)
    if batch is None or form.project_id is None:
        return outcome
    _rows_refused(outcome, check_samples(session, form.project_id, batch, actor=user), indexes)
    return outcome


def _save(
    session: Session,
    form: ReceptionForm,
    batch: SampleBatch,
    user: User,
    outcome: Outcome,
    indexes: list[int],
) -> None:
    assert form.project_id is not None
    with attempt(session) as tried:
        _status, answer, replayed = receive_samples_once(
            session, form.project_id, batch, actor=user, idempotency_key=form.idempotency_key
        )
        if form.test_method and not replayed:
            ids = [s["id"] for s in answer["samples"]]
            lab_tests.request_tests(session, ids, _test_request(form), actor=user)
    if not tried.refused:
        outcome.received = answer
    elif isinstance(tried.error, Conflict):
        # The key was spent on another batch (the form was saved, then changed): a new key
        # lets this batch through on the next tap, after the user has seen why.
        form.idempotency_key = new_key()
        outcome.conflict = True
        outcome.general.append(
            f"This form was already used to receive a different batch ({tried.message}). "
            "Check the rows, then save again to receive them as a new batch."
        )
    else:
        _rows_refused(outcome, tried.problems, indexes)


def _test_request(form: ReceptionForm) -> TestCreate:
    payload = {"method": form.test_method}
    if form.test_standard:
        payload["standard"] = form.test_standard
    return TestCreate.model_validate(payload)


def _check_test_request(form: ReceptionForm, user: User, outcome: Outcome) -> None:
    """The test to request on each sample, refused beside its field before anything is saved."""
    if not form.test_method:
        return
    if not lab_tests.may_request_tests(user):
        outcome.general.append(
            "Requesting tests is for reception, lab managers, reviewers and admins: the "
            "samples can be received without one, and a lab manager requests them."
        )
        return
    try:
        _test_request(form)
    except ValidationError as exc:
        name = simple_name(["method", "standard"], {"method": "method"})
        errors, general = form_errors(validation_refusal(exc).problems, name)
        for key, error in errors.items():
            outcome.errors["test_" + key] = error
        outcome.general.extend(general)


def save_rows(session: Session, form: ReceptionForm, user: User) -> Outcome:
    outcome = Outcome(checked=True)
    _check_test_request(form, user, outcome)
    batch, indexes = _rows_batch(form, outcome)
    if batch is not None and not outcome.refused:
        _save(session, form, batch, user, outcome, indexes)
    return outcome


# --- schedules -------------------------------------------------------------------------------


def table_as_csv(table: Table) -> str:
    """An uploaded table as CSV text, so it can be corrected in place and saved from the form."""
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    writer.writerow(table.header)
    writer.writerows(table.rows)
    return out.getvalue()


def _schedule_table(form: ReceptionForm, outcome: Outcome) -> Table | None:
    if not form.schedule.strip():
        outcome.errors["schedule"] = {
            "msg": "Paste the schedule here (a header row, then one row per sample), "
            "or choose a CSV or XLSX file.",
            "kind": "missing",
        }
        return None
    try:
        return read_table(form.schedule.encode("utf-8"), "schedule.csv", field="schedule")
    except InvalidInput as exc:
        errors, general = form_errors(exc.problems, simple_name(["schedule"]))
        outcome.errors.update(errors)
        outcome.general.extend(general)
        return None


def _check_schedule(
    session: Session, form: ReceptionForm, user: User, outcome: Outcome
) -> SchedulePreview | None:
    table = _schedule_table(form, outcome)
    if table is None or form.project_id is None:
        return None
    outcome.table = table
    preview = check_schedule(
        session, form.project_id, table, actor=user, delivered_by=form.delivered_by.strip()
    )
    outcome.preview = preview
    return preview


def schedule_batch(preview: SchedulePreview, delivered_by: str) -> SampleBatch:
    samples = [{k: v for k, v in row.items() if k != "row"} for row in preview.rows]
    return SampleBatch.model_validate({"delivered_by": delivered_by, "samples": samples})


def save_schedule(session: Session, form: ReceptionForm, user: User) -> Outcome:
    outcome = Outcome(checked=True)
    _check_test_request(form, user, outcome)
    preview = _check_schedule(session, form, user, outcome)
    if preview is None or outcome.refused:
        return outcome
    batch = schedule_batch(preview, form.delivered_by.strip())
    _save(session, form, batch, user, outcome, list(range(len(preview.rows))))
    return outcome


@dataclass(slots=True)
class PreviewRow:
    """One row of the schedule as typed, with its problems per column."""

    number: int
    cells: list[str]
    problems: dict[str, list[str]]

    @property
    def ok(self) -> bool:
        return not self.problems


def preview_rows(table: Table, preview: SchedulePreview) -> tuple[list[PreviewRow], list[str]]:
    """Every non-blank row of the schedule with its cell problems; problems with no cell."""
    by_cell: dict[tuple[int, str], list[str]] = {}
    general: list[str] = []
    for item in preview.errors:
        loc = item.loc
        if len(loc) == 5 and loc[:2] == ("file", "row") and loc[3] == "column" and loc[2] != 1:
            by_cell.setdefault((int(loc[2]), str(loc[4])), []).append(beside(item))
        else:
            general.append(item.msg)
    rows = []
    for offset, cells in enumerate(table.rows):
        if not any(cell.strip() for cell in cells):
            continue
        number = table.first_row + offset
        problems = {
            column: by_cell[(number, column)]
            for column in table.header
            if (number, column) in by_cell
        }
        rows.append(PreviewRow(number=number, cells=cells, problems=problems))
    return rows, general


# --- rendering -------------------------------------------------------------------------------


def _locations(session: Session, project: Project, user: User) -> list[Location]:
    assert project.id is not None
    locations, _total = list_locations(session, project.id, user=user, limit=500, offset=0)
    return locations


def _context(
    request: Request,
    session: Session,
    user: User,
    form: ReceptionForm,
    outcome: Outcome | None = None,
) -> dict[str, Any]:
    outcome = outcome or Outcome()
    project = None
    projects: list[Project] = []
    locations: list[Location] = []
    if form.project_id is not None:
        project = get_project(session, form.project_id, user=user)
        locations = _locations(session, project, user)
    else:
        projects, _total = list_projects(session, user=user, limit=PROJECT_CHOICES, offset=0)
    preview_table: list[PreviewRow] = []
    preview_general: list[str] = []
    if outcome.preview is not None and outcome.table is not None:
        preview_table, preview_general = preview_rows(outcome.table, outcome.preview)
    received_ids = [s["id"] for s in (outcome.received or {}).get("samples", [])]
    return layout_context(
        request,
        user,
        form=form,
        outcome=outcome,
        project=project,
        project_choices=[(str(p.id), f"{p.number} · {p.name}") for p in projects],
        locations=[(str(loc.id), loc.name) for loc in locations],
        depth_units=DEPTH_UNITS,
        sample_types=SAMPLE_TYPES,
        priorities=PRIORITIES,
        seal_choices=SEAL_CHOICES,
        row_labels=ROW_LABELS,
        max_rows=MAX_ROWS,
        schedule_columns=SCHEDULE_COLUMNS,
        preview_table=preview_table,
        preview_general=preview_general,
        labels_url="/samples/labels?ids=" + ",".join(str(i) for i in received_ids),
        can_request_tests=lab_tests.may_request_tests(user),
        test_methods=(("", "None: requested later"), *METHOD_CHOICES),
        test_method_names=dict(METHOD_CHOICES),
        standards=STANDARD_CHOICES,
    )


def _answer(
    request: Request, context: dict[str, Any], outcome: Outcome, status: int | None = None
) -> Response:
    if status is None:
        status = (
            201
            if outcome.received
            else 409
            if outcome.conflict
            else 422
            if outcome.refused
            else 200
        )
    return render(
        request,
        "reception/reception.html",
        context,
        fragment="reception/_work.html",
        status_code=status,
    )


@router.get("")
def reception_page(
    request: Request,
    user: Reception,
    session: SessionDep,
    project_id: Annotated[str, Query(max_length=20)] = "",
    entry: Annotated[str, Query(max_length=20)] = "rows",
) -> Response:
    """Choose a project, then type the samples or paste / upload their schedule."""
    form = ReceptionForm(
        project_id=int(project_id) if project_id.strip().isdigit() else None,
        entry="schedule" if entry == "schedule" else "rows",
        rows=blank_rows(DEFAULT_ROWS),
    )
    return _answer(request, _context(request, session, user, form), Outcome(), 200)


@dataclass
class ReceptionPost:
    """A posted reception form, with its schedule file already read and parsed."""

    form: ReceptionForm
    action: str
    file_error: str


async def reception_post(request: Request) -> ReceptionPost:
    """Read the posted form on the event loop and parse an uploaded schedule in a worker
    thread, so that the route itself runs in the thread pool (PostedForm in web/htmx.py)."""
    async with request.form() as posted:
        form = read_form(posted)
        action = str(posted.get("action", "check"))
        upload = posted.get("schedule_file")
        file_error = ""
        if (
            form.entry == "schedule"
            and isinstance(upload, StarletteUpload)
            and upload.filename
            and form.project_id is not None
        ):
            try:
                table = await read_upload(
                    upload,
                    upload.filename,
                    limit=get_settings().max_body_bytes,
                    field="schedule_file",
                )
                form.schedule = table_as_csv(table)
            except (InvalidInput, FileTooLarge) as exc:
                problems = exc.problems if isinstance(exc, InvalidInput) else ()
                file_error = "; ".join(beside(p) for p in problems) or exc.message
    return ReceptionPost(form, action, file_error)


@router.post("")
def reception_submit(
    request: Request,
    user: Reception,
    session: SessionDep,
    posted: Annotated[ReceptionPost, Depends(reception_post)],
) -> Response:
    """Check, add a row, or save. A refusal answers 422 with everything typed kept and each
    message beside its field (or its schedule cell); a save answers 201 with the lab IDs."""
    form, action, file_error = posted.form, posted.action, posted.file_error
    if form.project_id is None:
        outcome = Outcome(general=["Choose the project the samples arrived for."])
        return _answer(request, _context(request, session, user, form), outcome)
    if form.entry == "schedule":
        outcome = Outcome(checked=True)
        if file_error:
            outcome.errors["schedule_file"] = {"msg": file_error, "kind": "file"}
            return _answer(request, _context(request, session, user, form, outcome), outcome)
        if action == "save":
            outcome = save_schedule(session, form, user)
        else:
            _check_test_request(form, user, outcome)
            _check_schedule(session, form, user, outcome)
        return _answer(request, _context(request, session, user, form, outcome), outcome)
    if action == "add_row":
        form.rows.extend(blank_rows(1 if len(form.rows) < MAX_ROWS else 0))
        return _answer(request, _context(request, session, user, form), Outcome(), 200)
    outcome = (
        save_rows(session, form, user) if action == "save" else check_rows(session, form, user)
    )
    return _answer(request, _context(request, session, user, form, outcome), outcome)
