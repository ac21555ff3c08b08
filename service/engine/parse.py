"""Turn the contract-shaped request (as typed, with units) into a validated :class:`ReductionInput`.

This is the single boundary where units are converted: everything after it is SI floats.
Every problem found is collected, so a refused form can show all its bad fields at once.
Which fields each section takes, their kinds, and what a method's trials must give come
from the method catalogue (:mod:`service.engine.catalogue`); messages name fields by their
catalogue labels.
"""

from __future__ import annotations

from collections.abc import Collection, Mapping
from dataclasses import dataclass
from typing import Any

from service.engine import catalogue, units
from service.engine.catalogue import Method, Need, Scope
from service.engine.errors import EngineInputError, InputProblem, Loc
from service.engine.model import (
    Apparatus,
    Options,
    Reading,
    ReductionInput,
    SaturationStep,
    Specimen,
    Trial,
)
from service.engine.phase import cylinder_area
from service.engine.possible import check_possible
from service.engine.rules import DECISION_RULES, PERMEAMETERS
from service.engine.water import MAX_TEMPERATURE_C, MIN_TEMPERATURE_C

MAX_TRIALS = 500
MAX_READINGS = 5000

TOP_KEYS = (
    "method",
    "standard",
    "options",
    "specimen",
    "apparatus",
    "saturation",
    "trials",
    "specification",
    "permeameter",
)

Table = dict[str, tuple[units.Kind, str, bool]]


def _quantities(scope: Scope) -> Table:
    """Field name -> (kind, engine field, must be > 0) for the quantities of one scope."""
    return {
        e.id: (e.kind, e.si_field, e.positive)
        for e in catalogue.entries(scope)
        if e.is_quantity and (e.si_field or scope is Scope.TRIAL)
    }


SPECIMEN_FIELDS = _quantities(Scope.SPECIMEN)
APPARATUS_FIELDS = _quantities(Scope.APPARATUS)
TRIAL_FIELDS = _quantities(Scope.TRIAL)
READING_FIELDS = _quantities(Scope.READING)
OPTION_QUANTITIES = _quantities(Scope.OPTION)
ALL_QUANTITY_FIELDS = {
    **SPECIMEN_FIELDS,
    **APPARATUS_FIELDS,
    **TRIAL_FIELDS,
    **READING_FIELDS,
    **OPTION_QUANTITIES,
}
# Plausible ranges of specimen entries (SI): name, lowest, highest, accepted, reason. The
# specific gravity must be above 1 (solids heavier than water); the others include their ends.
SPECIMEN_RANGES = (
    ("water_content", 0.0, 10.0, "a fraction such as 0.224 or a percentage such as '22.4 %'",
     "is not from 0 to 1000 %: a percentage needs its '%' sign"),
    ("specific_gravity", 1.0, 6.0, "a number above 1 and at most 6, such as 2.70",
     "is not a plausible specific gravity of solids"),
    ("retained_on_lower_sieve", 0.0, 1.0, "a percentage from 0 to 100 %, such as '40 %'",
     "is not from 0 to 100 %"),
)  # fmt: skip
B_VALUE = "a B-value from 0 to 1.1, such as 0.96"
CORRECTIONS = catalogue.entry(Scope.OPTION, "temperature_correction").choices
DENSITY_CONVENTIONS = catalogue.entry(Scope.OPTION, "water_density").choices


class _Reader:
    """Collects problems while reading sections of the payload."""

    def __init__(self, default_uncertainties: Mapping[str, Any] | None) -> None:
        self.problems: list[InputProblem] = []
        self.values: dict[Loc, float] = {}  # every quantity read, by its location, in SI
        self._defaults_raw = dict(default_uncertainties or {})
        self._defaults: dict[str, float | None] = {}
        for key in self._defaults_raw:
            if key not in ALL_QUANTITY_FIELDS:
                self.add(
                    ("default_uncertainties", key),
                    self._defaults_raw[key],
                    "a field name of the request: " + ", ".join(sorted(ALL_QUANTITY_FIELDS)),
                    "is not a quantity field",
                    "unknown_field",
                )

    def add(
        self, loc: Loc, value: Any, accepted: str, reason: str, kind: str = "value_error"
    ) -> None:
        self.problems.append(InputProblem(loc, reason, value, accepted, kind))

    def default_u(self, name: str) -> float | None:
        if name not in self._defaults:
            raw = self._defaults_raw.get(name)
            if raw is None:
                self._defaults[name] = None
            else:
                kind = ALL_QUANTITY_FIELDS[name][0]
                try:
                    self._defaults[name] = units.parse_uncertainty(
                        raw, kind, ("default_uncertainties", name)
                    )
                except EngineInputError as exc:
                    self.problems.extend(exc.problems)
                    self._defaults[name] = None
        return self._defaults[name]

    def section(self, raw: Any, loc: Loc, allowed: Collection[str]) -> dict[str, Any]:
        """Return a JSON object's ``allowed`` keys (None values dropped), refusing the others."""
        if raw is None:
            return {}
        if not isinstance(raw, Mapping):
            self.add(loc, raw, "an object", "is not an object", "bad_type")
            return {}
        for key in raw:
            if key not in allowed:
                self.add(
                    (*loc, key),
                    raw[key],
                    "one of: " + ", ".join(sorted(allowed)),
                    "is not a field here",
                    "unknown_field",
                )
        return {k: v for k, v in raw.items() if k in allowed and v is not None}

    def quantity(
        self,
        data: Mapping[str, Any],
        name: str,
        loc: Loc,
        table: Mapping[str, tuple[units.Kind, str, bool]],
        *,
        u_as: str = "",
    ) -> tuple[float, float | None] | None:
        """Read the quantity ``name`` of ``data`` as (SI value, u), or None.

        ``u_as`` names the field whose default uncertainty applies (by default its own).
        """
        if name not in data:
            return None
        kind, _, positive = table[name]
        default_u = self.default_u(u_as or name)
        try:
            got = units.parse_quantity(
                data[name], kind, (*loc, name), positive=positive, default_u=default_u
            )
        except EngineInputError as exc:
            self.problems.extend(exc.problems)
            return None
        self.values[(*loc, name)] = got[0]
        return got

    def choice(
        self, data: Mapping[str, Any], name: str, loc: Loc, accepted: tuple[Any, ...], default: Any
    ) -> Any:
        if name not in data:
            return default
        value = data[name]
        if value not in accepted:
            self.add(
                (*loc, name),
                value,
                "one of " + ", ".join(repr(a) for a in accepted),
                "is not recognised",
                "bad_choice",
            )
            return default
        return value


def _temperature_ok(reader: _Reader, loc: Loc, raw: Any, value: float) -> bool:
    if not MIN_TEMPERATURE_C <= value <= MAX_TEMPERATURE_C:
        reader.add(
            loc,
            raw,
            f"a water temperature from {MIN_TEMPERATURE_C:g} °C to {MAX_TEMPERATURE_C:g} °C, "
            "such as '21.5 degC'",
            "is outside the range of liquid water the engine covers",
            "out_of_range",
        )
        return False
    return True


def _read_options(reader: _Reader, raw: Any) -> Options:
    loc: Loc = ("options",)
    data = reader.section(raw, loc, (*OPTION_QUANTITIES, "temperature_correction", "water_density"))
    values: dict[str, Any] = {}
    for name, (_, field_name, _) in OPTION_QUANTITIES.items():
        got = reader.quantity(data, name, loc, OPTION_QUANTITIES)
        if got is not None:
            values[field_name] = got[0]
    ref = values.get("reference_temperature_c")
    if ref is not None and not _temperature_ok(
        reader, (*loc, "reference_temperature"), data["reference_temperature"], ref
    ):
        ref = None
    correction = reader.choice(data, "temperature_correction", loc, CORRECTIONS, "iapws")
    if correction == "astm_d5084" and "viscosity_pa_s" in values:
        reader.add(
            (*loc, "viscosity"),
            data["viscosity"],
            "either a viscosity (the factor is then η/η(T_ref)) or the ASTM D5084 R_T formula",
            "cannot be combined with the ASTM D5084 R_T formula",
            "incompatible_options",
        )
    if correction == "astm_d5084" and ref is not None and abs(ref - 20.0) > 1e-9:
        reader.add(
            (*loc, "temperature_correction"),
            correction,
            "'iapws' for a reference temperature other than 20 °C",
            "the ASTM D5084 R_T formula corrects to 20 °C only",
            "incompatible_options",
        )
    return Options(
        reference_temperature_c=ref,
        temperature_correction=correction,
        water_density=reader.choice(data, "water_density", loc, DENSITY_CONVENTIONS, "temperature"),
        viscosity_pa_s=values.get("viscosity_pa_s"),
        unit_weight_n_per_m3=values.get("unit_weight_n_per_m3"),
    )


def _needed_by(method: Method) -> str:
    return f"is required for the {method.name.lower()} method"


def _given(
    reader: _Reader,
    data: Mapping[str, Any],
    loc: Loc,
    need: Need,
    what: str,
    reason: str = "is required",
) -> None:
    """Refuse what does not meet ``need``: nothing of it given, or two alternatives at once."""
    present = [i for i in need.one_of if i in data]
    if len(present) > 1:
        first, second = (_noun(loc, i) for i in present[:2])
        reader.add(
            (*loc, present[1]),
            data[present[1]],
            f"{first} or {second}, not both",
            f"{first} was also given",
            "ambiguous",
        )
    elif not present and not (need.or_all and all(i in data for i in need.or_all)):
        reader.add((*loc, need.one_of[0]), None, what, reason, "missing")


def _noun(loc: Loc, entry_id: str) -> str:
    found = catalogue.find(Scope(str(loc[0])), entry_id)
    return found.noun if found is not None else entry_id


def _area(
    reader: _Reader,
    data: Mapping[str, Any],
    loc: Loc,
    name: str,
    table: Table,
    *,
    circle: bool = True,
    u_as: str = "",
) -> tuple[float, float, float | None] | None:
    """Read a size as (the value in SI, what it gives, its u).

    A length given for an area (``circle``) is a diameter and gives the circle's area;
    anything else gives itself.
    """
    got = reader.quantity(data, name, loc, table, u_as=u_as)
    if got is None:
        return None
    value, u_value = got
    if not circle or table[name][0] is not units.LENGTH:
        return value, value, u_value
    area = cylinder_area(value)
    return value, area, (2.0 * area * u_value / value if u_value is not None else None)


def _read_specimen(reader: _Reader, raw: Any) -> tuple[dict[str, Any], dict[str, float]]:
    loc: Loc = ("specimen",)
    allowed = {e.id for e in catalogue.entries(Scope.SPECIMEN) if e.si_field or e.replaces}
    data = reader.section(raw, loc, allowed)
    values: dict[str, Any] = {}
    u: dict[str, float] = {}
    for name, (_, field_name, _) in SPECIMEN_FIELDS.items():
        if name in ("diameter", "area"):
            continue
        got = reader.quantity(data, name, loc, SPECIMEN_FIELDS)
        if got is not None:
            values[field_name] = got[0]
            if got[1] is not None:
                u[field_name] = got[1]
    for need in catalogue.SPECIMEN_NEEDS:
        before = len(reader.problems)
        _given(reader, data, loc, need, catalogue.need_text(need))
        if len(reader.problems) > before:
            continue
        name = next(i for i in need.one_of if i in data)
        size = _area(reader, data, loc, name, SPECIMEN_FIELDS)
        if size is None:
            continue
        values["area_m2"] = size[1]
        if size[2] is not None:
            u["area_m2"] = size[2]
        if name == "diameter":
            values["diameter_m"] = size[0]
    # A value that replaces another (the length after consolidation replaces the length as
    # prepared) is reduced in its place; the one it replaces is checked and kept as read.
    for item in catalogue.entries(Scope.SPECIMEN):
        if not (item.replaces and item.id in data):
            continue
        table = {item.id: (item.kind, "", item.positive)}
        if item.replaces == "diameter":
            size = _area(reader, data, loc, item.id, table, u_as=item.replaces)
            if size is not None:
                values["diameter_m"], values["area_m2"] = size[0], size[1]
                u.pop("area_m2", None)
                if size[2] is not None:
                    u["area_m2"] = size[2]
        else:
            field_name = SPECIMEN_FIELDS[item.replaces][1]
            got = reader.quantity(data, item.id, loc, table, u_as=item.replaces)
            if got is not None:
                values[field_name] = got[0]
                u.pop(field_name, None)
                if got[1] is not None:
                    u[field_name] = got[1]
    for name, low, high, accepted, reason in SPECIMEN_RANGES:
        value = values.get(SPECIMEN_FIELDS[name][1])
        if value is None:
            continue
        inside = low < value <= high if name == "specific_gravity" else low <= value <= high
        if not inside:
            reader.add((*loc, name), data[name], accepted, reason, "out_of_range")
    stiff = data.get("stiff_material", False)
    if not isinstance(stiff, bool):
        reader.add((*loc, "stiff_material"), stiff, "true or false", "is not a boolean", "bad_type")
        stiff = False
    values["stiff_material"] = stiff
    return values, u


def _read_apparatus(reader: _Reader, raw: Any, method: Method | None) -> Apparatus:
    loc: Loc = ("apparatus",)
    data = reader.section(raw, loc, tuple(APPARATUS_FIELDS))
    values: dict[str, float] = {}
    u: dict[str, float] = {}
    # Each engine field once: an area, or the diameter it is worked out from.
    by_field: dict[str, list[str]] = {}
    for name, (_, field_name, _) in APPARATUS_FIELDS.items():
        by_field.setdefault(field_name, []).append(name)
    for field_name, names in by_field.items():
        before = len(reader.problems)
        _given(reader, data, loc, Need(tuple(names)), "")
        reader.problems[before:] = [p for p in reader.problems[before:] if p.kind != "missing"]
        if len(reader.problems) > before:
            continue
        chosen = next((i for i in names if i in data), None)
        if chosen is None:
            continue
        circle = field_name.endswith("_area_m2")
        got = _area(reader, data, loc, chosen, APPARATUS_FIELDS, circle=circle)
        if got is not None:
            values[field_name] = got[1]
            if got[2] is not None:
                u[field_name] = got[2]
    if method is not None:
        for need in method.apparatus_needs:
            if not any(i in data for i in need.ids):
                reader.add(
                    (*loc, need.one_of[0]),
                    None,
                    catalogue.need_text(need),
                    _needed_by(method),
                    "missing",
                )
    return Apparatus(**values, u=u)


def _read_saturation(reader: _Reader, raw: Any) -> tuple[SaturationStep, ...]:
    if raw is None:
        return ()
    if not isinstance(raw, list):
        reader.add(
            ("saturation",), raw, "a list of {back_pressure, b_value}", "is not a list", "bad_type"
        )
        return ()
    steps = []
    table = {e.id: (e.kind, e.si_field, e.positive) for e in catalogue.entries(Scope.SATURATION)}
    for j, item in enumerate(raw):
        loc: Loc = ("saturation", j)
        data = reader.section(item, loc, tuple(table))
        back = reader.quantity(data, "back_pressure", loc, table)
        b = reader.quantity(data, "b_value", loc, table)
        if "b_value" not in data:
            reader.add((*loc, "b_value"), None, B_VALUE, "is required", "missing")
        elif b is not None and not 0.0 <= b[0] <= 1.1:
            reader.add(
                (*loc, "b_value"), data["b_value"], B_VALUE, "is out of range", "out_of_range"
            )
        elif b is not None:
            steps.append(SaturationStep(b_value=b[0], back_pressure_pa=back[0] if back else None))
    return tuple(steps)


def _read_readings(reader: _Reader, raw: Any, loc: Loc) -> tuple[Reading, ...] | None:
    accepted = "a list of at least two {time, head} readings with the head falling"
    if not isinstance(raw, list):
        reader.add(loc, raw, accepted, "is not a list", "bad_type")
        return None
    if len(raw) < 2:
        reader.add(
            loc,
            raw,
            accepted,
            f"has {len(raw)} reading(s); at least two are needed",
            "too_few_readings",
        )
        return None
    if len(raw) > MAX_READINGS:
        reader.add(
            loc,
            f"{len(raw)} readings",
            f"at most {MAX_READINGS} readings",
            "has too many readings",
            "too_many",
        )
        return None
    out: list[Reading] = []
    ok = True
    for i, item in enumerate(raw):
        rloc = (*loc, i)
        data = reader.section(item, rloc, ("time", "head"))
        t = reader.quantity(data, "time", rloc, READING_FIELDS)
        h = reader.quantity(data, "head", rloc, READING_FIELDS)
        for name in ("time", "head"):
            if name not in data:
                reader.add(
                    (*rloc, name), None, READING_FIELDS[name][0].examples, "is required", "missing"
                )
        if t is not None and t[0] < 0.0:
            reader.add(
                (*rloc, "time"),
                data["time"],
                "a time from the start of the run, zero or later, such as '0 s' or '10 min'",
                "is before the start of the run",
                "negative",
            )
            t = None
        if t is None or h is None:
            ok = False
            continue
        out.append(Reading(time_s=t[0], head_m=h[0], time_u_s=t[1], head_u_m=h[1]))
    if not ok:
        return None
    for i in range(1, len(out)):
        if out[i].time_s <= out[i - 1].time_s:
            reader.add(
                (*loc, i, "time"),
                raw[i].get("time"),
                "times that increase from one reading to the next",
                "is not later than the reading before",
                "impossible_test",
            )
            return None
        if out[i].head_m > out[i - 1].head_m:
            reader.add(
                (*loc, i, "head"),
                raw[i].get("head"),
                "heads that fall (or stay) from one reading to the next",
                "rises above the reading before: a falling-head run cannot gain head",
                "impossible_test",
            )
            return None
    if out[-1].head_m >= out[0].head_m:
        reader.add(
            (*loc, len(out) - 1, "head"),
            raw[-1].get("head"),
            "a last head below the first",
            "the head did not fall over the run",
            "impossible_test",
        )
        return None
    return tuple(out)


def _read_trial(
    reader: _Reader, raw: Any, j: int, method: Method, options: Options
) -> Trial | None:
    loc: Loc = ("trials", j)
    allowed = method.trial_keys
    if isinstance(raw, Mapping):
        for key in raw:
            known = key in catalogue.all_trial_keys()
            if known and key not in allowed and raw[key] is not None:
                reader.add(
                    (*loc, key),
                    raw[key],
                    f"for the {method.name.lower()} method: " + ", ".join(sorted(allowed)),
                    f"is not used by the {method.name.lower()} method",
                    "unknown_field",
                )
    data = reader.section(raw, loc, catalogue.all_trial_keys())
    data = {k: v for k, v in data.items() if k in allowed}
    before = len(reader.problems)
    values: dict[str, Any] = {}
    u: dict[str, float] = {}
    table = {e.id: (e.kind, e.si_field, e.positive) for e in method.trial_entries}
    for name, (_, field_name, _) in table.items():
        got = reader.quantity(data, name, loc, table)
        if got is not None and field_name:  # entries without an engine field are only checked
            values[field_name] = got[0]
            if got[1] is not None:
                u[field_name] = got[1]
    temp = values.get("temperature_c")
    if temp is not None:
        if not _temperature_ok(reader, (*loc, "temperature"), data["temperature"], temp):
            values.pop("temperature_c")
        elif options.temperature_correction == "astm_d5084" and temp < 10.0:
            reader.add(
                (*loc, "temperature"),
                data["temperature"],
                "10 °C or warmer, or the 'iapws' correction",
                "is below 10 °C, where the ASTM D5084 R_T formula drifts",
                "out_of_range",
            )
    if "readings" in data:
        for name in method.replaced_by_readings:
            if name in data:
                reader.add(
                    (*loc, name),
                    data[name],
                    f"either readings or {_noun(loc, name)}, not both",
                    "cannot be combined with a run of readings",
                    "ambiguous",
                )
        values["readings"] = _read_readings(reader, data["readings"], (*loc, "readings"))
    else:
        for need in method.needs:
            _given(reader, data, loc, need, catalogue.need_text(need), _needed_by(method))
        h1 = values.get("head_initial_m")
        h2 = values.get("head_final_m")
        if h1 is not None and h2 is not None and h2 >= h1:
            reader.add(
                (*loc, "head_final"),
                data["head_final"],
                f"a head below the head at start ({data['head_initial']})",
                f"must be below the head at start ({data['head_initial']}): the head did not fall",
                "impossible_test",
            )
    if len(reader.problems) > before:
        return None
    return Trial(**values, u=u)


@dataclass(frozen=True, slots=True)
class Read:
    """What :func:`read_request` made of a request.

    Attributes
    ----------
    input : ReductionInput or None
        The validated input; None when anything was refused.
    problems : tuple of InputProblem
        Every refusal, in the order found.
    values : mapping
        Each quantity read, by its location in the request, in SI (also when other fields
        were refused), e.g. ``{("trials", 0, "duration"): 3600.0}``: a caller storing what
        was typed takes its SI figures from here instead of parsing the text again.
    """

    input: ReductionInput | None
    problems: tuple[InputProblem, ...]
    values: Mapping[Loc, float]


def read_request(
    payload: Mapping[str, Any], default_uncertainties: Mapping[str, Any] | None = None
) -> Read:
    """Validate a request like :func:`parse_request`, returning the refusals instead of raising.

    Returns
    -------
    Read
        The input (None if refused), every refusal, and the SI figure of each quantity read.
    """
    try:
        values: dict[Loc, float] = {}
        return Read(parse_request(payload, default_uncertainties, _values=values), (), values)
    except EngineInputError as exc:
        return Read(None, exc.problems, values)


def parse_request(
    payload: Mapping[str, Any],
    default_uncertainties: Mapping[str, Any] | None = None,
    *,
    _values: dict[Loc, float] | None = None,
) -> ReductionInput:
    """Validate a contract-shaped request and convert it to SI.

    Parameters
    ----------
    payload : mapping
        The JSON body of ``POST /api/v1/reductions`` (quantities as ``"12.5 cm"`` or
        ``{"value": 12.5, "unit": "cm", "u": 0.05}``).
    default_uncertainties : mapping, optional
        Standard uncertainty per field name (``{"length": "0.05 cm", "temperature": "0.3 K"}``)
        applied where an input carries no ``u`` of its own, e.g. from the apparatus register
        (convert a resolution r to r/√12 first:
        ``uncertainty.standard_uncertainty_from_resolution``).

    Returns
    -------
    ReductionInput

    Raises
    ------
    EngineInputError
        Listing every refused field with the value received and what is accepted.
    """
    if not isinstance(payload, Mapping):
        raise EngineInputError.single((), payload, "a JSON object", "is not an object", "bad_type")
    reader = _Reader(default_uncertainties)
    if _values is not None:
        reader.values = _values
    for key in payload:
        if key not in TOP_KEYS:
            reader.add(
                (key,),
                payload[key],
                "one of: " + ", ".join(TOP_KEYS),
                "is not a field of the request",
                "unknown_field",
            )
    method_id = payload.get("method")
    method: Method | None = None
    if method_id in catalogue.method_ids():
        method = catalogue.method(method_id)
    else:
        reader.add(
            ("method",),
            method_id,
            "one of " + ", ".join(catalogue.method_ids()),
            "is not a known method",
            "bad_choice",
        )
    standard = payload.get("standard")
    if standard is not None and standard not in catalogue.standard_ids():
        reader.add(
            ("standard",),
            standard,
            "one of " + ", ".join(catalogue.standard_ids()) + " or null",
            "is not a known standard",
            "bad_choice",
        )
        standard = None
    options = _read_options(reader, payload.get("options"))
    spec_values, spec_u = _read_specimen(reader, payload.get("specimen"))
    apparatus = _read_apparatus(reader, payload.get("apparatus"), method)
    saturation = _read_saturation(reader, payload.get("saturation"))
    spec = reader.section(
        payload.get("specification"),
        ("specification",),
        tuple(e.id for e in catalogue.entries(Scope.SPECIFICATION)),
    )
    decision_rule = reader.choice(spec, "decision_rule", ("specification",), DECISION_RULES, None)
    permeameter = None
    if payload.get("permeameter") is not None:
        permeameter = reader.choice(payload, "permeameter", (), PERMEAMETERS, None)
    k_max = None
    if "k_max" in spec:
        try:
            k_max = units.parse_quantity(
                spec["k_max"], units.CONDUCTIVITY, ("specification", "k_max")
            )[0]
        except EngineInputError as exc:
            reader.problems.extend(exc.problems)

    raw_trials = payload.get("trials")
    trials: list[Trial | None] = []
    if not isinstance(raw_trials, list) or not raw_trials:
        reader.add(
            ("trials",),
            raw_trials,
            "a list of one or more trials",
            "is missing or empty",
            "missing",
        )
    elif len(raw_trials) > MAX_TRIALS:
        reader.add(
            ("trials",),
            f"{len(raw_trials)} trials",
            f"at most {MAX_TRIALS} trials",
            "has too many trials",
            "too_many",
        )
    elif method is not None:
        trials = [_read_trial(reader, t, j, method, options) for j, t in enumerate(raw_trials)]

    if (
        method is not None
        and "length_m" not in spec_values
        and apparatus.manometer_spacing_m is None
    ):
        reader.add(
            ("specimen", "length"),
            None,
            units.accepted_text(units.LENGTH, positive=True)
            + ", or the manometer port spacing that replaces it",
            "is required",
            "missing",
        )
    spacing, length = apparatus.manometer_spacing_m, spec_values.get("length_m")
    if spacing is not None and length is not None and spacing > length * (1.0 + 1e-9):
        reader.add(
            ("apparatus", "manometer_spacing"),
            payload["apparatus"]["manometer_spacing"],
            "a spacing between the manometer ports no longer than the specimen length",
            "is longer than the specimen",
            "out_of_range",
        )
    if not reader.problems:
        check_possible(reader, method, spec_values, apparatus, trials, raw_trials, options)
    if reader.problems:
        raise EngineInputError(reader.problems)
    assert method is not None
    specimen = Specimen(**spec_values, u=spec_u)
    return ReductionInput(
        method=method.id,
        standard=standard,
        options=options,
        specimen=specimen,
        apparatus=apparatus,
        saturation=saturation,
        trials=tuple(t for t in trials if t is not None),
        k_max_m_per_s=k_max,
        permeameter=permeameter,
        decision_rule=decision_rule,
    )
