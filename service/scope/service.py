"""The laboratory's accredited scope: read it, change it (a new version, audited), and say
what it means for a test (which version judged it, whether it is inside the scope).

The rules themselves are the engine's (reached through the door,
:mod:`service.lab_tests.reduction`); the scope records what the laboratory has checked
against its own copy of each standard: the edition it works to, the defaults it uses, and
for each rule the limits as it reads them, with the clause, who confirmed them and when.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Annotated, Any

from pydantic import BaseModel, ConfigDict, Field
from sqlalchemy.exc import IntegrityError
from sqlmodel import Session, col, select

from service.accounts.models import User
from service.audit.service import apply_changes, record_created
from service.common import Role
from service.db import utcnow
from service.errors import FieldProblem, InvalidInput, PermissionDenied, StaleVersion
from service.lab_tests import reduction
from service.lab_tests.models import PermeabilityTest
from service.scope.models import ScopeRule, ScopeStandard, ScopeVersion

# What people read where a rule's limits are not yet the laboratory's own.
UNCONFIRMED = "limit not yet confirmed by the laboratory"
OUTSIDE = "outside the accredited scope"
CHECK_LABELS = {
    "steady_state": "Repeatability of determinations",
    "flow_ratio": "Outflow / inflow balance",
    "gradient_limit": "Hydraulic gradient",
    "saturation": "Saturation (B-value)",
    "specimen_size": "Specimen size",
    "laminar_flow": "Laminar flow",
    "temperature_range": "Test temperature",
    "specification": "Specification limit",
    "hazen": "Plausibility (Hazen)",
    "darcy_linearity": "Darcy linearity",
    "trend": "Trend of the determinations",
    "head_change": "Head change of each interval",
    "phase_relations": "Specimen phase relations",
}
DECISION_RULE_NAMES = {"simple": "Simple acceptance", "guard_band": "Guarded acceptance"}
REFERENCE_TEMPERATURES_C = (10.0, 20.0, 27.0)
EDITORS = (Role.ADMIN, Role.LAB_MANAGER)


def check_label(check_id: str) -> str:
    """A check's name for people."""
    return CHECK_LABELS.get(check_id, check_id.replace("_", " ").capitalize())


def source_words(check: Any) -> str:
    """A check's source as people read it: the document and clause, and, until the laboratory
    confirms the rule's limits, that they are not yet confirmed."""
    get = check.get if isinstance(check, dict) else lambda k, d=None: getattr(check, k, d)
    source = str(get("source", "") or "")
    if get("limit_confirmed", None) is False:
        return f"{source} · {UNCONFIRMED}" if source else UNCONFIRMED.capitalize()
    return source


def may_edit_scope(user: User) -> bool:
    return user.role in EDITORS


# --- requests ------------------------------------------------------------------------------


class StandardChange(BaseModel):
    """A standard the laboratory lists, its edition and defaults (None: the standard's own)."""

    model_config = ConfigDict(extra="forbid")
    standard: Annotated[str, Field(max_length=40)] = Field(description="e.g. 'ASTM D5084'")
    edition: Annotated[str, Field(max_length=40)] = Field(
        "", description="the edition the laboratory works to, e.g. 'D5084-16a'"
    )
    in_scope: bool = Field(True, description="the laboratory is accredited for it")
    reference_temperature_c: float | None = Field(None, description="10, 20 or 27 (°C)")
    decision_rule: str = Field("", description="'simple' or 'guard_band'; '' the standard's")
    determinations: int | None = Field(None, ge=1, le=20)


class RuleChange(BaseModel):
    """The laboratory's reading of one rule: confirmed limits (changed where it reads them
    differently), the edition and clause it read them in."""

    model_config = ConfigDict(extra="forbid")
    standard: Annotated[str, Field(max_length=40)]
    rule_id: Annotated[str, Field(max_length=40)]
    confirmed: bool = True
    edition: Annotated[str, Field(max_length=40)] = ""
    clause: Annotated[str, Field(max_length=120)] = ""
    limits: dict[str, float] = Field(
        default_factory=dict, description="limit id -> value in the limit's SI unit"
    )


class ScopeUpdate(BaseModel):
    """A change of the scope, made against the version read (0 when there is none yet)."""

    model_config = ConfigDict(extra="forbid")
    version: int = Field(ge=0, description="the scope version you read")
    note: Annotated[str, Field(max_length=500)] = ""
    standards: list[StandardChange] = Field(default_factory=list, max_length=20)
    rules: list[RuleChange] = Field(default_factory=list, max_length=200)


# --- reading -------------------------------------------------------------------------------


def latest(session: Session) -> ScopeVersion | None:
    return session.exec(
        select(ScopeVersion).order_by(col(ScopeVersion.number).desc()).limit(1)
    ).first()


def version_number(session: Session) -> int:
    found = latest(session)
    return found.number if found else 0


def snapshot(session: Session) -> dict[str, Any]:
    """The scope as it stands, in the shape a version stores."""
    standards = {
        row.standard: {
            "edition": row.edition,
            "in_scope": row.in_scope,
            "reference_temperature_c": row.reference_temperature_c,
            "decision_rule": row.decision_rule,
            "determinations": row.determinations,
        }
        for row in session.exec(select(ScopeStandard).order_by(col(ScopeStandard.standard)))
    }
    rules: dict[str, dict[str, Any]] = {}
    for rule in session.exec(select(ScopeRule).order_by(col(ScopeRule.id))):
        rules.setdefault(rule.standard, {})[rule.rule_id] = {
            "confirmed": rule.confirmed,
            "edition": rule.edition,
            "clause": rule.clause,
            "limits": dict(rule.limits),
            "confirmed_at": rule.confirmed_at.isoformat() if rule.confirmed_at else None,
            "confirmed_by_id": rule.confirmed_by_id,
        }
    return {"standards": standards, "rules": rules}


@dataclass(frozen=True)
class ScopeStatus:
    """What the scope says about one test: the version that judged it (or would), and
    whether its standard is inside the laboratory's accredited scope."""

    version: int | None
    in_scope: bool
    standard: str

    @property
    def rules_words(self) -> str:
        if self.version is None:
            return "the service's built-in rules (no laboratory scope recorded)"
        return f"laboratory scope version {self.version}"

    @property
    def status_words(self) -> str:
        if self.in_scope:
            return "within the accredited scope"
        return OUTSIDE


def scope_of_test(session: Session, test: PermeabilityTest, *, stored: bool = True) -> ScopeStatus:
    """The scope a test's stored result was judged by (``stored``), or the current one (a
    result worked out now)."""
    number = test.scope_version if stored else version_number(session) or None
    found = (
        session.exec(select(ScopeVersion).where(ScopeVersion.number == number)).first()
        if number is not None
        else None
    )
    info = (found.snapshot.get("standards", {}) if found else {}).get(test.standard or "")
    in_scope = bool(info and info.get("in_scope"))
    return ScopeStatus(version=number, in_scope=in_scope, standard=test.standard or "")


def view(session: Session) -> dict[str, Any]:
    """The scope for the page and the API: each standard with its defaults and each rule with
    the built-in limits beside the laboratory's, its status, edition, clause, who and when."""
    current = latest(session)
    stored = snapshot(session)
    people = {u.id: u.full_name for u in session.exec(select(User))}
    standards = []
    for built in reduction.built_in_rules():
        own = stored["standards"].get(built.standard, {})
        rules = []
        for rule in built.rules:
            lab = stored["rules"].get(built.standard, {}).get(rule.id, {})
            confirmed = bool(lab.get("confirmed"))
            limits = [
                {
                    "id": item.id,
                    "label": item.label,
                    "unit": item.unit,
                    "built_in": item.value,
                    "value": lab.get("limits", {}).get(item.id, item.value)
                    if confirmed
                    else item.value,
                }
                for item in rule.limits
            ]
            changed = confirmed and any(
                not math.isclose(float(x["value"]), float(x["built_in"]), rel_tol=1e-12)
                for x in limits
            )
            rules.append(
                {
                    "rule_id": rule.id,
                    "name": check_label(rule.id),
                    "source": rule.source,
                    "status": "changed" if changed else "confirmed" if confirmed else "unconfirmed",
                    "status_words": (
                        "changed by the laboratory"
                        if changed
                        else "confirmed by the laboratory"
                        if confirmed
                        else UNCONFIRMED
                    ),
                    "edition": lab.get("edition", ""),
                    "clause": lab.get("clause", ""),
                    "confirmed_by": people.get(lab.get("confirmed_by_id")) if confirmed else None,
                    "confirmed_at": lab.get("confirmed_at") if confirmed else None,
                    "limits": limits,
                }
            )
        standards.append(
            {
                "standard": built.standard,
                "listed": bool(own),
                "in_scope": bool(own.get("in_scope")),
                "edition": own.get("edition", ""),
                "reference_temperature_c": own.get("reference_temperature_c")
                or built.reference_temperature_c,
                "decision_rule": own.get("decision_rule") or built.decision_rule,
                "determinations": own.get("determinations") or built.determinations,
                "rules": rules,
            }
        )
    return {
        "version": current.number if current else 0,
        "changed_at": current.created_at.isoformat() if current else None,
        "changed_by": people.get(current.created_by_id) if current else None,
        "note": current.note if current else "",
        "standards": standards,
    }


# --- changing ------------------------------------------------------------------------------


def _check(data: ScopeUpdate) -> None:
    known = {s.standard: s for s in reduction.built_in_rules()}
    problems: list[FieldProblem] = []
    names = ", ".join(known)
    for i, item in enumerate(data.standards):
        where = ("standards", i)
        if item.standard not in known:
            problems.append(
                FieldProblem(
                    (*where, "standard"),
                    "is not a standard the service knows",
                    item.standard,
                    names,
                    label=f"Standard {i + 1}",
                )
            )
            continue
        if (
            item.reference_temperature_c is not None
            and item.reference_temperature_c not in REFERENCE_TEMPERATURES_C
        ):
            problems.append(
                FieldProblem(
                    (*where, "reference_temperature_c"),
                    "is not offered",
                    item.reference_temperature_c,
                    "10, 20 or 27 °C",
                    label=f"{item.standard} · Reference temperature",
                )
            )
        if item.decision_rule and item.decision_rule not in reduction.DECISION_RULES:
            problems.append(
                FieldProblem(
                    (*where, "decision_rule"),
                    "is not a decision rule",
                    item.decision_rule,
                    "simple or guarded acceptance",
                    label=f"{item.standard} · Decision rule",
                )
            )
    for i, change in enumerate(data.rules):
        where = ("rules", i)
        built = known.get(change.standard)
        rule = next((r for r in built.rules if r.id == change.rule_id), None) if built else None
        if rule is None:
            problems.append(
                FieldProblem(
                    (*where, "rule_id"),
                    "is not a rule of that standard",
                    f"{change.standard} {change.rule_id}",
                    "a rule listed on the scope page",
                    label=f"Rule {i + 1}",
                )
            )
            continue
        limits = {limit.id: limit for limit in rule.limits}
        for limit_id, value in change.limits.items():
            known_limit = limits.get(limit_id)
            name = f"{change.standard} · {check_label(rule.id)} · "
            if known_limit is None:
                problems.append(
                    FieldProblem(
                        (*where, "limits", limit_id),
                        "is not a limit of this rule",
                        limit_id,
                        ", ".join(limits),
                        label=name + limit_id,
                    )
                )
            elif not math.isfinite(value) or value <= 0:
                problems.append(
                    FieldProblem(
                        (*where, "limits", limit_id),
                        "must be a positive number",
                        value,
                        f"a positive number in {known_limit.unit or 'no unit'}",
                        label=name + known_limit.label,
                    )
                )
    if problems:
        raise InvalidInput(problems=problems)


def update_scope(session: Session, data: ScopeUpdate, *, actor: User) -> ScopeVersion | None:
    """Apply a change of the scope: each changed standard or rule audited (one row per
    record), and, when anything changed, a new scope version holding the whole scope.

    Refused with 409 when the scope changed since ``data.version`` was read; returns None
    when nothing changed."""
    if not may_edit_scope(actor):
        raise PermissionDenied("the accredited scope is kept by lab managers and admins")
    current = latest(session)
    number = current.number if current else 0
    if data.version != number:
        raise StaleVersion(
            f"the scope changed since you read it: you sent version {data.version}, it is now "
            f"version {number}; reload, compare, and send your change again",
            yours=data.model_dump(mode="json"),
            current=view(session),
        )
    _check(data)
    now = utcnow()
    changed = False
    for item in data.standards:
        values = item.model_dump(exclude={"standard"})
        row = session.exec(
            select(ScopeStandard).where(ScopeStandard.standard == item.standard)
        ).first()
        if row is None:
            row = ScopeStandard(
                standard=item.standard, **values, changed_at=now, changed_by_id=actor.id
            )
            session.add(row)
            session.flush()
            record_created(session, row, actor_id=actor.id)
            changed = True
        elif any(getattr(row, name) != value for name, value in values.items()):
            stamp = {"changed_at": now, "changed_by_id": actor.id}
            apply_changes(session, row, {**values, **stamp}, actor_id=actor.id)
            changed = True
    for change in data.rules:
        values = change.model_dump(exclude={"standard", "rule_id"})
        found = session.exec(
            select(ScopeRule).where(
                ScopeRule.standard == change.standard, ScopeRule.rule_id == change.rule_id
            )
        ).first()
        if found is None:
            if not change.confirmed:
                continue
            rule_row = ScopeRule(
                standard=change.standard,
                rule_id=change.rule_id,
                **values,
                confirmed_at=now,
                confirmed_by_id=actor.id,
            )
            session.add(rule_row)
            session.flush()
            record_created(session, rule_row, actor_id=actor.id)
            changed = True
        else:
            if any(getattr(found, name) != value for name, value in values.items()):
                stamp = {"confirmed_at": now, "confirmed_by_id": actor.id}
                apply_changes(session, found, {**values, **stamp}, actor_id=actor.id)
                changed = True
    if not changed:
        return None
    version = ScopeVersion(
        number=number + 1,
        note=data.note.strip(),
        created_by_id=actor.id,
        created_at=now,
        snapshot=snapshot(session),
    )
    try:
        with session.begin_nested():
            session.add(version)
            session.flush()
    except IntegrityError:
        raise StaleVersion(
            "the scope was changed by someone else at the same moment; reload and try again",
            yours=data.model_dump(mode="json"),
            current={"version": version_number(session)},
        ) from None
    record_created(session, version, actor_id=actor.id)
    return version


def default_reference_temperature(session: Session, standard: str | None) -> float | None:
    """The reference temperature the laboratory's scope sets for a standard (None: no scope
    recorded, so the request's own default stands)."""
    book, number = reduction.scope_rules(session)
    if number is None:
        return None
    return book.for_standard(standard or None).reference_temperature_c
