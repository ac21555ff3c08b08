"""The one door to the reduction engine.

Outside ``service/engine/`` only this package (this core; ``scope_rules``, the rules built
from the laboratory's scope; ``series``, compaction series; ``stages``, the stages of a
flexible-wall test) and ``service/quantities.py`` (the typed values of other features)
import the engine; an import-linter contract holds it so. What the rest of the service needs
from the engine it gets here:

- :func:`reduce_payload` reduces a contract-shaped request (the stateless endpoint, the
  bench);
- :func:`reduce_stored` reduces a stored test as it stands, or with a changed specimen or
  trial, or with one unsaved trial (the live preview); nothing is stored;
- :func:`stored_request` builds a stored test's request and input hash without reducing;
- :func:`default_uncertainties` turns the register's resolutions into standard
  uncertainties;
- :func:`rule_book` builds the engine's rules from the laboratory's accredited scope (a
  version's snapshot), :func:`built_in_rules` lists the rules the scope page confirms.

Each returns a :class:`Reduction`: the request, the engine's result or its refusals named
by label and trial number ("Trial 3 · Head at end"), and the SI figure of every quantity it
read, so a caller storing what was typed never parses it again. The method catalogue is
re-exported for the API models, the forms, the review page, the certificate and the exports.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from sqlmodel import Session, col, select

from service.apparatus.models import Apparatus
from service.common import ApparatusKind
from service.engine import (
    BUILT_IN,
    ENGINE_VERSION,
    EngineInputError,
    RuleBook,
    catalogue,
    read_request,
    reduce,
    result_to_dict,
)
from service.engine.catalogue import Entry, Method, Need, Scope, label_of
from service.engine.checks import Check
from service.engine.errors import InputProblem
from service.engine.model import Flow, GradientSeries, SpecimenResult, TrialResult
from service.engine.reductions import fit_log_head
from service.engine.rules import DECISION_RULES, STANDARDS
from service.engine.uncertainty import standard_uncertainty_from_resolution
from service.errors import PARAMETER_PLACES, FieldProblem, Loc, field_label
from service.lab_tests.models import (
    PermeabilityTest,
    SaturationStep,
    Specimen,
    TestApparatus,
    Trial,
)
from service.lab_tests.reduction.scope_rules import (
    CURRENT,
    DECISION_RULE_WORDS,
    LimitInfo,
    RuleInfo,
    StandardRules,
    built_in_rules,
    coverage_words,
    decision_rule_words,
    for_users,
    rule_book,
    scope_rules,
)
from service.lab_tests.reduction.series import (
    SERIES_WATER_DENSITY_KG_PER_M3,
    SeriesAnalysis,
    SeriesPoint,
    SeriesSpecimen,
    analyse_series,
    saturation_of,
)
from service.lab_tests.reduction.stages import (
    logger_readings,
    stage_consolidation,
    stage_dry_mass,
    stage_permeation,
    stage_post_test,
    stage_saturation,
)

__all__ = [
    "CURRENT",
    "DECISION_RULES",
    "DECISION_RULE_WORDS",
    "ENGINE_VERSION",
    "PERMEAMETERS",
    "SERIES_WATER_DENSITY_KG_PER_M3",
    "STANDARDS",
    "Check",
    "Entry",
    "Flow",
    "GradientSeries",
    "KeptRequest",
    "LimitInfo",
    "Method",
    "Need",
    "Reduction",
    "RuleInfo",
    "Scope",
    "SeriesAnalysis",
    "SeriesPoint",
    "SeriesSpecimen",
    "SpecimenResult",
    "StandardRules",
    "StoredRequest",
    "TrialResult",
    "accepted_of",
    "analyse_series",
    "built_in_rules",
    "catalogue",
    "coverage_words",
    "decision_rule_words",
    "default_uncertainties",
    "fit_log_head",
    "for_users",
    "input_hash",
    "label",
    "label_of",
    "logger_readings",
    "permeameter_misfit",
    "reduce_payload",
    "reduce_request",
    "reduce_stored",
    "rule_book",
    "saturation_of",
    "scope_rules",
    "stage_consolidation",
    "stage_dry_mass",
    "stage_permeation",
    "stage_post_test",
    "stage_saturation",
    "stored_request",
    "trial_notes",
]

PERMEAMETERS = frozenset(
    {ApparatusKind.RIGID_WALL_PERMEAMETER, ApparatusKind.FLEXIBLE_WALL_PERMEAMETER}
)
# Which register item's resolution stands in for a missing `u`, per entry, and the SI unit
# its `resolution_si` is in.
RESOLUTION_FIELDS: dict[ApparatusKind, tuple[tuple[str, ...], str]] = {
    ApparatusKind.BALANCE: (("wet_mass", "water_mass"), "kg"),
    ApparatusKind.CALIPER: (("length", "diameter"), "m"),
    ApparatusKind.THERMOMETER: (("temperature",), "K"),
    ApparatusKind.TIMER: (("duration",), "s"),
}
# The register's geometry of a permeameter, per apparatus entry (its text column).
REGISTER_GEOMETRY = {
    "standpipe_area": "standpipe_area_text",
    "headwater_area": "headwater_area_text",
    "tailwater_area": "tailwater_area_text",
    "manometer_spacing": "port_spacing_text",
}
UNSAVED = "new"  # the key of the trial being typed, where saved trials have their id


@dataclass(frozen=True)
class Reduction:
    """One run of the engine on a test's entries (or its refusal); nothing stored.

    Attributes
    ----------
    request : dict
        The contract-shaped request that was reduced.
    defaults : dict
        The standard uncertainties applied where an entry carried none.
    result : dict or None
        The contract's response body; None when the engine refused.
    problems : tuple of FieldProblem
        Each refusal at its contract path, named by label and trial number.
    values : mapping
        The SI figure of every quantity read, by contract path.
    keys : tuple
        What each trial position of the request is: a saved trial's id, or ``"new"``.
    numbers : tuple of int
        The number each trial position goes by (its sequence number in the test).
    """

    request: dict[str, Any]
    defaults: dict[str, str]
    result: dict[str, Any] | None
    problems: tuple[FieldProblem, ...]
    values: Mapping[Loc, float]
    keys: tuple[Any, ...] = ()
    numbers: tuple[int, ...] = ()
    scope_version: int | None = None

    @property
    def ok(self) -> bool:
        return self.result is not None

    @property
    def input_hash(self) -> str:
        """The hash of what determines the result: the request, plus the default
        uncertainties under their own key when any applied."""
        return request_hash(self.request, self.defaults)

    def position(self, key: Any) -> int | None:
        """The request position of a saved trial (by id) or of the unsaved one ("new")."""
        return self.keys.index(key) if key in self.keys else None

    def output(self, key: Any) -> dict[str, Any] | None:
        """The engine's figures of one trial (by id, or "new"), or None."""
        at = self.position(key)
        if self.result is None or at is None:
            return None
        return dict(self.result["trials"][at])

    def split(self, key: Any) -> tuple[list[FieldProblem], list[FieldProblem]]:
        """(the refusals of one trial, moved to its own fields; all the others)."""
        at = self.position(key)
        own: list[FieldProblem] = []
        others: list[FieldProblem] = []
        for problem in self.problems:
            if at is not None and problem.loc[:2] == ("trials", at) and len(problem.loc) > 2:
                own.append(problem.at(problem.loc[2:]))
            elif at is not None and problem.loc == ("trials",):
                own.append(problem.at(()))
            else:
                others.append(problem)
        return own, others

    def section_problems(self, section: str) -> list[FieldProblem]:
        """The refusals inside one section (e.g. the specimen), moved to its own fields."""
        return [p.at(p.loc[1:]) for p in self.problems if p.loc[:1] == (section,)]

    def si(self, *loc: str | int) -> float | None:
        """The SI figure read at ``loc``, e.g. ``si("trials", 0, "duration")``."""
        return self.values.get(tuple(loc))

    def readings_si(self, key: Any) -> list[tuple[float, float]]:
        """(time [s], head [m]) of each reading of one trial, as read."""
        at = self.position(key)
        out: list[tuple[float, float]] = []
        index = 0
        while at is not None:
            time_s = self.si("trials", at, "readings", index, "time")
            head_m = self.si("trials", at, "readings", index, "head")
            if time_s is None or head_m is None:
                break
            out.append((time_s, head_m))
            index += 1
        return out


def label(loc: Sequence[str | int]) -> str:
    """Any field's location in words: the sections of a reduction request by the catalogue's
    labels ("Trial 3 · Head at end"), anything else from its path ("Sample 4 · Depth top")."""
    parts = tuple(p for p in loc if p not in PARAMETER_PLACES)
    if parts and parts[0] in catalogue.SECTION_WORDS:
        return label_of(parts)
    named = catalogue.find(Scope.TEST, str(parts[0])) if len(parts) == 1 else None
    return named.label if named is not None else field_label(parts)


def accepted_of(loc: Sequence[str | int]) -> str:
    """What a field accepts, where the field is a catalogue entry ("" otherwise); a bare
    entry name is looked up in the sections of a test."""
    parts = [p for p in loc if isinstance(p, str) and p not in PARAMETER_PLACES]
    if not parts:
        return ""
    scopes = [Scope(parts[0])] if parts[0] in {s.value for s in Scope} else list(Scope)
    for scope in scopes:
        found = catalogue.find(scope, parts[-1])
        if found is not None:
            return found.accepted
    return ""


def _named(
    problems: Sequence[InputProblem], numbers: Sequence[int] | None
) -> tuple[FieldProblem, ...]:
    return tuple(
        FieldProblem(p.loc, p.reason, p.value, p.accepted, p.kind, label_of(p.loc, numbers))
        for p in problems
    )


def _reduced(
    request: dict[str, Any],
    defaults: Mapping[str, str] | None,
    keys: Sequence[Any] = (),
    numbers: Sequence[int] | None = None,
    rules: tuple[RuleBook, int | None] = (BUILT_IN, None),
) -> Reduction:
    """Read and reduce under ``rules`` (a book and the scope version it was built from); an
    impossible test the reader let through (say a k that is not a finite positive number) is
    refused like any other entry."""
    read = read_request(request, defaults)
    result = None
    problems = read.problems
    if read.input is not None:
        try:
            result = for_users(result_to_dict(reduce(read.input, rules[0])))
        except EngineInputError as exc:
            problems = exc.problems
    return Reduction(
        request=request,
        defaults=dict(defaults or {}),
        result=result,
        problems=_named(problems, numbers),
        values=read.values,
        keys=tuple(keys),
        numbers=tuple(numbers or ()),
        scope_version=rules[1],
    )


def reduce_payload(
    payload: Mapping[str, Any],
    *,
    defaults: Mapping[str, str] | None = None,
    numbers: Sequence[int] | None = None,
    session: Session | None = None,
) -> Reduction:
    """Reduce a contract-shaped request (the stateless endpoint, the bench); stores nothing.

    Trials are keyed by position and numbered from one ("Trial 1"), or by `numbers` (the
    bench's rows). With a `session`, under the laboratory's scope as it stands."""
    request = dict(payload)
    trials = request.get("trials")
    count = len(trials) if isinstance(trials, list) else 0
    rules = scope_rules(session)
    return _reduced(request, defaults, keys=range(count), numbers=numbers, rules=rules)


# --- stored tests -----------------------------------------------------------------------------


def _put(target: dict[str, Any], key: str, text: str) -> None:
    if text:
        target[key] = text


def specimen_entries(specimen: Specimen | None) -> dict[str, Any]:
    """The specimen as typed, in the contract's shape (catalogue entry -> text)."""
    if specimen is None:
        return {}
    out: dict[str, Any] = {}
    for item in catalogue.entries(Scope.SPECIMEN):
        _put(out, item.id, str(getattr(specimen, f"{item.id}_text", "") or ""))
    if specimen.specific_gravity is not None:
        out["specific_gravity"] = specimen.specific_gravity
    if specimen.retained_on_lower_sieve_pct is not None:
        out["retained_on_lower_sieve"] = f"{specimen.retained_on_lower_sieve_pct} %"
    if specimen.stiff_material:
        out["stiff_material"] = True
    return out


def _wall(kind: str) -> str:
    """The catalogue's permeameter kind of a register kind ('rigid_wall_permeameter' ->
    'rigid_wall'); empty for an item that is not a permeameter."""
    wall = kind.removesuffix("_permeameter")
    return wall if wall in catalogue.permeameter_ids() else ""


def permeameter_misfit(item: Apparatus, test: PermeabilityTest) -> str | None:
    """Why a permeameter of the register does not fit the test's standard and method, in
    words naming both, or None when it fits (or is not a permeameter).

    The standard names the wall (catalogue ``Standard.wall``: flexible, rigid or either);
    the method names the geometry it needs (``Method.apparatus_needs``). A register item that
    records some geometry but none a need of the method accepts (and the test does not type
    it either) is a permeameter built for another method: a constant-head cell with manometer
    ports and no standpipe cannot run a falling-head test."""
    wall = _wall(item.kind)
    if not wall:
        return None
    name = f"{item.identifier} ({item.kind.replace('_', '-', 1).replace('_', ' ')})"
    standard = next((s for s in catalogue.STANDARDS if s.id == test.standard), None)
    if standard is not None and standard.wall not in ("either", wall.removesuffix("_wall")):
        return f"{name} does not fit {standard.id}, which uses a {standard.wall}-wall permeameter."
    try:
        method = catalogue.method(test.method)
    except KeyError:
        return None
    recorded = {e: str(getattr(item, c) or "") for e, c in REGISTER_GEOMETRY.items()}
    if not any(recorded.values()):
        return None
    typed = test.options.get("apparatus", {})
    for need in method.apparatus_needs:
        if not any(recorded.get(e) or typed.get(e) for e in need.one_of):
            wanted = catalogue.need_text(need)
            return (
                f"{name} does not fit a {method.name.lower()} test: the register gives it no "
                f"{wanted}. Choose a permeameter built for this method."
            )
    return None


def apparatus_entries(permeameter: Apparatus | None) -> dict[str, Any]:
    """The permeameter's geometry from the register, in the contract's shape."""
    out: dict[str, Any] = {}
    if permeameter is not None:
        for entry_id, column in REGISTER_GEOMETRY.items():
            _put(out, entry_id, str(getattr(permeameter, column) or ""))
    return out


def build_request(
    test: PermeabilityTest,
    *,
    specimen: Specimen | None,
    trials: Sequence[Trial],
    saturation: Sequence[SaturationStep] = (),
    permeameter: Apparatus | None = None,
) -> dict[str, Any]:
    """The contract-shaped request of a test (excluded trials left out, trials in order)."""
    apparatus = apparatus_entries(permeameter)
    apparatus.update(test.options.get("apparatus", {}))
    request: dict[str, Any] = {
        "method": test.method,
        "standard": test.standard or None,
        "options": {
            "reference_temperature": f"{test.reference_temperature_c:g} degC",
            "temperature_correction": test.temperature_correction,
            **{k: v for k, v in test.options.items() if k != "apparatus"},
        },
        "specimen": specimen_entries(specimen),
        "apparatus": apparatus,
        "saturation": [
            {"back_pressure": step.back_pressure_text, "b_value": step.b_value}
            for step in sorted(saturation, key=lambda s: s.seq)
        ],
        "trials": [dict(t.entries) for t in included(trials)],
    }
    if test.spec_k_max_text:
        request["specification"] = {"k_max": test.spec_k_max_text}
    return request


def included(trials: Sequence[Trial]) -> list[Trial]:
    """The trials that go into the reduction, in order (excluded ones left out)."""
    return [t for t in sorted(trials, key=lambda t: t.seq) if not t.excluded]


def input_hash(request: Mapping[str, Any]) -> str:
    """SHA-256 of the canonical JSON of a reduction request."""
    encoded = json.dumps(request, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(encoded.encode()).hexdigest()


def request_hash(request: Mapping[str, Any], defaults: Mapping[str, Any]) -> str:
    """The input hash: the request, plus the default uncertainties when any applied."""
    return input_hash({**request, "default_uncertainties": defaults} if defaults else request)


def default_uncertainties(apparatus: Sequence[Apparatus]) -> dict[str, str]:
    """Standard uncertainties for entries typed without a `u`, from the assigned items.

    A reading limited by an instrument's resolution r is taken as rectangularly distributed
    over ±r/2, so u = r/√12 (GUM, JCGM 100:2008, §4.3.7). Where two items of one kind are
    assigned, the coarser resolution is used."""
    out: dict[str, str] = {}
    for kind, (names, unit) in RESOLUTION_FIELDS.items():
        resolutions = [
            a.resolution_si for a in apparatus if a.kind == kind and a.resolution_si is not None
        ]
        if not resolutions:
            continue
        u = standard_uncertainty_from_resolution(max(resolutions))
        for name in names:
            out[name] = f"{u:.6g} {unit}"
    return out


@dataclass
class StoredRequest:
    """A stored test's reduction request, before it is reduced."""

    request: dict[str, Any]
    defaults: dict[str, str]
    included: list[Trial] = field(default_factory=list)
    # The rule book to judge it by and the scope version it was built from.
    rules: tuple[RuleBook, int | None] = (BUILT_IN, None)

    @property
    def input_hash(self) -> str:
        return request_hash(self.request, self.defaults)


def _rows(session: Session, model: Any, test_id: int) -> list[Any]:
    return list(session.exec(select(model).where(col(model.test_id) == test_id)).all())


def stored_request(
    session: Session,
    test: PermeabilityTest,
    *,
    specimen: Specimen | None = None,
    trials: Sequence[Trial] | None = None,
    defaults: Mapping[str, str] | None = None,
    scope_version: int | str | None = CURRENT,
) -> StoredRequest:
    """The request of a stored test as it stands; `specimen` and `trials` replace the stored
    ones (a candidate being checked), `defaults` the register's uncertainties (a submitted
    test keeps the ones it was reduced with), with the rules of the laboratory's scope
    (`scope_version`: the current one, a given version, or None for the built-in rules)."""
    assert test.id is not None
    apparatus = list(
        session.exec(
            select(Apparatus)
            .join(TestApparatus, col(TestApparatus.apparatus_id) == col(Apparatus.id))
            .where(TestApparatus.test_id == test.id)
        ).all()
    )
    rows = list(trials) if trials is not None else _rows(session, Trial, test.id)
    if specimen is None:
        found = _rows(session, Specimen, test.id)
        specimen = found[0] if found else None
    request = build_request(
        test,
        specimen=specimen,
        trials=rows,
        saturation=_rows(session, SaturationStep, test.id),
        permeameter=next((a for a in apparatus if a.kind in PERMEAMETERS), None),
    )
    return StoredRequest(
        request=request,
        defaults=default_uncertainties(apparatus) if defaults is None else dict(defaults),
        included=included(rows),
        rules=scope_rules(session, scope_version),
    )


def reduce_stored(
    session: Session,
    test: PermeabilityTest,
    *,
    specimen_changes: Mapping[str, Any] | None = None,
    trials: Sequence[Trial] | None = None,
    unsaved: Mapping[str, Any] | None = None,
    defaults: Mapping[str, str] | None = None,
    scope_version: int | str | None = CURRENT,
) -> Reduction:
    """Reduce a stored test as it stands; nothing is stored.

    Parameters
    ----------
    specimen_changes : mapping, optional
        Specimen entries as typed, over the stored ones (None or "" removes one): a change
        being checked before it is saved. Keys the contract's specimen does not take are
        left out.
    trials : optional
        Replace the stored trials (a change being checked before it is saved).
    unsaved : mapping, optional
        The entries of one more trial being typed (the live preview); its key is ``"new"``.
    defaults : mapping, optional
        The default uncertainties to apply instead of the register's.
    scope_version : int, None or "current"
        The version of the laboratory's scope to judge by: the current one by default, the
        one a stored result was reduced with (its ``scope_version``; None: built-in rules).
    """
    assert test.id is not None
    rows = list(trials) if trials is not None else _rows(session, Trial, test.id)
    if unsaved:
        seq = max((t.seq for t in rows), default=0) + 1
        rows.append(Trial(test_id=test.id, seq=seq, idempotency_key="-", entries=dict(unsaved)))
    stored = stored_request(
        session, test, trials=rows, defaults=defaults, scope_version=scope_version
    )
    if specimen_changes:
        section = dict(stored.request["specimen"])
        for name, value in specimen_changes.items():
            if catalogue.find(Scope.SPECIMEN, name) is None:
                continue
            if value is None or value == "" or value is False:
                section.pop(name, None)
            else:
                section[name] = value.strip() if isinstance(value, str) else value
        stored.request["specimen"] = section
    keys = [t.id if t.id is not None else UNSAVED for t in stored.included]
    numbers = [t.seq for t in stored.included]
    return _reduced(stored.request, stored.defaults, keys, numbers, stored.rules)


@dataclass(frozen=True)
class KeptRequest:
    """A stored test's request without its ORM rows (safe to keep across sessions): the
    request, the default uncertainties, and each included trial's id and number."""

    request: dict[str, Any]
    defaults: dict[str, str]
    keys: tuple[int, ...]
    numbers: tuple[int, ...]
    rules: tuple[RuleBook, int | None] = (BUILT_IN, None)

    @classmethod
    def of(cls, stored: StoredRequest) -> KeptRequest:
        return cls(
            request=stored.request,
            defaults=stored.defaults,
            keys=tuple(t.id or 0 for t in stored.included),
            numbers=tuple(t.seq for t in stored.included),
            rules=stored.rules,
        )


def reduce_request(
    kept: KeptRequest, *, unsaved: Mapping[str, Any] | None = None, number: int = 0
) -> Reduction:
    """Reduce a stored test's request, with the entries of one unsaved trial added last
    under the key ``"new"`` and the number `number` (the live preview); reads nothing,
    stores nothing, changes nothing in `kept`."""
    trials = list(kept.request["trials"])
    keys: list[Any] = list(kept.keys)
    numbers = list(kept.numbers)
    if unsaved:
        trials.append(dict(unsaved))
        keys.append(UNSAVED)
        numbers.append(number)
    return _reduced({**kept.request, "trials": trials}, kept.defaults, keys, numbers, kept.rules)


def check_trial(test: PermeabilityTest, entries: Mapping[str, Any], number: int) -> Reduction:
    """Read one trial's entries alone: a trial left out of the reduction still has its typed
    values checked and their SI figures stored. Only the trial's own refusals are kept, at
    its own fields (``("duration",)``); no result."""
    request = {"method": test.method, "trials": [dict(entries)]}
    reduction = _reduced(request, None, keys=[UNSAVED], numbers=[number])
    own, _ = reduction.split(UNSAVED)
    return Reduction(
        request=request,
        defaults={},
        result=None,
        problems=tuple(own),
        values=reduction.values,
        keys=(UNSAVED,),
        numbers=(number,),
    )


# --- what the checks say about single trials --------------------------------------------------


def trial_notes(result: Mapping[str, Any], keys: Sequence[Any]) -> dict[Any, list[dict[str, str]]]:
    """Warnings and failures of test-wide checks, pinned to the trial causing them (by key).

    Each check names its own limit, so the trial at fault is found with the engine's limit:
    repeatability (deviation from the mean of the trials used), outflow/inflow ratio (the
    trial at the worst ratio), gradient (trials above the limit).
    """
    notes: dict[Any, list[dict[str, str]]] = {}
    trials = result["trials"]
    used = result["result"]["trials_used"]

    def add(index: int, status: str, text: str) -> None:
        key = keys[index] if index < len(keys) else index
        notes.setdefault(key, []).append({"status": status, "text": text})

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
