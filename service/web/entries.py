"""A test's entries on pages: the form fields, the choices and the words of a typed entry, all
from the method catalogue (through the lab-tests door)."""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, replace
from typing import Any

from service.figures import unit_symbol
from service.lab_tests.reduction import Entry, Method, Scope, catalogue

# A typed figure and the unit after it ("7.10 cm" -> "7.10", "cm"); a decimal comma is read
# as a point, since a tablet's keypad in many locales offers only the comma.
_NUMBER_AND_UNIT = re.compile(
    r"^\s*([-+]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$"
)
_DECIMAL_COMMA = re.compile(r"^([-+]?\d*),(\d+(?:[eE][-+]?\d+)?)$")
# What the number field's keypad may send: digits, a point or a comma, a sign, an exponent.
NUMBER_PATTERN = "[0-9.,eE+\\-]*"
UNIT_SUFFIX = ".unit"


@dataclass(frozen=True, slots=True)
class FormEntry:
    """One typed field of a form: its name in the request, its words, an example and a hint,
    and for a quantity the units its picker offers and the one it starts with."""

    key: str
    label: str
    example: str
    hint: str = ""
    symbol: str = ""
    unit: str = ""
    unit_choices: tuple[str, ...] = ()

    def parts(self, values: Mapping[str, Any], name: str) -> tuple[str, str]:
        """(the number field's text, the unit chosen) for the field `name`: as posted (a
        refused form shows what was typed), else split from the stored text ("7.10 cm")."""
        number = str(values.get(name, "") or "")
        if name + UNIT_SUFFIX in values:
            return number, str(values[name + UNIT_SUFFIX])
        return split_typed(number, self.unit if self.unit_choices else "")

    def options(self, chosen: str) -> tuple[tuple[str, str], ...]:
        """The picker's (value, label) pairs; a stored unit the list lacks is offered too."""
        choices = self.unit_choices
        if chosen and chosen not in choices:
            choices = (chosen, *choices)
        return tuple((u, unit_symbol(u)) for u in choices)


def split_typed(text: str, default_unit: str = "") -> tuple[str, str]:
    """A typed quantity as (number, unit): '7.10 cm' -> ('7.10', 'cm'); a text that is not a
    number and a unit stays whole in the number field."""
    match = _NUMBER_AND_UNIT.match(text)
    if not text.strip() or match is None:
        return text, default_unit
    return match.group(1), match.group(2) or default_unit


def joined(number: Any, unit: Any) -> str:
    """The number field and the picker as one typed text ('7.10' and 'cm' -> '7.10 cm'); a
    number typed with its unit already (a hardware keyboard) is kept as typed."""
    text = str(number or "").strip()
    if not text:
        return ""
    comma = _DECIMAL_COMMA.match(text)
    if comma:
        text = f"{comma.group(1) or '0'}.{comma.group(2)}"
    match = _NUMBER_AND_UNIT.match(text)
    if match is None or match.group(2):
        return text
    return f"{text} {str(unit or '').strip()}".strip()


def posted(form: Mapping[str, Any], name: str) -> str:
    """The field `name` of a posted form as typed text, its unit picker joined to it."""
    return joined(form.get(name, ""), form.get(name + UNIT_SUFFIX, ""))


def form_entry(
    entry: Entry,
    method: Method | None = None,
    units: str | None = "si",
    remembered: Mapping[str, str] | None = None,
) -> FormEntry:
    """A catalogue entry as a form field, in the user's unit system; `remembered` (entry path
    -> unit, e.g. 'trials.head_final' -> 'mm') overrides the system's unit."""
    hint = method.hint(entry.id) if method is not None else ""
    if hint in ("", "optional") and entry.hint:
        hint = f"{hint}, {entry.hint}" if hint else entry.hint
    unit = entry.unit_for(units)
    kept = (remembered or {}).get(f"{entry.scope.value}.{entry.id}")
    if kept and kept in entry.unit_choices:
        unit = kept
    return FormEntry(
        entry.id,
        entry.label,
        entry.example_for(units),
        hint,
        entry.symbol,
        unit=unit,
        unit_choices=entry.unit_choices,
    )


# The register's geometry fields (service/apparatus) and the catalogue entry each one is.
REGISTER_ENTRIES = {
    "specimen_area": (Scope.SPECIMEN, "area"),
    "port_spacing": (Scope.APPARATUS, "manometer_spacing"),
    "standpipe_area": (Scope.APPARATUS, "standpipe_area"),
    "headwater_area": (Scope.APPARATUS, "headwater_area"),
    "tailwater_area": (Scope.APPARATUS, "tailwater_area"),
}
# A register item's reading resolution: the units its picker offers, and the one it starts
# with for each kind of item (a balance reads grams, a caliper millimetres...).
RESOLUTION_UNITS = ("g", "mg", "mm", "cm", "in", "K", "s", "kPa", "psi", "mL")
RESOLUTION_UNIT_OF_KIND = {
    "balance": "g",
    "thermometer": "K",
    "timer": "s",
    "pressure_transducer": "kPa",
    "burette": "mL",
}


def register_form(units: str | None = "si", kind: str = "") -> dict[str, FormEntry]:
    """The apparatus register's typed fields as keypad fields with unit pickers: the geometry
    from the catalogue (in the user's unit system), and the resolution."""
    fields = {}
    for name, (scope, entry_id) in REGISTER_ENTRIES.items():
        entry = catalogue.entry(scope, entry_id)
        fields[name] = replace(form_entry(entry, units=units), key=name)
    fields["resolution"] = FormEntry(
        "resolution",
        "Resolution",
        "0.1 g",
        "the smallest reading step: balance 0.1 g, caliper 0.02 mm, thermometer 0.1 K, "
        "timer 0.1 s, transducer 0.1 kPa, burette 0.1 mL, permeameter head scale 1 mm",
        unit=RESOLUTION_UNIT_OF_KIND.get(kind, "mm"),
        unit_choices=RESOLUTION_UNITS,
    )
    return fields


def trial_form(
    method_id: str, units: str | None = "si", remembered: Mapping[str, str] | None = None
) -> tuple[FormEntry, ...]:
    """The trial fields a form asks for, for a method (unknown: falling head)."""
    known = method_id if method_id in catalogue.method_ids() else "falling_head"
    method = catalogue.method(known)
    return tuple(form_entry(e, method, units, remembered) for e in catalogue.form_entries(known))


def apparatus_form(method_id: str, units: str | None = "si") -> tuple[FormEntry, ...]:
    """The apparatus fields of a method's form."""
    known = method_id if method_id in catalogue.method_ids() else "falling_head"
    method = catalogue.method(known)
    return tuple(form_entry(e, method, units) for e in method.apparatus_entries if e.on_forms)


def section_form(
    scope: Scope,
    ids: Iterable[str],
    units: str | None = "si",
    remembered: Mapping[str, str] | None = None,
) -> tuple[FormEntry, ...]:
    """Chosen entries of one scope as form fields (a page's own selection)."""
    return tuple(
        form_entry(catalogue.entry(scope, i), units=units, remembered=remembered) for i in ids
    )


def units_used(form: Mapping[str, Any], prefix: str, scope: Scope) -> dict[str, str]:
    """The units picked for the fields of `prefix` that were filled in, keyed by entry path
    ('trials.head_final' -> 'cm'): what the apparatus remembers for next time."""
    used: dict[str, str] = {}
    for key, unit in form.items():
        if not (key.startswith(prefix + ".") and key.endswith(UNIT_SUFFIX)):
            continue
        entry_id = key[len(prefix) + 1 : -len(UNIT_SUFFIX)]
        found = catalogue.find(scope, entry_id)
        number = str(form.get(key[: -len(UNIT_SUFFIX)], "")).strip()
        if found is not None and number and str(unit) in found.unit_choices:
            used[f"{scope.value}.{entry_id}"] = str(unit)
    return used


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


def entry_label(scope: str, entry_id: str) -> str:
    """An entry's label by its scope's name ('trials', 'head_final' -> 'Head at end')."""
    return entry_words(Scope(scope), entry_id)[0]


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
