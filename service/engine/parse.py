"""Turn the contract-shaped request (as typed, with units) into a validated :class:`ReductionInput`.

This is the single boundary where units are converted: everything after it is SI floats.
Every problem found is collected, so a refused form can show all its bad fields at once.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from service.engine import units
from service.engine.errors import EngineInputError, InputProblem, Loc
from service.engine.model import (
    METHODS,
    Apparatus,
    Options,
    Reading,
    ReductionInput,
    SaturationStep,
    Specimen,
    Trial,
)
from service.engine.phase import cylinder_area, phase_relations
from service.engine.reductions import rising_tail_final_head
from service.engine.rules import DECISION_RULES, PERMEAMETERS, STANDARDS
from service.engine.water import MAX_TEMPERATURE_C, MIN_TEMPERATURE_C, water_density

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

# Field name -> (kind, SI field name, must be > 0)
SPECIMEN_FIELDS: dict[str, tuple[units.Kind, str, bool]] = {
    "length": (units.LENGTH, "length_m", True),
    "diameter": (units.LENGTH, "diameter_m", True),
    "area": (units.AREA, "area_m2", True),
    "wet_mass": (units.MASS, "wet_mass_kg", True),
    "water_content": (units.FRACTION, "water_content", False),
    "specific_gravity": (units.NUMBER, "specific_gravity", True),
    "max_dry_density": (units.DENSITY, "max_dry_density_kg_per_m3", True),
    "void_ratio": (units.NUMBER, "void_ratio", True),
    "d10": (units.LENGTH, "d10_m", True),
    "max_particle_size": (units.LENGTH, "max_particle_size_m", True),
    "retained_on_lower_sieve": (units.FRACTION, "retained_on_lower_sieve", False),
}
APPARATUS_FIELDS: dict[str, tuple[units.Kind, str, bool]] = {
    "standpipe_area": (units.AREA, "standpipe_area_m2", True),
    "standpipe_diameter": (units.LENGTH, "standpipe_area_m2", True),
    "headwater_area": (units.AREA, "headwater_area_m2", True),
    "headwater_diameter": (units.LENGTH, "headwater_area_m2", True),
    "tailwater_area": (units.AREA, "tailwater_area_m2", True),
    "tailwater_diameter": (units.LENGTH, "tailwater_area_m2", True),
    "manometer_spacing": (units.LENGTH, "manometer_spacing_m", True),
}
TRIAL_FIELDS: dict[str, tuple[units.Kind, str, bool]] = {
    "volume": (units.VOLUME, "volume_m3", True),
    "water_mass": (units.MASS, "water_mass_kg", True),
    "duration": (units.DURATION, "duration_s", True),
    "head_difference": (units.LENGTH, "head_difference_m", True),
    "pressure_difference": (units.PRESSURE, "pressure_difference_pa", True),
    "inflow_volume": (units.VOLUME, "inflow_volume_m3", True),
    "outflow_volume": (units.VOLUME, "outflow_volume_m3", True),
    "head_initial": (units.LENGTH, "head_initial_m", True),
    "head_final": (units.LENGTH, "head_final_m", True),
    "flow_rate": (units.FLOW_RATE, "flow_rate_m3_per_s", True),
    "temperature": (units.TEMPERATURE, "temperature_c", False),
}
READING_FIELDS: dict[str, tuple[units.Kind, str, bool]] = {
    "time": (units.TIME, "time_s", False),
    "head": (units.LENGTH, "head_m", True),
}
OPTION_QUANTITIES: dict[str, tuple[units.Kind, str, bool]] = {
    "reference_temperature": (units.TEMPERATURE, "reference_temperature_c", False),
    "viscosity": (units.VISCOSITY, "viscosity_pa_s", True),
    "unit_weight": (units.UNIT_WEIGHT, "unit_weight_n_per_m3", True),
}
ALL_QUANTITY_FIELDS = {
    **SPECIMEN_FIELDS,
    **APPARATUS_FIELDS,
    **TRIAL_FIELDS,
    **READING_FIELDS,
    **OPTION_QUANTITIES,
}

METHOD_TRIAL_KEYS = {
    "constant_head": {
        "volume",
        "water_mass",
        "inflow_volume",
        "outflow_volume",
        "duration",
        "head_difference",
        "pressure_difference",
        "temperature",
    },
    "falling_head": {
        "head_initial",
        "head_final",
        "duration",
        "temperature",
        "inflow_volume",
        "outflow_volume",
        "readings",
    },
    "falling_head_rising_tail": {
        "head_initial",
        "head_final",
        "duration",
        "temperature",
        "inflow_volume",
        "outflow_volume",
        "readings",
    },
    "constant_rate": {
        "flow_rate",
        "pressure_difference",
        "head_difference",
        "temperature",
        "inflow_volume",
        "outflow_volume",
    },
}
CORRECTIONS = ("iapws", "astm_d5084")
DENSITY_CONVENTIONS = ("temperature", "nominal")


class _Reader:
    """Collects problems while reading sections of the payload."""

    def __init__(self, default_uncertainties: Mapping[str, Any] | None) -> None:
        self.problems: list[InputProblem] = []
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

    def section(self, raw: Any, loc: Loc, allowed: set[str] | tuple[str, ...]) -> dict[str, Any]:
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
    ) -> tuple[float, float | None] | None:
        if name not in data:
            return None
        kind, _, positive = table[name]
        try:
            return units.parse_quantity(
                data[name], kind, (*loc, name), positive=positive, default_u=self.default_u(name)
            )
        except EngineInputError as exc:
            self.problems.extend(exc.problems)
            return None

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


def _one_of(
    reader: _Reader,
    data: Mapping[str, Any],
    loc: Loc,
    names: tuple[str, str],
    table: Mapping[str, tuple[units.Kind, str, bool]],
) -> tuple[str, tuple[float, float | None]] | None:
    present = [n for n in names if n in data]
    if len(present) == 2:
        reader.add(
            (*loc, names[1]),
            data[names[1]],
            f"either {names[0]} or {names[1]}, not both",
            f"both {names[0]} and {names[1]} were given",
            "ambiguous",
        )
        return None
    if not present:
        return None
    got = reader.quantity(data, present[0], loc, table)
    return (present[0], got) if got is not None else None


def _read_specimen(reader: _Reader, raw: Any) -> tuple[dict[str, Any], dict[str, float]]:
    loc: Loc = ("specimen",)
    data = reader.section(raw, loc, (*SPECIMEN_FIELDS, "stiff_material"))
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
    size = _one_of(reader, data, loc, ("diameter", "area"), SPECIMEN_FIELDS)
    if size is not None:
        name, (value, u_value) = size
        if name == "diameter":
            values["diameter_m"] = value
            values["area_m2"] = cylinder_area(value)
            if u_value is not None:
                u["area_m2"] = 2.0 * values["area_m2"] * u_value / value
        else:
            values["area_m2"] = value
            if u_value is not None:
                u["area_m2"] = u_value
    elif "diameter" not in data and "area" not in data:
        reader.add(
            (*loc, "diameter"),
            None,
            "a diameter such as '7.1 cm', or an area",
            "is required",
            "missing",
        )
    w = values.get("water_content")
    if w is not None and w > 10.0:
        reader.add(
            (*loc, "water_content"),
            data["water_content"],
            "a fraction such as 0.224 or a percentage such as '22.4 %'",
            "is above 1000 %: a percentage needs its '%' sign",
            "out_of_range",
        )
    gs = values.get("specific_gravity")
    if gs is not None and not 1.0 < gs <= 6.0:
        reader.add(
            (*loc, "specific_gravity"),
            data["specific_gravity"],
            "a number above 1 and at most 6, such as 2.70",
            "is not a plausible specific gravity of solids",
            "out_of_range",
        )
    r = values.get("retained_on_lower_sieve")
    if r is not None and r > 1.0:
        reader.add(
            (*loc, "retained_on_lower_sieve"),
            data["retained_on_lower_sieve"],
            "a percentage from 0 to 100 %, such as '40 %'",
            "is above 100 %",
            "out_of_range",
        )
    stiff = data.get("stiff_material", False)
    if not isinstance(stiff, bool):
        reader.add((*loc, "stiff_material"), stiff, "true or false", "is not a boolean", "bad_type")
        stiff = False
    values["stiff_material"] = stiff
    return values, u


def _read_apparatus(reader: _Reader, raw: Any) -> Apparatus:
    loc: Loc = ("apparatus",)
    data = reader.section(raw, loc, tuple(APPARATUS_FIELDS))
    values: dict[str, float] = {}
    u: dict[str, float] = {}
    for base in ("standpipe", "headwater", "tailwater"):
        size = _one_of(reader, data, loc, (f"{base}_area", f"{base}_diameter"), APPARATUS_FIELDS)
        if size is None:
            continue
        name, (value, u_value) = size
        key = f"{base}_area_m2"
        if name.endswith("diameter"):
            values[key] = cylinder_area(value)
            if u_value is not None:
                u[key] = 2.0 * values[key] * u_value / value
        else:
            values[key] = value
            if u_value is not None:
                u[key] = u_value
    got = reader.quantity(data, "manometer_spacing", loc, APPARATUS_FIELDS)
    if got is not None:
        values["manometer_spacing_m"] = got[0]
        if got[1] is not None:
            u["manometer_spacing_m"] = got[1]
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
    for j, item in enumerate(raw):
        loc: Loc = ("saturation", j)
        data = reader.section(item, loc, ("back_pressure", "b_value"))
        back = None
        if "back_pressure" in data:
            try:
                back = units.parse_quantity(
                    data["back_pressure"], units.PRESSURE, (*loc, "back_pressure"), positive=False
                )[0]
            except EngineInputError as exc:
                reader.problems.extend(exc.problems)
        if "b_value" not in data:
            reader.add(
                (*loc, "b_value"),
                None,
                "a B-value from 0 to 1.1, such as 0.96",
                "is required",
                "missing",
            )
            continue
        try:
            b = units.parse_quantity(
                data["b_value"], units.NUMBER, (*loc, "b_value"), positive=False
            )[0]
        except EngineInputError as exc:
            reader.problems.extend(exc.problems)
            continue
        if not 0.0 <= b <= 1.1:
            reader.add(
                (*loc, "b_value"),
                data["b_value"],
                "a B-value from 0 to 1.1, such as 0.96",
                "is out of range",
                "out_of_range",
            )
            continue
        steps.append(SaturationStep(b_value=b, back_pressure_pa=back))
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


def _read_trial(reader: _Reader, raw: Any, j: int, method: str, options: Options) -> Trial | None:
    loc: Loc = ("trials", j)
    allowed = METHOD_TRIAL_KEYS.get(method, set().union(*METHOD_TRIAL_KEYS.values()))
    if isinstance(raw, Mapping):
        for key in raw:
            known = key in TRIAL_FIELDS or key == "readings"
            if known and key not in allowed and raw[key] is not None:
                reader.add(
                    (*loc, key),
                    raw[key],
                    "for method " + method + ": " + ", ".join(sorted(allowed)),
                    f"is not used by method '{method}'",
                    "unknown_field",
                )
    data = reader.section(raw, loc, set(TRIAL_FIELDS) | {"readings"})
    data = {k: v for k, v in data.items() if k in allowed}
    before = len(reader.problems)
    values: dict[str, Any] = {}
    u: dict[str, float] = {}
    for name, (_, field_name, _) in TRIAL_FIELDS.items():
        got = reader.quantity(data, name, loc, TRIAL_FIELDS)
        if got is not None:
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

    def need(name: str, example: str) -> None:
        if name not in data:
            reader.add((*loc, name), None, example, f"is required for method '{method}'", "missing")

    def exactly_one(names: tuple[str, ...], accepted: str) -> None:
        present = [n for n in names if n in data]
        if not present:
            reader.add(
                (*loc, names[0]), None, accepted, f"is required for method '{method}'", "missing"
            )
        elif len(present) > 1:
            reader.add(
                (*loc, present[1]),
                data[present[1]],
                accepted,
                f"{present[0]} was also given",
                "ambiguous",
            )

    if method == "constant_head":
        need("duration", "a duration such as '120 s'")
        exactly_one(
            ("head_difference", "pressure_difference"),
            "one of head_difference (a length) or pressure_difference",
        )
        if "volume" in data and "water_mass" in data:
            reader.add(
                (*loc, "water_mass"),
                data["water_mass"],
                "either volume or water_mass",
                "volume was also given",
                "ambiguous",
            )
        if not ({"volume", "water_mass"} & set(data)) and not {
            "inflow_volume",
            "outflow_volume",
        } <= set(data):
            reader.add(
                (*loc, "volume"),
                None,
                "volume, water_mass, or both inflow_volume and outflow_volume",
                "is required for method 'constant_head'",
                "missing",
            )
    elif method == "constant_rate":
        need("flow_rate", "a flow rate such as '0.5 mL/min'")
        exactly_one(
            ("pressure_difference", "head_difference"),
            "one of pressure_difference or head_difference (a length)",
        )
    elif method in ("falling_head", "falling_head_rising_tail"):
        if "readings" in data:
            for name in ("head_initial", "head_final", "duration"):
                if name in data:
                    reader.add(
                        (*loc, name),
                        data[name],
                        "either readings or head_initial/head_final/duration",
                        "cannot be combined with readings",
                        "ambiguous",
                    )
            readings = _read_readings(reader, data["readings"], (*loc, "readings"))
            values["readings"] = readings
        else:
            need("head_initial", "a head difference such as '100 cm'")
            need("duration", "a duration such as '3600 s'")
            if "head_final" not in data and not (
                method == "falling_head_rising_tail"
                and {"inflow_volume", "outflow_volume"} <= set(data)
            ):
                accepted = "a head difference such as '70 cm'" + (
                    ", or inflow_volume and outflow_volume"
                    if method == "falling_head_rising_tail"
                    else ""
                )
                reader.add(
                    (*loc, "head_final"),
                    None,
                    accepted,
                    f"is required for method '{method}'",
                    "missing",
                )
            h1 = values.get("head_initial_m")
            h2 = values.get("head_final_m")
            if h1 is not None and h2 is not None and h2 >= h1:
                reader.add(
                    (*loc, "head_final"),
                    data["head_final"],
                    f"a head below head_initial ({data['head_initial']})",
                    "is not below head_initial: the head did not fall",
                    "impossible_test",
                )
    if len(reader.problems) > before:
        return None
    return Trial(**values, u=u)


def parse_request(
    payload: Mapping[str, Any], default_uncertainties: Mapping[str, Any] | None = None
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
    for key in payload:
        if key not in TOP_KEYS:
            reader.add(
                (key,),
                payload[key],
                "one of: " + ", ".join(TOP_KEYS),
                "is not a field of the request",
                "unknown_field",
            )
    method = payload.get("method")
    if method not in METHODS:
        reader.add(
            ("method",),
            method,
            "one of " + ", ".join(METHODS),
            "is not a known method",
            "bad_choice",
        )
        method = None
    standard = payload.get("standard")
    if standard is not None and standard not in STANDARDS:
        reader.add(
            ("standard",),
            standard,
            "one of " + ", ".join(STANDARDS) + " or null",
            "is not a known standard",
            "bad_choice",
        )
        standard = None
    options = _read_options(reader, payload.get("options"))
    spec_values, spec_u = _read_specimen(reader, payload.get("specimen"))
    apparatus = _read_apparatus(reader, payload.get("apparatus"))
    saturation = _read_saturation(reader, payload.get("saturation"))
    spec = reader.section(
        payload.get("specification"), ("specification",), ("k_max", "decision_rule")
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
            "a length such as '11.6 cm' (or apparatus.manometer_spacing)",
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
    if method == "falling_head" and apparatus.standpipe_area_m2 is None:
        reader.add(
            ("apparatus", "standpipe_area"),
            None,
            "an area such as '0.283 cm**2', or standpipe_diameter",
            "is required for method 'falling_head'",
            "missing",
        )
    if method == "falling_head_rising_tail":
        for base in ("headwater", "tailwater"):
            if getattr(apparatus, f"{base}_area_m2") is None:
                reader.add(
                    ("apparatus", f"{base}_area"),
                    None,
                    f"an area such as '0.71 cm**2', or {base}_diameter",
                    "is required for method 'falling_head_rising_tail'",
                    "missing",
                )

    if not reader.problems:
        _check_possible(reader, method, spec_values, apparatus, trials, raw_trials, options)
    if reader.problems:
        raise EngineInputError(reader.problems)
    assert method is not None
    specimen = Specimen(**spec_values, u=spec_u)
    return ReductionInput(
        method=method,
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


def _check_possible(
    reader: _Reader,
    method: str | None,
    spec_values: Mapping[str, Any],
    apparatus: Apparatus,
    trials: list[Trial | None],
    raw_trials: Any,
    options: Options,
) -> None:
    """Refuse inputs that describe an impossible test or specimen."""
    if "area_m2" in spec_values:
        rho_w = water_density(20.0, options.water_density)
        try:
            phase_relations(
                area_m2=spec_values["area_m2"],
                length_m=spec_values.get("length_m"),
                wet_mass_kg=spec_values.get("wet_mass_kg"),
                water_content=spec_values.get("water_content"),
                specific_gravity=spec_values.get("specific_gravity"),
                max_dry_density_kg_per_m3=spec_values.get("max_dry_density_kg_per_m3"),
                void_ratio=spec_values.get("void_ratio"),
                water_density_kg_per_m3=rho_w,
            )
        except ValueError as exc:
            reader.add(
                ("specimen", "wet_mass"),
                None,
                "a wet mass, size, water content and G_s that leave voids",
                str(exc),
                "impossible_test",
            )
    if method != "falling_head_rising_tail":
        return
    a_in, a_out = apparatus.headwater_area_m2, apparatus.tailwater_area_m2
    for j, trial in enumerate(trials):
        if trial is None or trial.readings is not None or trial.head_final_m is not None:
            continue
        if trial.head_initial_m is None or a_in is None or a_out is None:
            continue
        h2 = rising_tail_final_head(
            trial.head_initial_m,
            trial.inflow_volume_m3 or 0.0,
            trial.outflow_volume_m3 or 0.0,
            a_in,
            a_out,
        )
        if not (h2 > 0.0 and math.isfinite(h2)):
            reader.add(
                ("trials", j, "inflow_volume"),
                raw_trials[j].get("inflow_volume"),
                "burette volumes that leave a positive head: V_in/a_in + V_out/a_out below "
                "head_initial",
                f"with outflow_volume they imply a final head of {h2 * 100:.2f} cm",
                "impossible_test",
            )
