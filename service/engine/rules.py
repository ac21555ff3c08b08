"""Rule sets: for each standard, the limits its acceptance checks apply and where they come from.

A :class:`RuleBook` holds one :class:`RuleSet` per standard (and one for a test run under no
standard). Each rule set states its reference temperature, its default decision rule, the
number of determinations it needs and, for each check it drives, a :class:`Rule` with its
numeric :class:`Limit` values, the source users see, and whether the laboratory has confirmed
the limits against its own copy of the standard. ``BUILT_IN`` is the engine's own book; a
laboratory's accredited scope passes its own book (same shape, its confirmed values and
version) to :func:`service.engine.pipeline.reduce`.

Every limit carries a provenance tag (``read``, ``memory``, ``practice``; docs/methods.md §7.1):
it is for this module and the methods document only and never appears in a message or a source
text a user sees.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field, replace
from typing import Literal

Provenance = Literal["read", "memory", "practice"]
Failure = Literal["fail", "warn"]
Permeameter = Literal["flexible_wall", "rigid_wall"]

READ: Provenance = "read"
MEMORY: Provenance = "memory"
PRACTICE: Provenance = "practice"

D5084 = "ASTM D5084"
D2434 = "ASTM D2434"
D5856 = "ASTM D5856"
ISO = "ISO 17892-11"
STANDARDS = (D5084, D2434, D5856, ISO)

SIMPLE = "simple"
GUARD_BAND = "guard_band"
DECISION_RULES = (SIMPLE, GUARD_BAND)

FLEXIBLE_WALL: Permeameter = "flexible_wall"
RIGID_WALL: Permeameter = "rigid_wall"
PERMEAMETERS = (FLEXIBLE_WALL, RIGID_WALL)

BUILT_IN_VERSION = "built-in 1.1.0"


@dataclass(frozen=True, slots=True)
class Limit:
    """One numeric limit of a rule.

    Attributes
    ----------
    id : str
        Identifier within its rule, e.g. ``"band"``.
    value : float
        The limit in the SI unit ``unit`` (fractions as fractions, 0.25 for 25 %).
    unit : str
        SI unit of ``value`` as pint writes it (``"m"``, ``"m/s"``, ``""`` for a number).
    label : str
        What the limit is, in plain words, for the laboratory's scope page.
    provenance : {"read", "memory", "practice"}
        How the value is known (docs/methods.md §7.1); never shown to users.
    """

    id: str
    value: float
    unit: str
    label: str
    provenance: Provenance


@dataclass(frozen=True, slots=True)
class Rule:
    """The limits one check applies under one rule set.

    Attributes
    ----------
    id : str
        The id of the check the rule drives (``"steady_state"``).
    source : str
        The document and clause users see beside the check, e.g.
        ``"ASTM D5084, termination criteria"``; no internal notes.
    limits : tuple of Limit
        The rule's numeric limits.
    failure : {"fail", "warn"}
        Status of the check when the rule is not met.
    confirmed : bool
        True when the laboratory has confirmed the limits against its own copy of the
        standard (docs/methods.md §7.1); the built-in rules are never confirmed.
    """

    id: str
    source: str
    limits: tuple[Limit, ...]
    failure: Failure = "fail"
    confirmed: bool = False

    def limit(self, limit_id: str) -> Limit:
        """Return the limit with ``limit_id``.

        Raises
        ------
        KeyError
            When the rule has no such limit.
        """
        for item in self.limits:
            if item.id == limit_id:
                return item
        raise KeyError(f"rule {self.id} has no limit {limit_id}")

    def value(self, limit_id: str) -> float:
        """Return the value of the limit ``limit_id`` in its SI unit."""
        return self.limit(limit_id).value


@dataclass(frozen=True, slots=True)
class RuleSet:
    """The rules of one standard (or of a test run under no standard).

    Attributes
    ----------
    standard : str or None
        ``"ASTM D5084"`` etc.; None for a test that names no standard.
    edition : str or None
        The edition the limits are taken from, when known (the built-in set names none).
    reference_temperature_c : float
        Temperature k is corrected to when the request names none [°C] (docs/methods.md §4.5).
    decision_rule : {"simple", "guard_band"}
        Decision rule for the specification limit when the request names none (§9).
    determinations : int
        Number of determinations the standard asks for; 1 when it fixes none.
    representative : {"last", "all"}
        ``last``: the representative k is the mean of the last ``determinations`` trials;
        ``all``: the mean of every trial (§7.2).
    permeameter : {"flexible_wall", "rigid_wall"} or None
        Kind of permeameter the standard describes, assumed when the request names none.
    rules : mapping of str to Rule
        Rules by check id; a check with no rule here is not applicable under this set.
    reference_temperature_provenance : {"read", "memory", "practice"}
        How the reference temperature is known; never shown to users.
    """

    standard: str | None
    edition: str | None
    reference_temperature_c: float
    decision_rule: str
    determinations: int
    representative: Literal["last", "all"]
    permeameter: Permeameter | None
    rules: Mapping[str, Rule]
    reference_temperature_provenance: Provenance = PRACTICE

    def rule(self, check_id: str) -> Rule | None:
        """Return the rule that drives ``check_id``, or None when this set has none."""
        return self.rules.get(check_id)


@dataclass(frozen=True, slots=True)
class RuleBook:
    """Every rule set a reduction may use, with the version a result records.

    Attributes
    ----------
    version : str
        Identifies this book; stored with every result reduced under it.
    sets : mapping of str or None to RuleSet
        One rule set per standard; the key None holds the set for no standard.
    """

    version: str
    sets: Mapping[str | None, RuleSet] = field(default_factory=dict)

    def for_standard(self, standard: str | None) -> RuleSet:
        """Return the rule set of ``standard`` (the no-standard set when the book has none)."""
        found = self.sets.get(standard)
        if found is None:
            found = self.sets[None]
        return found

    def with_limit(
        self, standard: str | None, rule_id: str, limit_id: str, value: float, *, version: str
    ) -> RuleBook:
        """Return a copy of the book with one limit changed, under a new version.

        This is how a laboratory's confirmed value replaces a built-in one; the rule stays
        unconfirmed until :meth:`confirmed` marks it.
        """
        rule_set = self.for_standard(standard)
        rule = rule_set.rules[rule_id]
        limits = tuple(
            replace(item, value=value) if item.id == limit_id else item for item in rule.limits
        )
        rule.limit(limit_id)  # refuses an unknown limit id
        return self._with_rule(rule_set, replace(rule, limits=limits), version)

    def confirmed(
        self, standard: str | None, rule_id: str, source: str | None = None, *, version: str
    ) -> RuleBook:
        """Return a copy of the book with one rule marked confirmed by the laboratory.

        ``source``, when given, replaces the rule's source text with the edition and clause as
        the laboratory reads them.
        """
        rule_set = self.for_standard(standard)
        rule = rule_set.rules[rule_id]
        changed = replace(rule, confirmed=True, source=source if source else rule.source)
        return self._with_rule(rule_set, changed, version)

    def with_set(self, rule_set: RuleSet, *, version: str) -> RuleBook:
        """Return a copy of the book with ``rule_set`` in place of its standard's set.

        For a laboratory's own defaults (edition, reference temperature, decision rule,
        number of determinations): ``book.with_set(replace(old, decision_rule="guard_band"),
        version=...)``.
        """
        return RuleBook(version=version, sets={**self.sets, rule_set.standard: rule_set})

    def _with_rule(self, rule_set: RuleSet, rule: Rule, version: str) -> RuleBook:
        new_set = replace(rule_set, rules={**rule_set.rules, rule.id: rule})
        return self.with_set(new_set, version=version)


def _rules(*rules: Rule) -> dict[str, Rule]:
    return {r.id: r for r in rules}


def _limits(*items: tuple[str, float, str, str, Provenance]) -> tuple[Limit, ...]:
    return tuple(Limit(*item) for item in items)


def _restated(
    rule: Rule, source: str, provenance: Provenance | None = None, failure: Failure = "fail"
) -> Rule:
    """Return a general rule as a standard states it: its source, status and provenance."""
    limits = rule.limits
    if provenance is not None:
        limits = tuple(replace(item, provenance=provenance) for item in limits)
    return replace(rule, source=source, limits=limits, failure=failure)


# --- rules every set shares (docs/methods.md §8) -------------------------------------------

LAMINAR_FLOW = Rule(
    "laminar_flow",
    "Validity of Darcy's law: Bear (1972), Dynamics of Fluids in Porous Media; "
    "Freeze & Cherry (1979), Groundwater",
    _limits(
        ("warn_from", 1.0, "", "Reynolds number from which Darcy's law may fail", MEMORY),
        ("fail_from", 10.0, "", "Reynolds number from which flow is not laminar", PRACTICE),
    ),
)
HAZEN = Rule(
    "hazen",
    "Hazen's formula: Carrier (2003), J. Geotech. Geoenviron. Eng. 129(11)",
    _limits(
        ("d10_min", 0.1e-3, "m", "Smallest D10 Hazen's formula applies to", READ),
        ("d10_max", 3.0e-3, "m", "Largest D10 Hazen's formula applies to", READ),
        ("ratio_low", 0.1, "", "Lowest plausible ratio of measured k to Hazen's k", PRACTICE),
        ("ratio_high", 10.0, "", "Highest plausible ratio of measured k to Hazen's k", PRACTICE),
    ),
    failure="warn",
)
DARCY_LINEARITY = Rule(
    "darcy_linearity",
    "ASTM D5856, validity of Darcy's law (k at three gradients)",
    _limits(
        ("spread", 0.25, "", "Largest difference of k between gradients, from their mean", READ),
        ("gradients", 3.0, "", "Number of gradients that confirm linearity", READ),
        ("fall", 0.10, "", "Fall of k from the lowest to the highest gradient", PRACTICE),
    ),
)
HEAD_CHANGE = Rule(
    "head_change",
    "ASTM D5856, accuracy of head loss measurement",
    _limits(
        ("max_head_term", 0.05, "", "Largest head term of the uncertainty of k", READ),
        ("default_resolution", 1.0e-3, "m", "Head reading resolution when none is given", PRACTICE),
    ),
    failure="warn",
)
PHASE_RELATIONS = Rule(
    "phase_relations",
    "Specimen phase relations (degree of saturation, void ratio)",
    _limits(
        (
            "tolerance_without_u",
            0.02,
            "",
            "Excess of the degree of saturation over 100 % accepted when no input has a "
            "stated uncertainty",
            PRACTICE,
        ),
        ("coverage", 2.0, "", "Coverage factor on the uncertainty of S", PRACTICE),
    ),
    failure="warn",
)
TREND = Rule(
    "trend",
    "Trend of k over the determinations (t-test on the slope)",
    _limits(
        ("significance", 0.05, "", "Two-sided significance level of the slope test", PRACTICE),
        ("max_change", 0.10, "", "Largest fitted change of k over the determinations", PRACTICE),
    ),
    failure="warn",
)
FLOW_RATIO = Rule(
    "flow_ratio",
    "Outflow/inflow balance",
    _limits(
        ("low", 0.75, "", "Lowest outflow/inflow ratio", PRACTICE),
        ("high", 1.25, "", "Highest outflow/inflow ratio", PRACTICE),
    ),
    failure="warn",
)
STEADY_STATE = Rule(
    "steady_state",
    "Repeatability of the determinations",
    _limits(("band", 0.25, "", "Largest deviation of a determination from the mean", PRACTICE)),
    failure="warn",
)
SATURATION = Rule(
    "saturation",
    "Saturation (B-value) criterion of ASTM D5084",
    _limits(
        ("b_min", 0.95, "", "Smallest B-value that shows saturation", MEMORY),
        ("b_change", 0.01, "", "Change of B over the last step for a stiff material", PRACTICE),
    ),
    failure="warn",
)
GENERAL = (LAMINAR_FLOW, HAZEN, DARCY_LINEARITY, HEAD_CHANGE, PHASE_RELATIONS)


# --- ASTM D5084, flexible wall (docs/methods.md §7.2) ----------------------------------------

D5084_RULES = RuleSet(
    standard=D5084,
    edition=None,
    reference_temperature_c=20.0,
    reference_temperature_provenance=READ,
    decision_rule=SIMPLE,
    determinations=4,
    representative="last",
    permeameter=FLEXIBLE_WALL,
    rules=_rules(
        *GENERAL,
        Rule(
            "steady_state",
            "ASTM D5084, termination criteria (steady hydraulic conductivity)",
            _limits(
                ("band", 0.25, "", "Largest deviation of a determination from the mean", MEMORY),
                (
                    "band_low_k",
                    0.50,
                    "",
                    "Largest deviation from the mean for a low hydraulic conductivity",
                    MEMORY,
                ),
                ("low_k", 1e-10, "m/s", "Mean k below which the wider band applies", MEMORY),
            ),
        ),
        _restated(
            TREND,
            "ASTM D5084, termination criteria (no significant trend); t-test on the slope of k",
        ),
        _restated(FLOW_RATIO, "ASTM D5084, termination criteria (outflow/inflow ratio)", MEMORY),
        Rule(
            "gradient_limit",
            "ASTM D5084, recommended maximum hydraulic gradient",
            _limits(
                ("k_1", 1e-6, "m/s", "k from which the first row applies", MEMORY),
                ("gradient_1", 2.0, "", "Largest gradient, first row", MEMORY),
                ("k_2", 1e-7, "m/s", "k from which the second row applies", MEMORY),
                ("gradient_2", 5.0, "", "Largest gradient, second row", MEMORY),
                ("k_3", 1e-8, "m/s", "k from which the third row applies", MEMORY),
                ("gradient_3", 10.0, "", "Largest gradient, third row", MEMORY),
                ("k_4", 1e-9, "m/s", "k from which the fourth row applies", MEMORY),
                ("gradient_4", 20.0, "", "Largest gradient, fourth row", MEMORY),
                ("gradient_5", 30.0, "", "Largest gradient below the fourth row", MEMORY),
                ("k_max", 1e-5, "m/s", "Largest k the table covers", MEMORY),
            ),
            failure="warn",
        ),
        _restated(SATURATION, "ASTM D5084, saturation (B-value) criterion"),
        Rule(
            "specimen_size",
            "ASTM D5084, specimen dimensions",
            _limits(
                ("min_dimension", 0.025, "m", "Smallest diameter and height", MEMORY),
                ("min_ratio", 6.0, "", "Smallest diameter over largest particle", MEMORY),
            ),
        ),
        Rule(
            "temperature_range",
            "ASTM D5084, scope (test temperature)",
            _limits(
                ("low", 15.0, "degC", "Lowest test temperature", READ),
                ("high", 30.0, "degC", "Highest test temperature", READ),
            ),
            failure="warn",
        ),
        _restated(HEAD_CHANGE, "ASTM D5084, accuracy of head measurement", failure="warn"),
    ),
)

# --- ASTM D2434, rigid wall, constant head, granular (docs/methods.md §7.3) -----------------

D2434_RULES = RuleSet(
    standard=D2434,
    edition=None,
    reference_temperature_c=20.0,
    reference_temperature_provenance=MEMORY,
    decision_rule=SIMPLE,
    determinations=3,
    representative="all",
    permeameter=RIGID_WALL,
    rules=_rules(
        *GENERAL,
        _restated(
            STEADY_STATE,
            "ASTM D5856, agreement of k at three gradients, applied to ASTM D2434 runs",
        ),
        FLOW_RATIO,
        Rule(
            "gradient_limit",
            "ASTM D2434, note on gradients for laminar flow",
            _limits(("gradient_max", 0.5, "", "Largest gradient for laminar flow", MEMORY)),
            failure="warn",
        ),
        Rule(
            "specimen_size",
            "ASTM D2434, Table 1 (minimum permeameter diameter)",
            _limits(
                ("fine_sieve", 2.0e-3, "m", "Lower sieve of the first row", MEMORY),
                ("row1_max", 9.5e-3, "m", "Largest particle of the first row", MEMORY),
                ("row2_max", 19.0e-3, "m", "Largest particle of the second row", READ),
                ("retained", 0.35, "", "Retained fraction that selects the wider column", MEMORY),
                ("row1_narrow", 0.076, "m", "First row, less retained", MEMORY),
                ("row1_wide", 0.114, "m", "First row, more retained", MEMORY),
                ("row2_narrow", 0.152, "m", "Second row, less retained", MEMORY),
                ("row2_wide", 0.229, "m", "Second row, more retained", MEMORY),
            ),
        ),
        SATURATION,
    ),
)

# --- ASTM D5856, rigid wall, compaction mould (docs/methods.md §7.4) -------------------------

D5856_RULES = RuleSet(
    standard=D5856,
    edition=None,
    reference_temperature_c=20.0,
    reference_temperature_provenance=MEMORY,
    decision_rule=SIMPLE,
    determinations=3,
    representative="all",
    permeameter=RIGID_WALL,
    rules=_rules(
        *GENERAL,
        _restated(STEADY_STATE, "ASTM D5856, agreement of k at three gradients", READ),
        TREND,
        FLOW_RATIO,
        SATURATION,
    ),
)

# --- ISO 17892-11 (docs/methods.md §7.5) -------------------------------------------------------

ISO_RULES = RuleSet(
    standard=ISO,
    edition=None,
    reference_temperature_c=10.0,
    reference_temperature_provenance=MEMORY,
    decision_rule=SIMPLE,
    determinations=3,
    representative="all",
    permeameter=None,
    rules=_rules(
        *GENERAL,
        STEADY_STATE,
        TREND,
        FLOW_RATIO,
        _restated(
            SATURATION,
            "ISO 17892-11, saturation of the specimen in a flexible-wall cell (B-value)",
        ),
        Rule(
            "specimen_size",
            "ISO 17892-11, specimen size against the largest particle",
            _limits(("min_ratio", 6.0, "", "Smallest diameter over largest particle", MEMORY)),
        ),
    ),
)

# --- no standard named (docs/methods.md §7.6) --------------------------------------------------

NO_STANDARD_RULES = RuleSet(
    standard=None,
    edition=None,
    reference_temperature_c=20.0,
    reference_temperature_provenance=PRACTICE,
    decision_rule=SIMPLE,
    determinations=1,
    representative="all",
    permeameter=None,
    rules=_rules(*GENERAL, STEADY_STATE, TREND, FLOW_RATIO, SATURATION),
)


def book(version: str, sets: Iterable[RuleSet]) -> RuleBook:
    """Make a rule book of ``sets`` (keyed by their standard) under ``version``."""
    return RuleBook(version=version, sets={s.standard: s for s in sets})


BUILT_IN = book(
    BUILT_IN_VERSION, (D5084_RULES, D2434_RULES, D5856_RULES, ISO_RULES, NO_STANDARD_RULES)
)
"""The engine's own rules; the book :func:`~service.engine.pipeline.reduce` uses by default."""
