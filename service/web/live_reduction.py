"""The live reduction of a test page: the stored trials plus the one being typed, through the
door exactly as a save would run it, shown with its refusals beside their fields."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from sqlmodel import Session

from service.errors import FieldProblem
from service.lab_tests.models import PermeabilityTest
from service.lab_tests.reduction import Reduction, reduce_stored, trial_notes
from service.web.entries import (
    posted,
    takes_readings,
    trial_form,
)
from service.web.refusals import beside, form_errors, prefixed

READING_ROWS = 8  # reading rows a falling-head trial form offers


@dataclass
class PageReduction:
    """The test's reduction (optionally with the trial being typed) as the page shows it."""

    result: dict[str, Any] | None = None
    keys: list[Any] = field(default_factory=list)  # trial id per engine trial, "new" for typed
    notes: dict[Any, list[dict[str, str]]] = field(default_factory=dict)
    field_errors: dict[str, dict[str, str]] = field(default_factory=dict)
    pending: list[dict[str, str]] = field(default_factory=list)
    typed: bool = False

    def trial(self, key: Any) -> dict[str, Any] | None:
        if self.result is None or key not in self.keys:
            return None
        return dict(self.result["trials"][self.keys.index(key)])

    @property
    def refused(self) -> bool:
        return any(e["kind"] != "missing" for e in self.field_errors.values())


def page_reduction(
    session: Session, test: PermeabilityTest, entries: Mapping[str, Any] | None = None
) -> PageReduction:
    """The reduction of the stored entries plus `entries` (the trial being typed), through
    the door exactly as a save would run it; nothing is stored."""
    return shown_reduction(reduce_stored(session, test, unsaved=entries or None), entries)


def shown_reduction(reduced: Reduction, entries: Mapping[str, Any] | None) -> PageReduction:
    """A reduction (with `entries`, the trial being typed, under the key "new") as the page
    shows it."""
    outcome = PageReduction(keys=list(reduced.keys), typed=bool(entries))
    if reduced.result is None:
        own, others = reduced.split("new") if entries else ([], list(reduced.problems))
        outcome.field_errors, _ = form_errors([p for p in own if p.loc], prefixed("trial"))
        outcome.pending = [
            {
                "field": p.name,
                "msg": beside(p),
                "kind": "missing" if p.kind == "missing" else "refused",
            }
            for p in [*(p for p in own if not p.loc), *others]
            if p.loc != ("trials",) or entries
        ]
        return outcome
    outcome.result = reduced.result
    outcome.notes = dict(trial_notes(reduced.result, outcome.keys))
    reference = f"{reduced.result['reference_temperature_c']:g} °C"
    included = reduced.request["trials"]
    for key, typed in zip(outcome.keys, included, strict=True):
        if "temperature" not in typed:
            outcome.notes.setdefault(key, []).append(
                {"status": "warn", "text": f"No temperature: k is not corrected to {reference}."}
            )
    return outcome


def problem_kind(problem: FieldProblem) -> str:
    return "missing" if problem.kind == "missing" else "refused"


def typed_trial(form: Mapping[str, Any], method: str) -> tuple[dict[str, str], dict[str, Any]]:
    """(every trial field as typed, keyed by form name; the entries to send)."""
    typed: dict[str, str] = {}
    entries: dict[str, Any] = {}
    for entry in trial_form(method):
        name = f"trial.{entry.key}"
        typed.update(as_typed(form, name))
        if text := posted(form, name):
            entries[entry.key] = text
    if takes_readings(method):
        readings = []
        for row in range(READING_ROWS):
            reading = {}
            for part in ("time", "head"):
                name = f"trial.readings.{row}.{part}"
                typed.update(as_typed(form, name))
                if text := posted(form, name):
                    reading[part] = text
            if reading:
                readings.append(reading)
        if readings:
            entries["readings"] = readings
    return typed, entries


def as_typed(form: Mapping[str, Any], name: str) -> dict[str, str]:
    """A number field and its unit picker as posted, to show again exactly as typed."""
    shown = {name: str(form.get(name, ""))}
    if name + ".unit" in form:
        shown[name + ".unit"] = str(form.get(name + ".unit", ""))
    return shown
