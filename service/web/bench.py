"""The technician's bench: type a test's entries (any unit beside each number) and see k,
k20, gradient and every check recomputed as you type, with a stopwatch for durations.

Stores nothing: the same fragment is meant to sit inside the real test page later.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import Response
from sqlmodel import Session

from service.deps import LabStaff, SessionDep
from service.lab_tests.reduction import Scope, reduce_payload, trial_notes
from service.web.entries import (
    METHOD_CHOICES,
    STANDARD_CHOICES,
    FormEntry,
    apparatus_form,
    section_form,
    trial_form,
)
from service.web.htmx import PostedForm, htmx_details, render
from service.web.pages import layout_context
from service.web.plots import k_per_trial_svg
from service.web.refusals import beside

router = APIRouter(prefix="/bench", include_in_schema=False)

MAX_TRIAL_ROWS = 12
DEFAULT_TRIAL_ROWS = 3
# What the quick bench asks about the specimen: the size, and what phase relations need.
SPECIMEN_IDS = ("length", "diameter", "wet_mass", "water_content", "specific_gravity")
REQUIRED_SPECIMEN = frozenset({"length", "diameter"})


def specimen_entries(units: str | None = "si") -> tuple[FormEntry, ...]:
    return tuple(
        entry if entry.key in REQUIRED_SPECIMEN else replace(entry, hint="optional")
        for entry in section_form(Scope.SPECIMEN, SPECIMEN_IDS, units)
    )


def spec_entry(units: str | None = "si") -> FormEntry:
    found = section_form(Scope.SPECIFICATION, ("k_max",), units)[0]
    return replace(found, hint="optional")


@dataclass(slots=True)
class BenchForm:
    """The bench exactly as typed: every value is the text the technician entered."""

    method: str = "falling_head"
    standard: str = ""
    values: dict[str, str] = field(default_factory=dict)
    trial_rows: int = DEFAULT_TRIAL_ROWS

    @property
    def known_method(self) -> str:
        return self.method if self.method in dict(METHOD_CHOICES) else "falling_head"

    def value(self, name: str) -> str:
        return self.values.get(name, "")

    def field_names(self) -> set[str]:
        method = self.known_method
        names = {"method", "standard", "specification.k_max"}
        names |= {f"specimen.{e.key}" for e in specimen_entries()}
        names |= {f"apparatus.{e.key}" for e in apparatus_form(method)}
        for row in range(self.trial_rows):
            names |= {f"trials.{row}.{e.key}" for e in trial_form(method)}
        return names

    def filled_rows(self) -> list[int]:
        """Trial rows with anything typed in them (empty rows are not sent to the engine)."""
        entries = trial_form(self.known_method)
        return [
            row
            for row in range(self.trial_rows)
            if any(self.value(f"trials.{row}.{e.key}").strip() for e in entries)
        ]


def read_form(form: Mapping[str, Any]) -> BenchForm:
    """The bench from posted form fields; 'action' adds or removes a trial row."""
    bench = BenchForm(
        method=str(form.get("method", "falling_head")),
        standard=str(form.get("standard", "")),
    )
    try:
        rows = int(str(form.get("trial_rows", DEFAULT_TRIAL_ROWS)))
    except ValueError:
        rows = DEFAULT_TRIAL_ROWS
    action = form.get("action")
    if action == "add_trial":
        rows += 1
    elif action == "remove_trial":
        rows -= 1
    bench.trial_rows = max(1, min(MAX_TRIAL_ROWS, rows))
    for key, value in form.items():
        if isinstance(value, str) and key.split(".", 1)[0] in (
            "specimen",
            "apparatus",
            "trials",
            "specification",
        ):
            bench.values[key] = value
    return bench


def payload_of(bench: BenchForm) -> tuple[dict[str, Any], list[int]]:
    """The reduction request for the engine, and the form row of each trial sent."""
    method = bench.known_method

    def section(prefix: str, entries: tuple[FormEntry, ...]) -> dict[str, str]:
        out = {}
        for entry in entries:
            text = bench.value(f"{prefix}.{entry.key}").strip()
            if text:
                out[entry.key] = text
        return out

    rows = bench.filled_rows()
    payload: dict[str, Any] = {
        "method": bench.method,
        "specimen": section("specimen", specimen_entries()),
        "apparatus": section("apparatus", apparatus_form(method)),
        "trials": [section(f"trials.{row}", trial_form(method)) for row in rows],
    }
    if bench.standard:
        payload["standard"] = bench.standard
    spec = section("specification", (spec_entry(),))
    if spec:
        payload["specification"] = spec
    return payload, rows


@dataclass(slots=True)
class Outcome:
    """What the bench shows after one reduction attempt."""

    result: dict[str, Any] | None = None
    field_errors: dict[str, dict[str, str]] = field(default_factory=dict)
    problems: list[dict[str, str]] = field(default_factory=list)
    trial_notes: dict[int, list[dict[str, str]]] = field(default_factory=dict)
    rows: list[int] = field(default_factory=list)
    plot_svg: str = ""
    empty: bool = False

    @property
    def refused(self) -> bool:
        return self.result is None and not self.empty


def _form_name(loc: tuple[str | int, ...], rows: list[int]) -> str:
    parts = list(loc)
    if len(parts) >= 2 and parts[0] == "trials" and isinstance(parts[1], int):
        parts[1] = rows[parts[1]] if parts[1] < len(rows) else parts[1]
    return ".".join(str(p) for p in parts)


def run_bench(bench: BenchForm, session: Session | None = None) -> Outcome:
    """Reduce what is typed so far (under the laboratory's scope, given a `session`);
    refusals are kept per field, with the text as typed."""
    payload, rows = payload_of(bench)
    if not rows:
        return Outcome(empty=True, rows=rows)
    reduced = reduce_payload(payload, numbers=[row + 1 for row in rows], session=session)
    if reduced.result is None:
        outcome = Outcome(rows=rows)
        visible = bench.field_names()
        for problem in reduced.problems:
            name = _form_name(problem.loc, rows)
            entry = {"msg": beside(problem), "kind": problem.kind}
            item = {"field": problem.name, "name": name, **entry}
            if name in visible:
                outcome.field_errors.setdefault(name, entry)
                item["anchor"] = "f-" + name.replace(".", "-")
            outcome.problems.append(item)
        return outcome
    result = reduced.result
    outcome = Outcome(result=result, rows=rows, trial_notes=trial_notes(result, rows))
    reference = f"{result['reference_temperature_c']:g} °C"
    for row in rows:
        if not bench.value(f"trials.{row}.temperature").strip():
            outcome.trial_notes.setdefault(row, []).append(
                {"status": "warn", "text": f"No temperature: k is not corrected to {reference}."}
            )
    k_values = [t["k_ref_m_per_s"] for t in result["trials"]]
    if all(k > 0 for k in k_values):
        spec = payload.get("specification")
        outcome.plot_svg = k_per_trial_svg(
            k_values,
            used=result["result"]["trials_used"],
            spec_limit=_spec_limit(result) if spec else None,
            reference_temperature_c=result["reference_temperature_c"],
            plot_id="bench-k-plot",
            width=480,
        )
    return outcome


def _spec_limit(result: Mapping[str, Any]) -> float | None:
    for check in result["checks"]:
        if check["id"] == "specification" and check["limit"] is not None:
            return float(check["limit"])
    return None


def _context(request: Request, user: Any, bench: BenchForm, outcome: Outcome) -> dict[str, Any]:
    method = bench.known_method
    units = getattr(user, "display_units", "si")
    return layout_context(
        request,
        user,
        bench=bench,
        outcome=outcome,
        methods=METHOD_CHOICES,
        standards=STANDARD_CHOICES,
        specimen_entries=specimen_entries(units),
        apparatus_entries=apparatus_form(method, units),
        trial_entries=trial_form(method, units),
        spec_entry=spec_entry(units),
        max_trial_rows=MAX_TRIAL_ROWS,
    )


@router.get("")
def bench_page(request: Request, user: LabStaff) -> Response:
    """An empty bench, ready for a quick reduction at the permeameter."""
    bench = BenchForm()
    return render(request, "bench/bench.html", _context(request, user, bench, Outcome(empty=True)))


@router.post("/preview")
def bench_preview(
    request: Request, session: SessionDep, user: LabStaff, form: PostedForm
) -> Response:
    """Reduce the typed entries. htmx gets the result fragment (field messages out of band),
    or the whole bench when the form itself changes (method, trial rows); a browser without
    JavaScript gets the whole page. Refused entries answer 422 with everything typed kept."""
    bench = read_form(form)
    outcome = run_bench(bench, session)
    context = _context(request, user, bench, outcome)
    whole_bench = form.get("view") == "form"
    # Field messages travel out of band only when htmx swaps the result alone.
    context["oob"] = htmx_details(request).wants_fragment and not whole_bench
    return render(
        request,
        "bench/bench.html",
        context,
        fragment="bench/_bench.html" if whole_bench else "bench/_result.html",
        status_code=422 if outcome.refused else 200,
    )
