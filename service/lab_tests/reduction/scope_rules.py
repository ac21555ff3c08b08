"""The door's rules: the engine's rule book built from the laboratory's accredited scope, and
the engine's figures in words (decision rule, coverage factor).
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Any

from sqlmodel import Session, col, select

from service.engine import (
    BUILT_IN,
    RuleBook,
)
from service.engine.rules import DECISION_RULES, GUARD_BAND, STANDARDS
from service.scope.models import ScopeVersion

CURRENT = "current"  # reduce under the laboratory's scope as it stands now


# --- the laboratory's rules -------------------------------------------------------------------

# Notes on how a limit is known belong in docs/methods.md and the code, never in a text a
# user reads; should one reach a check's message or source it is taken out here.
_INTERNAL_NOTES = re.compile(
    r"\s*(\[from memory[^\]]*\]|\((?:common practice, )?no source\)|\(read\)|"
    r"\(from memory[^)]*\)|\(common practice\))",
    re.IGNORECASE,
)


def for_users(result: dict[str, Any]) -> dict[str, Any]:
    """The engine's result with every check's message and source free of internal notes."""
    for check in result.get("checks", []):
        for key in ("message", "source"):
            if isinstance(check.get(key), str):
                check[key] = _INTERNAL_NOTES.sub("", check[key])
    return result


@dataclass(frozen=True)
class LimitInfo:
    """One limit of a built-in rule, for the scope page (never how it is known)."""

    id: str
    label: str
    unit: str
    value: float


@dataclass(frozen=True)
class RuleInfo:
    """One built-in rule of a standard: the check it drives, its source and its limits."""

    id: str
    source: str
    limits: tuple[LimitInfo, ...]


@dataclass(frozen=True)
class StandardRules:
    """A standard's built-in defaults and rules, as the scope page offers them to confirm."""

    standard: str
    reference_temperature_c: float
    decision_rule: str
    determinations: int
    rules: tuple[RuleInfo, ...]


def built_in_rules() -> tuple[StandardRules, ...]:
    """The engine's own defaults and rules of each standard, in the catalogue's order."""
    out = []
    for standard in STANDARDS:
        rule_set = BUILT_IN.for_standard(standard)
        out.append(
            StandardRules(
                standard=standard,
                reference_temperature_c=rule_set.reference_temperature_c,
                decision_rule=rule_set.decision_rule,
                determinations=rule_set.determinations,
                rules=tuple(
                    RuleInfo(
                        rule.id,
                        rule.source,
                        tuple(LimitInfo(i.id, i.label, i.unit, i.value) for i in rule.limits),
                    )
                    for rule in sorted(rule_set.rules.values(), key=lambda r: r.id)
                ),
            )
        )
    return tuple(out)


def rule_book(snapshot: Mapping[str, Any] | None, number: int | None) -> RuleBook:
    """The engine's rules under a version of the laboratory's scope (its ``snapshot``).

    A standard's defaults (edition, reference temperature, decision rule, number of
    determinations) replace the built-in ones; a confirmed rule takes the laboratory's limit
    values and its source becomes the edition and clause as the laboratory reads them. No
    scope yet (``number`` None): the engine's built-in book.
    """
    if snapshot is None or number is None:
        return BUILT_IN
    version = f"laboratory scope {number}"
    book = RuleBook(version=version, sets=dict(BUILT_IN.sets))
    for standard, info in snapshot.get("standards", {}).items():
        if standard not in book.sets:
            continue
        changes: dict[str, Any] = {"edition": info.get("edition") or None}
        if info.get("reference_temperature_c") is not None:
            changes["reference_temperature_c"] = float(info["reference_temperature_c"])
        if info.get("decision_rule") in DECISION_RULES:
            changes["decision_rule"] = info["decision_rule"]
        if info.get("determinations"):
            changes["determinations"] = int(info["determinations"])
        book = book.with_set(replace(book.sets[standard], **changes), version=version)
    for standard, rules in snapshot.get("rules", {}).items():
        rule_set = book.sets.get(standard)
        for rule_id, info in rules.items():
            if rule_set is None or rule_id not in rule_set.rules or not info.get("confirmed"):
                continue
            known = {item.id for item in rule_set.rules[rule_id].limits}
            for limit_id, value in (info.get("limits") or {}).items():
                if limit_id in known and value is not None:
                    book = book.with_limit(
                        standard, rule_id, limit_id, float(value), version=version
                    )
            book = book.confirmed(standard, rule_id, _lab_source(standard, info), version=version)
            rule_set = book.sets[standard]
    return book


def _lab_source(standard: str, info: Mapping[str, Any]) -> str:
    edition = str(info.get("edition") or "").strip()
    clause = str(info.get("clause") or "").strip()
    named = (
        f"{standard}:{edition}"
        if edition and not edition.startswith(standard)
        else (edition or standard)
    )
    return f"{named}, {clause}" if clause else named


def scope_rules(
    session: Session | None, version: int | str | None = CURRENT
) -> tuple[RuleBook, int | None]:
    """(the rule book, its scope version number): the scope as it stands (``CURRENT``), a
    given version, or the built-in rules (None, or no session)."""
    if session is None or version is None:
        return BUILT_IN, None
    query = select(ScopeVersion)
    if version == CURRENT:
        query = query.order_by(col(ScopeVersion.number).desc()).limit(1)
    else:
        query = query.where(ScopeVersion.number == version)
    found = session.exec(query).first()
    if found is None:
        return BUILT_IN, None
    return rule_book(found.snapshot, found.number), found.number


# --- the engine's figures in words ------------------------------------------------------------

DECISION_RULE_WORDS = {
    "simple": "simple acceptance (ILAC-G8:09/2019, guard band w = 0): the result complies "
    "when k is at or below the limit",
    GUARD_BAND: "guarded acceptance (ILAC-G8:09/2019, guard band w = U): the result complies "
    "when k + U is at or below the limit and fails when k − U is above it",
}


def decision_rule_words(result: Mapping[str, Any] | None) -> str:
    """The decision rule a result was judged by, in words (simple acceptance by default)."""
    rule = ((result or {}).get("result") or {}).get("decision_rule") or "simple"
    return DECISION_RULE_WORDS.get(str(rule), str(rule))


def coverage_words(result: Mapping[str, Any] | None) -> str:
    """The coverage factor and its effective degrees of freedom as the engine returned them:
    "k = 2.87, ν_eff = 3.0"; "" when the result states no uncertainty."""
    summary = (result or {}).get("result") or {}
    factor = summary.get("coverage_factor")
    if factor is None:
        return ""
    nu = summary.get("effective_degrees_of_freedom")
    freedom = "ν_eff = ∞" if nu is None else f"ν_eff = {nu:.1f}"
    return f"k = {factor:.2f}, {freedom}"
