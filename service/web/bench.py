"""The technician's bench: type a test's entries (any unit beside each number) and see k,
k20, gradient and every check recomputed as you type, with a stopwatch for durations.

Stores nothing: the same fragment is meant to sit inside the real test page later.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import Response

from service.deps import LabStaff
from service.engine import EngineInputError, parse_request, reduce, result_to_dict
from service.engine.errors import InputProblem, field_name
from service.plots import k_per_trial_svg
from service.web.htmx import htmx_details, render
from service.web.pages import layout_context

router = APIRouter(prefix="/bench", include_in_schema=False)

MAX_TRIAL_ROWS = 12
DEFAULT_TRIAL_ROWS = 3


@dataclass(frozen=True, slots=True)
class Entry:
    """One typed quantity on the bench form: the engine's name for it and how to ask for it."""

    key: str
    label: str
    example: str
    hint: str = ""


METHODS = (
    ("falling_head", "Falling head, constant tailwater"),
    ("falling_head_rising_tail", "Falling headwater, rising tailwater"),
    ("constant_head", "Constant head"),
    ("constant_rate", "Constant rate of flow"),
)
STANDARDS = (
    ("", "None"),
    ("ASTM D5084", "ASTM D5084"),
    ("ASTM D5856", "ASTM D5856"),
    ("ASTM D2434", "ASTM D2434"),
    ("ISO 17892-11", "ISO 17892-11"),
)
SPECIMEN_ENTRIES = (
    Entry("length", "Length", "11.6 cm"),
    Entry("diameter", "Diameter", "7.1 cm"),
    Entry("wet_mass", "Wet mass", "560 g", "optional"),
    Entry("water_content", "Water content", "22.4 %", "optional"),
    Entry("specific_gravity", "Specific gravity", "2.70", "Gs, optional"),
)
APPARATUS_ENTRIES: dict[str, tuple[Entry, ...]] = {
    "falling_head": (
        Entry("standpipe_diameter", "Standpipe diameter", "0.60 cm", "or give its area"),
        Entry("standpipe_area", "Standpipe area", "0.283 cm**2", "or give its diameter"),
    ),
    "falling_head_rising_tail": (
        Entry("headwater_area", "Headwater burette area", "0.71 cm**2"),
        Entry("tailwater_area", "Tailwater burette area", "0.95 cm**2"),
    ),
    "constant_head": (
        Entry("manometer_spacing", "Manometer port spacing", "15 cm", "optional: replaces length"),
    ),
    "constant_rate": (),
}
TEMPERATURE = Entry("temperature", "Temperature", "21.5 degC", "or 70 degF")
DURATION = Entry("duration", "Duration", "3600 s")
TRIAL_ENTRIES: dict[str, tuple[Entry, ...]] = {
    "falling_head": (
        Entry("head_initial", "Head at start", "100 cm"),
        Entry("head_final", "Head at end", "70 cm"),
        DURATION,
        TEMPERATURE,
    ),
    "falling_head_rising_tail": (
        Entry("head_initial", "Head at start", "125 cm"),
        Entry("head_final", "Head at end", "110 cm", "optional with volumes"),
        DURATION,
        Entry("inflow_volume", "Inflow volume", "9.75 mL"),
        Entry("outflow_volume", "Outflow volume", "9.50 mL"),
        TEMPERATURE,
    ),
    "constant_head": (
        Entry("volume", "Volume collected", "355 mL"),
        DURATION,
        Entry("head_difference", "Head difference", "4.5 cm"),
        TEMPERATURE,
    ),
    "constant_rate": (
        Entry("flow_rate", "Flow rate", "0.020 mL/min"),
        Entry("pressure_difference", "Pressure difference", "35 kPa"),
        TEMPERATURE,
    ),
}
SPEC_ENTRY = Entry("k_max", "Specification limit on k", "1e-9 m/s", "optional")


@dataclass(slots=True)
class BenchForm:
    """The bench exactly as typed: every value is the text the technician entered."""

    method: str = "falling_head"
    standard: str = ""
    values: dict[str, str] = field(default_factory=dict)
    trial_rows: int = DEFAULT_TRIAL_ROWS

    @property
    def known_method(self) -> str:
        return self.method if self.method in TRIAL_ENTRIES else "falling_head"

    def value(self, name: str) -> str:
        return self.values.get(name, "")

    def field_names(self) -> set[str]:
        method = self.known_method
        names = {"method", "standard", f"specification.{SPEC_ENTRY.key}"}
        names |= {f"specimen.{e.key}" for e in SPECIMEN_ENTRIES}
        names |= {f"apparatus.{e.key}" for e in APPARATUS_ENTRIES[method]}
        for row in range(self.trial_rows):
            names |= {f"trials.{row}.{e.key}" for e in TRIAL_ENTRIES[method]}
        return names

    def field_labels(self) -> dict[str, str]:
        """Form name -> the words on the page, for naming a field in a message."""
        method = self.known_method
        labels = {"method": "Method", "standard": "Standard"}
        labels[f"specification.{SPEC_ENTRY.key}"] = SPEC_ENTRY.label
        labels |= {f"specimen.{e.key}": f"Specimen: {e.label.lower()}" for e in SPECIMEN_ENTRIES}
        labels |= {
            f"apparatus.{e.key}": f"Apparatus: {e.label.lower()}" for e in APPARATUS_ENTRIES[method]
        }
        for row in range(self.trial_rows):
            labels |= {
                f"trials.{row}.{e.key}": f"Trial {row + 1}: {e.label.lower()}"
                for e in TRIAL_ENTRIES[method]
            }
        return labels

    def filled_rows(self) -> list[int]:
        """Trial rows with anything typed in them (empty rows are not sent to the engine)."""
        method = self.known_method
        return [
            row
            for row in range(self.trial_rows)
            if any(self.value(f"trials.{row}.{e.key}").strip() for e in TRIAL_ENTRIES[method])
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

    def section(prefix: str, entries: tuple[Entry, ...]) -> dict[str, str]:
        out = {}
        for entry in entries:
            text = bench.value(f"{prefix}.{entry.key}").strip()
            if text:
                out[entry.key] = text
        return out

    rows = bench.filled_rows()
    payload: dict[str, Any] = {
        "method": bench.method,
        "specimen": section("specimen", SPECIMEN_ENTRIES),
        "apparatus": section("apparatus", APPARATUS_ENTRIES[method]),
        "trials": [section(f"trials.{row}", TRIAL_ENTRIES[method]) for row in rows],
    }
    if bench.standard:
        payload["standard"] = bench.standard
    spec = section("specification", (SPEC_ENTRY,))
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


def _beside_field(problem: InputProblem) -> str:
    if problem.kind == "missing":
        return f"Needed: {problem.accepted}."
    shown = f"'{problem.value}'" if isinstance(problem.value, str) else repr(problem.value)
    reason = problem.reason[:1].upper() + problem.reason[1:]
    return f"{reason} (you typed {shown}). Accepted: {problem.accepted}."


def trial_notes(result: Mapping[str, Any], rows: list[int]) -> dict[int, list[dict[str, str]]]:
    """Warnings and failures of test-wide checks, pinned to the form row of the trial causing them.

    Each check names its own limit, so the trial at fault is found with the engine's limit:
    repeatability (deviation from the mean of the trials used), outflow/inflow ratio (the
    trial at the worst ratio), gradient (trials above the limit).
    """
    notes: dict[int, list[dict[str, str]]] = {}
    trials = result["trials"]
    used = result["result"]["trials_used"]

    def add(index: int, status: str, text: str) -> None:
        row = rows[index] if index < len(rows) else index
        notes.setdefault(row, []).append({"status": status, "text": text})

    for check in result["checks"]:
        status, limit = check["status"], check["limit"]
        if status not in ("warn", "fail") or limit is None:
            continue
        if check["id"] == "steady_state" and limit < 1 and used:
            mean = sum(trials[j]["k_ref_m_per_s"] for j in used) / len(used)
            for j in used:
                deviation = trials[j]["k_ref_m_per_s"] / mean - 1
                if abs(deviation) > limit:
                    add(j, status, f"k20 is {deviation:+.0%} from the mean; limit ±{limit:.0%}.")
        elif check["id"] == "flow_ratio":
            for j, trial in enumerate(trials):
                ratio = trial["flow_ratio"]
                if ratio is not None and abs(ratio - check["measured"]) < 1e-12:
                    add(j, status, f"Outflow/inflow is {ratio:.2f}; accepted 0.75 to 1.25.")
        elif check["id"] == "gradient_limit":
            for j, trial in enumerate(trials):
                if trial["gradient"] > limit:
                    add(j, status, f"Gradient {trial['gradient']:.3g} is above {limit:g}.")
    return notes


def run_bench(bench: BenchForm) -> Outcome:
    """Reduce what is typed so far; refusals are kept per field, with the text as typed."""
    payload, rows = payload_of(bench)
    if not rows:
        return Outcome(empty=True, rows=rows)
    try:
        result = result_to_dict(reduce(parse_request(payload)))
    except EngineInputError as exc:
        outcome = Outcome(rows=rows)
        visible = bench.field_names()
        labels = bench.field_labels()
        for problem in exc.problems:
            name = _form_name(problem.loc, rows)
            entry = {"msg": _beside_field(problem), "kind": problem.kind}
            item = {"field": labels.get(name, field_name(problem.loc)), "name": name, **entry}
            if name in visible:
                outcome.field_errors.setdefault(name, entry)
                item["anchor"] = "f-" + name.replace(".", "-")
            outcome.problems.append(item)
        return outcome
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
    return layout_context(
        request,
        user,
        bench=bench,
        outcome=outcome,
        methods=METHODS,
        standards=STANDARDS,
        specimen_entries=SPECIMEN_ENTRIES,
        apparatus_entries=APPARATUS_ENTRIES[method],
        trial_entries=TRIAL_ENTRIES[method],
        spec_entry=SPEC_ENTRY,
        max_trial_rows=MAX_TRIAL_ROWS,
    )


@router.get("")
def bench_page(request: Request, user: LabStaff) -> Response:
    """An empty bench, ready for a quick reduction at the permeameter."""
    bench = BenchForm()
    return render(request, "bench/bench.html", _context(request, user, bench, Outcome(empty=True)))


@router.post("/preview")
async def bench_preview(request: Request, user: LabStaff) -> Response:
    """Reduce the typed entries. htmx gets the result fragment (field messages out of band),
    or the whole bench when the form itself changes (method, trial rows); a browser without
    JavaScript gets the whole page. Refused entries answer 422 with everything typed kept."""
    form = await request.form()
    bench = read_form(form)
    outcome = run_bench(bench)
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
