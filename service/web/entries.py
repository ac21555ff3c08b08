"""A test's entries on pages: the form fields, the choices and the words of a typed entry, all
from the method catalogue (through the lab-tests door)."""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any

from service.lab_tests.reduction import Entry, Method, Scope, catalogue


@dataclass(frozen=True, slots=True)
class FormEntry:
    """One typed field of a form: its name in the request, its words, an example and a hint."""

    key: str
    label: str
    example: str
    hint: str = ""
    symbol: str = ""


def form_entry(entry: Entry, method: Method | None = None, units: str | None = "si") -> FormEntry:
    """A catalogue entry as a form field, in the user's unit system."""
    hint = method.hint(entry.id) if method is not None else ""
    if hint in ("", "optional") and entry.hint:
        hint = f"{hint}, {entry.hint}" if hint else entry.hint
    return FormEntry(entry.id, entry.label, entry.example_for(units), hint, entry.symbol)


def trial_form(method_id: str, units: str | None = "si") -> tuple[FormEntry, ...]:
    """The trial fields a form asks for, for a method (unknown: falling head)."""
    known = method_id if method_id in catalogue.method_ids() else "falling_head"
    method = catalogue.method(known)
    return tuple(form_entry(e, method, units) for e in catalogue.form_entries(known))


def apparatus_form(method_id: str, units: str | None = "si") -> tuple[FormEntry, ...]:
    """The apparatus fields of a method's form."""
    known = method_id if method_id in catalogue.method_ids() else "falling_head"
    method = catalogue.method(known)
    return tuple(form_entry(e, method, units) for e in method.apparatus_entries if e.on_forms)


def section_form(
    scope: Scope, ids: Iterable[str], units: str | None = "si"
) -> tuple[FormEntry, ...]:
    """Chosen entries of one scope as form fields (a page's own selection)."""
    return tuple(form_entry(catalogue.entry(scope, i), units=units) for i in ids)


def takes_readings(method_id: str) -> bool:
    """Whether a trial of the method may be a run of timed readings."""
    return method_id in catalogue.method_ids() and catalogue.method(method_id).readings


METHOD_CHOICES = tuple((m.id, m.name) for m in catalogue.METHODS)
STANDARD_CHOICES = (("", "None"), *((s.id, s.id) for s in catalogue.STANDARDS))


def method_name(method_id: str) -> str:
    """A method's one display name."""
    return catalogue.method_name(method_id)


def typed_text(raw: Any) -> str:
    """A quantity as typed: '70 cm', or '355 mL ± 2' for an object with its uncertainty."""
    if isinstance(raw, Mapping):
        if "value" not in raw:
            return ""
        text = f"{raw.get('value')} {raw.get('unit') or ''}".strip()
        return text + (f" ± {raw['u']}" if raw.get("u") is not None else "")
    return str(raw)


def entry_words(scope: Scope, entry_id: str) -> tuple[str, str]:
    """(label, symbol) of an entry; an id the catalogue does not know is shown as words."""
    found = catalogue.find(scope, entry_id)
    if found is None:
        return entry_id.replace("_", " ").capitalize(), ""
    return found.label, found.symbol


def trial_entries_text(entries: Mapping[str, Any]) -> list[tuple[str, str]]:
    """A trial's entries in catalogue order, as (label, text as typed); readings counted."""
    order = [e.id for e in catalogue.entries(Scope.TRIAL)]
    out = []
    for name in sorted(entries, key=lambda n: order.index(n) if n in order else len(order)):
        value = entries[name]
        if name == "readings":
            out.append(("Readings", f"{len(value or [])} readings"))
        elif value not in (None, ""):
            out.append((entry_words(Scope.TRIAL, name)[0], typed_text(value)))
    return out
