"""The certificate document: every figure and word a certificate shows, gathered from the
database into plain frozen dataclasses that the renderer turns into a PDF.

Nothing here is computed afresh: numbers come from the engine result stored when the test was
submitted (with its engine version), and typed entries are shown exactly as typed."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from sqlmodel import Session, col, select

from service.accounts.models import Organisation, User
from service.apparatus.models import Apparatus
from service.certificates.series import SeriesSection, build_series_sections
from service.common import CertificateKind, OrganisationKind, Preparation
from service.config import get_settings
from service.lab_tests.models import (
    PermeabilityTest,
    SaturationStep,
    Specimen,
    TestApparatus,
    Trial,
)
from service.lab_tests.reduction import Scope, catalogue, coverage_words, decision_rule_words
from service.projects.models import Location, Project
from service.samples.models import Sample
from service.scope.service import check_label, scope_of_test, source_words
from service.signoffs.models import SignOff

CAUTIONS = (
    "The results describe only the specimens tested, prepared and permeated under the "
    "conditions stated on this certificate.",
    "The hydraulic conductivity of the soil in the field can differ markedly (structure, "
    "fissures, layering, stress, scale and the permeant all matter).",
    "Use of these results in design is for a licensed engineer applying the local codes "
    "and regulations.",
    "This certificate may be reproduced only in full. Check that it is genuine and current "
    "with its verification code.",
)

PREPARATION_LABELS = {
    Preparation.INTACT: "Intact (trimmed from the sample)",
    Preparation.REMOULDED: "Remoulded",
    Preparation.COMPACTED: "Compacted to a target density",
}
SIGNOFF_LABELS = {
    "performed": "Performed",
    "reviewed": "Reviewed",
    "approved": "Approved",
    "issued": "Issued",
}


@dataclass(frozen=True)
class Party:
    name: str
    address: str = ""


@dataclass(frozen=True)
class SignOffLine:
    meaning: str  # performed | reviewed | approved | issued
    name: str
    role: str
    signed_at: datetime


@dataclass(frozen=True)
class CheckLine:
    check_id: str
    label: str
    status: str  # pass | warn | fail | not_applicable
    message: str
    source: str  # the document and clause, and "limit not yet confirmed ..." until it is
    confirmed: bool | None = None  # False: the laboratory has not confirmed the rule's limits


@dataclass(frozen=True)
class TrialLine:
    seq: int
    entries: str  # as typed
    temperature: str  # as typed
    gradient: float | None
    k_m_per_s: float | None
    k_ref_m_per_s: float | None
    used: bool
    excluded_reason: str = ""


@dataclass(frozen=True)
class TestSection:
    test_id: int
    series: int
    revision: int
    correction_reason: str
    method: str
    method_label: str
    standard: str
    permeant: str
    reference_temperature_c: float
    temperature_correction: str
    apparatus: tuple[str, ...]
    preparation: str
    specimen_description: str
    measured: tuple[tuple[str, str], ...]  # (label, value as typed)
    state: tuple[tuple[str, str], ...]  # (label, formatted derived value)
    conditions: tuple[tuple[str, str], ...]
    trials: tuple[TrialLine, ...]
    k_m_per_s: float | None  # mean at test temperature of the determinations used
    k_ref_m_per_s: float
    k_ref_cm_per_s: float | None
    k_ref_ft_per_day: float | None
    expanded_u_rel: float | None
    spec_limit_text: str
    spec_limit_m_per_s: float | None
    compliance: str  # complies | does_not_comply | no_limit
    compliance_text: str
    checks: tuple[CheckLine, ...]
    deviations: tuple[str, ...]
    signoffs: tuple[SignOffLine, ...]
    engine_version: str
    input_hash: str
    coverage: str = ""  # "k = 2.87, ν_eff = 3.0" as the engine returned them
    decision_rule: str = ""  # in words, with ILAC-G8
    rules_words: str = ""  # the version of the laboratory's scope that judged the result
    in_scope: bool = False  # the standard is within the laboratory's accredited scope

    @property
    def expanded_u_m_per_s(self) -> float | None:
        if self.expanded_u_rel is None:
            return None
        return self.expanded_u_rel * self.k_ref_m_per_s


@dataclass(frozen=True)
class SampleSection:
    sample_id: int
    lab_id: str
    client_sample_id: str
    location: str
    depth: str
    depth_top_m: float | None
    sample_type: str
    description: str
    condition: str
    received_at: datetime
    tests: tuple[TestSection, ...]


@dataclass(frozen=True)
class CertificateDocument:
    kind: str  # sample | project
    number: str
    revision: int
    verification_code: str
    verify_url: str
    issued_at: datetime
    issued_by: SignOffLine
    lab: Party
    client: Party
    project_number: str
    project_name: str
    site: str
    spec_text: str
    spec_source: str
    samples: tuple[SampleSection, ...]
    supersedes: str = ""  # "number rev n" of the certificate this one replaces
    supersede_reason: str = ""
    key_id: str = ""
    cautions: tuple[str, ...] = field(default=CAUTIONS)
    series: tuple[SeriesSection, ...] = ()  # compaction series (project summary only)

    @property
    def title(self) -> str:
        if self.kind == CertificateKind.PROJECT:
            return "Project summary of hydraulic conductivity tests"
        return "Certificate of hydraulic conductivity test"

    @property
    def tests(self) -> list[TestSection]:
        return [test for sample in self.samples for test in sample.tests]


def format_k(value: float | None) -> str:
    """Hydraulic conductivity as the certificate prints it: three significant figures."""
    return "-" if value is None else f"{value:.2E}"


def _quantity_text(raw: Any) -> str:
    if isinstance(raw, dict):
        text = f"{raw.get('value', '')} {raw.get('unit', '')}".strip()
        if raw.get("u") is not None:
            text += f" (u {raw['u']})"
        return text
    return str(raw)


def _entries_text(entries: dict[str, Any]) -> str:
    if "readings" in entries:
        readings = entries["readings"] or []
        first, last = (readings[0], readings[-1]) if readings else ({}, {})
        return (
            f"{len(readings)} readings, h {_quantity_text(first.get('head', ''))} -> "
            f"{_quantity_text(last.get('head', ''))} in {_quantity_text(last.get('time', ''))}"
        )
    parts = [
        f"{entry.symbol or entry.label} {_quantity_text(entries[entry.id])}"
        for entry in catalogue.entries(Scope.TRIAL)
        if entry.id in entries and entry.id != "temperature"
    ]
    return ", ".join(parts)


def _fmt(value: float | None, pattern: str, scale: float = 1.0, unit: str = "") -> str:
    if value is None:
        return "-"
    return f"{format(value * scale, pattern)}{(' ' + unit) if unit else ''}"


def _specimen_rows(
    specimen: Specimen | None, result: dict[str, Any]
) -> tuple[tuple[tuple[str, str], ...], tuple[tuple[str, str], ...]]:
    measured: list[tuple[str, str]] = []
    if specimen is not None:
        for entry in catalogue.entries(Scope.SPECIMEN):
            text = getattr(specimen, f"{entry.id}_text", "")
            if text:
                measured.append((entry.label, text))
        if specimen.specific_gravity is not None:
            gravity = catalogue.entry(Scope.SPECIMEN, "specific_gravity")
            measured.append((f"{gravity.label} {gravity.symbol}", f"{specimen.specific_gravity:g}"))
    derived = result.get("specimen", {}) or {}
    state: list[tuple[str, str]] = []
    for label, key, pattern, scale, unit in (
        ("Area", "area_m2", ".2f", 1e4, "cm2"),
        ("Bulk density", "bulk_density_kg_per_m3", ".0f", 1.0, "kg/m3"),
        ("Dry density", "dry_density_kg_per_m3", ".0f", 1.0, "kg/m3"),
        ("Void ratio", "void_ratio", ".3f", 1.0, ""),
        ("Porosity", "porosity", ".3f", 1.0, ""),
        ("Degree of saturation", "degree_of_saturation", ".1f", 100.0, "%"),
        ("Relative compaction", "relative_compaction_pct", ".1f", 1.0, "%"),
    ):
        value = derived.get(key)
        if value is not None:
            state.append((label, _fmt(value, pattern, scale, unit)))
    return tuple(measured), tuple(state)


def _conditions(
    test: PermeabilityTest, saturation: Sequence[SaturationStep]
) -> list[tuple[str, str]]:
    rows: list[tuple[str, str]] = []
    for name in ("cell_pressure", "back_pressure", "effective_confining"):
        text = getattr(test, f"{name}_text")
        if text:
            rows.append((catalogue.entry(Scope.TEST, name).label, text))
    if saturation:
        last = max(saturation, key=lambda step: step.seq)
        rows.append(("B-value (final step)", f"{last.b_value:.2f} at {last.back_pressure_text}"))
    return rows


def compliance_of(result: dict[str, Any], limit_text: str) -> tuple[str, str]:
    """('complies' | 'does_not_comply' | 'undecided' | 'no_limit', the sentence the
    certificate prints); 'undecided' under guarded acceptance when k is within U of the
    limit (ILAC-G8)."""
    check = next((c for c in result.get("checks", []) if c.get("id") == "specification"), None)
    if check is None or check.get("status") == "not_applicable" or not limit_text:
        return "no_limit", "No specification limit was stated for this test."
    k_ref = result["result"]["k_ref_m_per_s"]
    if check.get("status") == "pass":
        return "complies", (
            f"Complies: k20 = {format_k(k_ref)} m/s does not exceed the limit of {limit_text}."
        )
    if check.get("status") == "warn":  # guarded acceptance: within U of the limit
        return "undecided", (
            f"Not decidable at this uncertainty: k20 = {format_k(k_ref)} m/s is within its "
            f"expanded uncertainty of the limit of {limit_text}."
        )
    return "does_not_comply", (
        f"Does not comply: k20 = {format_k(k_ref)} m/s exceeds the limit of {limit_text}."
    )


def _signoffs(session: Session, test_id: int) -> tuple[SignOffLine, ...]:
    rows = session.exec(
        select(SignOff, User)
        .join(User, col(User.id) == col(SignOff.user_id))
        .where(SignOff.test_id == test_id)
        .order_by(col(SignOff.signed_at), col(SignOff.id))
    ).all()
    return tuple(
        SignOffLine(
            meaning=signoff.meaning,
            name=user.full_name,
            role=signoff.role,
            signed_at=signoff.signed_at,
        )
        for signoff, user in rows
    )


def _apparatus(session: Session, test_id: int) -> tuple[str, ...]:
    items = session.exec(
        select(Apparatus)
        .join(TestApparatus, col(TestApparatus.apparatus_id) == col(Apparatus.id))
        .where(TestApparatus.test_id == test_id)
        .order_by(col(Apparatus.identifier))
    ).all()
    return tuple(f"{item.identifier} {item.description}".strip() for item in items)


def build_test_section(session: Session, test: PermeabilityTest) -> TestSection:
    """One approved (or issued) test as the certificate reports it."""
    assert test.id is not None
    if not test.result:
        raise ValueError(f"test {test.id} has no stored reduction result")
    result = test.result
    specimen = session.exec(select(Specimen).where(Specimen.test_id == test.id)).first()
    trials = session.exec(
        select(Trial).where(Trial.test_id == test.id).order_by(col(Trial.seq))
    ).all()
    saturation = session.exec(select(SaturationStep).where(SaturationStep.test_id == test.id)).all()
    outputs = list(result.get("trials", []))
    used = set(result["result"].get("trials_used", range(len(outputs))))
    lines: list[TrialLine] = []
    used_k: list[float] = []
    index = 0  # position among the trials that went into the reduction
    for trial in trials:
        temperature = _quantity_text(trial.entries.get("temperature", "")) or "-"
        if trial.excluded or index >= len(outputs):
            lines.append(
                TrialLine(
                    seq=trial.seq,
                    entries=_entries_text(trial.entries),
                    temperature=temperature,
                    gradient=None,
                    k_m_per_s=None,
                    k_ref_m_per_s=None,
                    used=False,
                    excluded_reason=trial.exclusion_reason or "excluded",
                )
            )
            continue
        output = outputs[index]
        is_used = index in used
        if is_used:
            used_k.append(output["k_m_per_s"])
        lines.append(
            TrialLine(
                seq=trial.seq,
                entries=_entries_text(trial.entries),
                temperature=temperature,
                gradient=output.get("gradient"),
                k_m_per_s=output.get("k_m_per_s"),
                k_ref_m_per_s=output.get("k_ref_m_per_s"),
                used=is_used,
            )
        )
        index += 1
    measured, state = _specimen_rows(specimen, result)
    checks = tuple(
        CheckLine(
            check_id=c["id"],
            label=check_label(c["id"]),
            status=c["status"],
            message=c.get("message", ""),
            source=source_words(c),
            confirmed=c.get("limit_confirmed"),
        )
        for c in result.get("checks", [])
    )
    deviations = tuple(
        f"{c.label}: {c.message}"
        for c in checks
        if c.status in ("warn", "fail") and c.check_id != "specification"
    )
    compliance, compliance_text = compliance_of(result, test.spec_k_max_text)
    scope = scope_of_test(session, test, stored=True)
    summary = result["result"]
    preparation = specimen.preparation if specimen else ""
    return TestSection(
        test_id=test.id,
        series=test.series,
        revision=test.revision,
        correction_reason=test.correction_reason,
        method=test.method,
        method_label=catalogue.method_name(test.method),
        standard=test.standard or "-",
        permeant=test.permeant,
        reference_temperature_c=float(result.get("reference_temperature_c", 20.0)),
        temperature_correction=str(result.get("temperature_correction", "")),
        apparatus=_apparatus(session, test.id),
        preparation=PREPARATION_LABELS.get(Preparation(preparation), preparation)
        if preparation
        else "-",
        specimen_description=specimen.description if specimen else "",
        measured=measured,
        state=state,
        conditions=tuple(_conditions(test, saturation)),
        trials=tuple(lines),
        k_m_per_s=sum(used_k) / len(used_k) if used_k else None,
        k_ref_m_per_s=float(summary["k_ref_m_per_s"]),
        k_ref_cm_per_s=summary.get("k_ref_cm_per_s"),
        k_ref_ft_per_day=summary.get("k_ref_ft_per_day"),
        expanded_u_rel=summary.get("expanded_u_rel"),
        spec_limit_text=test.spec_k_max_text,
        spec_limit_m_per_s=test.spec_k_max_m_per_s,
        compliance=compliance,
        compliance_text=compliance_text,
        checks=checks,
        deviations=deviations,
        signoffs=_signoffs(session, test.id),
        engine_version=test.engine_version or str(result.get("engine_version", "")),
        input_hash=test.input_hash,
        coverage=coverage_words(result),
        decision_rule=decision_rule_words(result),
        rules_words=scope.rules_words,
        in_scope=scope.in_scope,
    )


def _depth_text(sample: Sample) -> str:
    if sample.depth_top_text and sample.depth_bottom_text:
        return f"{sample.depth_top_text} to {sample.depth_bottom_text}"
    return sample.depth_top_text or sample.depth_bottom_text or "-"


def build_sample_section(
    session: Session, sample: Sample, tests: Sequence[PermeabilityTest]
) -> SampleSection:
    assert sample.id is not None
    location = session.get(Location, sample.location_id) if sample.location_id else None
    location_text = "-"
    if location is not None:
        location_text = f"{location.name} ({location.kind.replace('_', ' ')})"
        if location.easting_m is not None and location.northing_m is not None:
            location_text += f", E {location.easting_m:.1f} N {location.northing_m:.1f}"
            if location.coordinate_system:
                location_text += f" ({location.coordinate_system})"
        if location.ground_level_text:
            location_text += f", ground level {location.ground_level_text}"
    return SampleSection(
        sample_id=sample.id,
        lab_id=sample.lab_id,
        client_sample_id=sample.client_sample_id or "-",
        location=location_text,
        depth=_depth_text(sample),
        depth_top_m=sample.depth_top_m,
        sample_type=sample.sample_type,
        description=sample.description or "-",
        condition=sample.condition or "-",
        received_at=sample.received_at,
        tests=tuple(build_test_section(session, test) for test in tests),
    )


def lab_party(session: Session) -> Party:
    lab = session.exec(
        select(Organisation)
        .where(Organisation.kind == OrganisationKind.LAB)
        .order_by(col(Organisation.id))
    ).first()
    if lab is None:
        return Party(name=get_settings().lab_name)
    return Party(name=lab.name, address=lab.address)


def build_document(
    session: Session,
    *,
    kind: CertificateKind,
    project: Project,
    samples: Sequence[tuple[Sample, Sequence[PermeabilityTest]]],
    number: str,
    revision: int,
    verification_code: str,
    issued_at: datetime,
    issued_by: User,
    key_id: str,
    supersedes: str = "",
    supersede_reason: str = "",
) -> CertificateDocument:
    """Gather everything a certificate shows; `samples` pairs each sample with its tests."""
    client = session.get(Organisation, project.client_id)
    base_url = get_settings().public_base_url.rstrip("/")
    spec_text = project.spec_k_max_text
    return CertificateDocument(
        kind=kind,
        number=number,
        revision=revision,
        verification_code=verification_code,
        verify_url=f"{base_url}/verify/{verification_code}",
        issued_at=issued_at,
        issued_by=SignOffLine(
            meaning="issued",
            name=issued_by.full_name,
            role=issued_by.role,
            signed_at=issued_at,
        ),
        lab=lab_party(session),
        client=Party(name=client.name, address=client.address) if client else Party(name="-"),
        project_number=project.number,
        project_name=project.name,
        site=project.site or "-",
        spec_text=spec_text,
        spec_source=project.spec_source,
        samples=tuple(build_sample_section(session, sample, tests) for sample, tests in samples),
        supersedes=supersedes,
        supersede_reason=supersede_reason,
        key_id=key_id,
        series=_series_sections(session, kind, project, samples, issued_by),
    )


def _series_sections(
    session: Session,
    kind: CertificateKind,
    project: Project,
    samples: Sequence[tuple[Sample, Sequence[PermeabilityTest]]],
    issuer: User,
) -> tuple[SeriesSection, ...]:
    if kind != CertificateKind.PROJECT or project.id is None:
        return ()
    test_ids = [t.id for _sample, tests in samples for t in tests if t.id is not None]
    return build_series_sections(session, project.id, test_ids, issuer=issuer)
