"""Exports of a project: its results as CSV or XLSX (one row per test, units in the headers,
stable column names) and everything recorded about it as one JSON document.

Column names are a published interface: add new columns at the end, never rename or reorder
the existing ones. Clients receive only certified results (tests issued or superseded);
laboratory staff receive every test."""

from __future__ import annotations

import csv
import io
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from sqlmodel import Session, SQLModel, col, select

from service.access import get_visible, is_client
from service.accounts.models import Organisation, User
from service.certificates.document import compliance_of
from service.certificates.models import Certificate, CertificateTest
from service.common import CertificateState, TestState
from service.config import get_settings
from service.custody.models import CustodyEvent
from service.db import utcnow
from service.lab_tests import models as tables
from service.lab_tests.models import PermeabilityTest, Reading, SaturationStep, Specimen, Trial
from service.lab_tests.reduction import Scope, catalogue
from service.projects.models import Location, Project
from service.samples.models import Sample
from service.series.service import project_series_json
from service.signoffs.models import SignOff
from service.text import CONTROL_CHARACTERS, spreadsheet_text

FORMAT_NAME = "seepline-project-export"
FORMAT_VERSION = 1
CLIENT_STATES = (TestState.ISSUED, TestState.SUPERSEDED)


@dataclass(frozen=True)
class Column:
    key: str
    unit: str
    description: str
    numeric: bool = False

    @property
    def header(self) -> str:
        return f"{self.key} [{self.unit}]" if self.unit else self.key


# The results table, in order. Stable: append only.
EXPORT_COLUMNS: tuple[Column, ...] = (
    Column("project_number", "", "the project's number"),
    Column("sample_lab_id", "", "the laboratory's sample ID"),
    Column("client_sample_id", "", "the client's own sample ID"),
    Column("location", "", "borehole, pit, borrow source or stockpile name"),
    Column("depth_top", "m", "depth to the top of the sample", True),
    Column("depth_bottom", "m", "depth to the bottom of the sample", True),
    Column("sample_type", "", "tube, block, bulk or ring"),
    Column("test_id", "", "the test's record number", True),
    Column("test_series", "", "n-th test of the sample; its revisions share it", True),
    Column("test_revision", "", "1, or higher for a correction", True),
    Column("test_state", "", "planned, running, submitted, approved, issued or superseded"),
    Column("method", "", "constant_head, falling_head, falling_head_rising_tail, constant_rate"),
    Column("standard", "", "the standard followed, e.g. ASTM D5084"),
    Column("preparation", "", "intact, remoulded or compacted"),
    Column("reference_temperature", "degC", "temperature k_ref is corrected to", True),
    Column("specimen_diameter", "m", "specimen diameter as prepared", True),
    Column("specimen_length", "m", "specimen length as prepared", True),
    Column("bulk_density", "kg/m3", "bulk density of the specimen", True),
    Column("dry_density", "kg/m3", "dry density of the specimen", True),
    Column("water_content", "%", "water content of the specimen", True),
    Column("void_ratio", "", "void ratio of the specimen", True),
    Column("degree_of_saturation", "%", "degree of saturation of the specimen", True),
    Column("relative_compaction", "%", "dry density over the reference maximum", True),
    Column("trials_total", "", "determinations recorded (excluded ones included)", True),
    Column("trials_used", "", "determinations that make up k_ref", True),
    Column("k_test_temperature", "m/s", "mean k at test temperature of those used", True),
    Column("k_ref", "m/s", "hydraulic conductivity at the reference temperature", True),
    Column(
        "expanded_uncertainty", "m/s", "U of k_ref, about 95 % (Student t coverage factor)", True
    ),
    Column("expanded_uncertainty_rel", "%", "U of k_ref relative to k_ref", True),
    Column("spec_k_max", "m/s", "specification limit on k_ref", True),
    Column("compliance", "", "complies, does_not_comply, undecided or no_limit"),
    Column("checks_failed", "", "ids of failed checks, separated by ';'"),
    Column("checks_warned", "", "ids of checks with a warning, separated by ';'"),
    Column("engine_version", "", "reduction engine version that made the result"),
    Column("input_hash", "", "SHA-256 of the reduction input"),
    Column("submitted_at", "UTC", "ISO 8601 time of submission"),
    Column("approved_at", "UTC", "ISO 8601 time of approval"),
    Column("issued_at", "UTC", "ISO 8601 time of issue"),
    Column("certificate_number", "", "certificate reporting this test, latest revision"),
    Column("certificate_revision", "", "that certificate's revision", True),
)
HEADERS = tuple(column.header for column in EXPORT_COLUMNS)


def columns_markdown() -> str:
    """The column table for the README (kept beside the code that writes the columns)."""
    lines = ["| column | unit | meaning |", "| --- | --- | --- |"]
    for column in EXPORT_COLUMNS:
        lines.append(f"| `{column.header}` | {column.unit or '-'} | {column.description} |")
    return "\n".join(lines)


def _project_tests(
    session: Session, project: Project, user: User
) -> list[tuple[PermeabilityTest, Sample]]:
    query = (
        select(PermeabilityTest, Sample)
        .join(Sample, col(Sample.id) == col(PermeabilityTest.sample_id))
        .where(Sample.project_id == project.id)
        .order_by(col(Sample.lab_id), col(PermeabilityTest.series), col(PermeabilityTest.revision))
    )
    if is_client(user):
        query = query.where(col(PermeabilityTest.state).in_([s.value for s in CLIENT_STATES]))
    return [(test, sample) for test, sample in session.exec(query).all()]


def _latest_certificates(session: Session, test_ids: Sequence[int]) -> dict[int, Certificate]:
    if not test_ids:
        return {}
    rows = session.exec(
        select(CertificateTest.test_id, Certificate)
        .join(Certificate, col(Certificate.id) == col(CertificateTest.certificate_id))
        .where(col(CertificateTest.test_id).in_(list(test_ids)))
        .order_by(col(Certificate.revision))
    ).all()
    latest: dict[int, Certificate] = {}
    for test_id, certificate in rows:
        latest[test_id] = certificate  # ordered by revision: the last one wins
    return latest


def _iso(value: datetime | None) -> str | None:
    return value.isoformat() if value else None


def result_row(
    test: PermeabilityTest,
    sample: Sample,
    *,
    project: Project,
    location: Location | None,
    specimen: Specimen | None,
    trials_total: int,
    certificate: Certificate | None,
) -> dict[str, Any]:
    """One test as a row of the results table, keyed by column key (values are numbers,
    text or None)."""
    result = test.result or {}
    summary = result.get("result") or {}
    derived = result.get("specimen") or {}
    outputs = result.get("trials") or []
    used = summary.get("trials_used", [])
    used_k = [outputs[i]["k_m_per_s"] for i in used if i < len(outputs)]
    checks = result.get("checks") or []
    k_ref = summary.get("k_ref_m_per_s")
    u_rel = summary.get("expanded_u_rel")
    saturation = derived.get("degree_of_saturation")
    compliance = compliance_of(result, test.spec_k_max_text)[0] if result else None
    return {
        "project_number": project.number,
        "sample_lab_id": sample.lab_id,
        "client_sample_id": sample.client_sample_id,
        "location": location.name if location else None,
        "depth_top": sample.depth_top_m,
        "depth_bottom": sample.depth_bottom_m,
        "sample_type": sample.sample_type,
        "test_id": test.id,
        "test_series": test.series,
        "test_revision": test.revision,
        "test_state": test.state,
        "method": test.method,
        "standard": test.standard or None,
        "preparation": specimen.preparation if specimen else None,
        "reference_temperature": test.reference_temperature_c,
        "specimen_diameter": specimen.diameter_m if specimen else None,
        "specimen_length": specimen.length_m if specimen else None,
        "bulk_density": derived.get("bulk_density_kg_per_m3"),
        "dry_density": derived.get("dry_density_kg_per_m3"),
        "water_content": specimen.water_content * 100
        if specimen and specimen.water_content is not None
        else None,
        "void_ratio": derived.get("void_ratio"),
        "degree_of_saturation": saturation * 100 if saturation is not None else None,
        "relative_compaction": derived.get("relative_compaction_pct"),
        "trials_total": trials_total,
        "trials_used": len(used) if result else None,
        "k_test_temperature": sum(used_k) / len(used_k) if used_k else None,
        "k_ref": k_ref,
        "expanded_uncertainty": u_rel * k_ref if u_rel is not None and k_ref else None,
        "expanded_uncertainty_rel": u_rel * 100 if u_rel is not None else None,
        "spec_k_max": test.spec_k_max_m_per_s,
        "compliance": compliance,
        "checks_failed": ";".join(c["id"] for c in checks if c.get("status") == "fail") or None,
        "checks_warned": ";".join(c["id"] for c in checks if c.get("status") == "warn") or None,
        "engine_version": test.engine_version or None,
        "input_hash": test.input_hash or None,
        "submitted_at": _iso(test.submitted_at),
        "approved_at": _iso(test.approved_at),
        "issued_at": _iso(test.issued_at),
        "certificate_number": certificate.number if certificate else None,
        "certificate_revision": certificate.revision if certificate else None,
    }


def project_results(
    session: Session, project_id: int, *, user: User
) -> tuple[Project, list[dict[str, Any]]]:
    """The visible project (404 otherwise) and one row per test it may see."""
    project = get_visible(session, Project, project_id, user, "project")
    pairs = _project_tests(session, project, user)
    test_ids = [t.id for t, _ in pairs if t.id is not None]
    specimens = {
        s.test_id: s
        for s in session.exec(select(Specimen).where(col(Specimen.test_id).in_(test_ids))).all()
    }
    counts: dict[int, int] = {}
    for trial in session.exec(select(Trial).where(col(Trial.test_id).in_(test_ids))).all():
        counts[trial.test_id] = counts.get(trial.test_id, 0) + 1
    locations = {
        loc.id: loc
        for loc in session.exec(select(Location).where(Location.project_id == project.id)).all()
    }
    certificates = _latest_certificates(session, test_ids)
    rows = []
    for test, sample in pairs:
        assert test.id is not None
        rows.append(
            result_row(
                test,
                sample,
                project=project,
                location=locations.get(sample.location_id) if sample.location_id else None,
                specimen=specimens.get(test.id),
                trials_total=counts.get(test.id, 0),
                certificate=certificates.get(test.id),
            )
        )
    return project, rows


def _csv_value(value: Any) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return repr(value)  # shortest text that reads back to the same float
    if isinstance(value, str):
        return spreadsheet_text(value)
    return str(value)


def _xlsx_value(value: Any) -> Any:
    return spreadsheet_text(value) if isinstance(value, str) else value


def to_csv(rows: Sequence[dict[str, Any]]) -> str:
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\r\n")
    writer.writerow(HEADERS)
    for row in rows:
        writer.writerow([_csv_value(row[column.key]) for column in EXPORT_COLUMNS])
    return out.getvalue()


def to_xlsx(rows: Sequence[dict[str, Any]], *, title: str) -> bytes:
    from openpyxl import Workbook
    from openpyxl.styles import Font

    workbook = Workbook()
    sheet = workbook.active
    assert sheet is not None
    sheet.title = "results"
    sheet.append(list(HEADERS))
    for cell in sheet[1]:
        cell.font = Font(bold=True)
    for row in rows:
        sheet.append([_xlsx_value(row[column.key]) for column in EXPORT_COLUMNS])
    sheet.freeze_panes = "A2"
    for index, column in enumerate(EXPORT_COLUMNS, start=1):
        letter = sheet.cell(row=1, column=index).column_letter
        sheet.column_dimensions[letter].width = max(12, len(column.header) + 2)
        if column.key in ("k_test_temperature", "k_ref", "expanded_uncertainty", "spec_k_max"):
            for (cell,) in sheet.iter_rows(min_row=2, min_col=index, max_col=index):
                cell.number_format = "0.00E+00"
    notes = workbook.create_sheet("columns")
    notes.append(["column", "unit", "meaning"])
    for column in EXPORT_COLUMNS:
        notes.append([column.header, column.unit, column.description])
    workbook.properties.title = CONTROL_CHARACTERS.sub("\ufffd", title)
    workbook.properties.creator = "Seepline"
    out = io.BytesIO()
    workbook.save(out)
    return out.getvalue()


def _dump(row: SQLModel, *, exclude: set[str] | None = None) -> dict[str, Any]:
    return row.model_dump(mode="json", exclude=exclude)


def project_json(session: Session, project_id: int, *, user: User) -> dict[str, Any]:
    """Everything recorded about a project that the user may see, as one JSON document."""
    project, rows = project_results(session, project_id, user=user)
    pairs = _project_tests(session, project, user)
    tests = [t for t, _ in pairs]
    test_ids = [t.id for t in tests if t.id is not None]
    client = session.get(Organisation, project.client_id)
    samples = session.exec(
        select(Sample).where(Sample.project_id == project.id).order_by(col(Sample.lab_id))
    ).all()
    sample_ids = [s.id for s in samples if s.id is not None]
    names = {u.id: u.full_name for u in session.exec(select(User)).all()}

    def by_test(model: Any) -> dict[int, list[Any]]:
        grouped: dict[int, list[Any]] = {}
        for item in session.exec(select(model).where(col(model.test_id).in_(test_ids))).all():
            grouped.setdefault(item.test_id, []).append(item)
        return grouped

    specimens = by_test(Specimen)
    trials = by_test(Trial)
    steps = by_test(SaturationStep)
    signoffs = by_test(SignOff)
    apparatus = by_test(tables.TestApparatus)
    trial_ids = [t.id for group in trials.values() for t in group]
    readings: dict[int, list[Reading]] = {}
    for reading in session.exec(select(Reading).where(col(Reading.trial_id).in_(trial_ids))).all():
        readings.setdefault(reading.trial_id, []).append(reading)
    custody: dict[int, list[CustodyEvent]] = {}
    for event in session.exec(
        select(CustodyEvent)
        .where(col(CustodyEvent.sample_id).in_(sample_ids))
        .order_by(col(CustodyEvent.seq))
    ).all():
        custody.setdefault(event.sample_id, []).append(event)
    base_url = get_settings().public_base_url.rstrip("/")
    certificates = session.exec(
        select(Certificate)
        .where(Certificate.project_id == project.id)
        .order_by(col(Certificate.number), col(Certificate.revision))
    ).all()
    certificate_tests: dict[int, list[int]] = {}
    for link in session.exec(
        select(CertificateTest).where(
            col(CertificateTest.certificate_id).in_([c.id for c in certificates])
        )
    ).all():
        certificate_tests.setdefault(link.certificate_id, []).append(link.test_id)

    def test_json(test: PermeabilityTest) -> dict[str, Any]:
        assert test.id is not None
        specimen = (specimens.get(test.id) or [None])[0]
        return {
            **_dump(test),
            "specimen": _dump(specimen) if specimen else None,
            "saturation": [_dump(s) for s in sorted(steps.get(test.id, []), key=lambda s: s.seq)],
            "apparatus_ids": sorted(a.apparatus_id for a in apparatus.get(test.id, [])),
            "trials": [
                {
                    **_dump(trial),
                    "readings": [
                        _dump(r) for r in sorted(readings.get(trial.id, []), key=lambda r: r.seq)
                    ],
                }
                for trial in sorted(trials.get(test.id, []), key=lambda t: t.seq)
            ],
            "signoffs": [
                {**_dump(s), "user_name": names.get(s.user_id, "")}
                for s in sorted(signoffs.get(test.id, []), key=lambda s: s.signed_at)
            ],
        }

    tests_by_sample: dict[int, list[PermeabilityTest]] = {}
    for test in tests:
        tests_by_sample.setdefault(test.sample_id, []).append(test)
    return {
        "format": FORMAT_NAME,
        "format_version": FORMAT_VERSION,
        "exported_at": utcnow().isoformat(),
        "exported_by": user.full_name,
        "scope": "certified results only" if is_client(user) else "all tests",
        "project": {**_dump(project), "client_name": client.name if client else None},
        "locations": [
            _dump(loc)
            for loc in session.exec(
                select(Location)
                .where(Location.project_id == project.id)
                .order_by(col(Location.name))
            ).all()
        ],
        "samples": [
            {
                **_dump(sample),
                "custody": [_dump(e) for e in custody.get(sample.id or 0, [])],
                "tests": [test_json(t) for t in tests_by_sample.get(sample.id or 0, [])],
            }
            for sample in samples
        ],
        "certificates": [
            {
                **_dump(c, exclude={"pdf"}),
                "test_ids": sorted(certificate_tests.get(c.id or 0, [])),
                "is_current": c.state == CertificateState.ISSUED,
                "verify_url": f"{base_url}/verify/{c.verification_code}",
                "pdf_url": f"/api/v1/certificates/{c.id}/pdf",
            }
            for c in certificates
        ],
        "series": project_series_json(session, project_id, user=user),
        "results": {"columns": list(HEADERS), "rows": rows},
        "entries": entry_legend(),
    }


def entry_legend() -> dict[str, list[dict[str, str]]]:
    """What each typed entry of a specimen, trial or reading is (the names in `entries` and
    the specimen records above), from the method catalogue."""
    return {
        scope.value: [
            {
                "id": entry.id,
                "label": entry.label,
                "symbol": entry.symbol,
                "unit": entry.units.si if entry.units else "",
            }
            for entry in catalogue.entries(scope)
        ]
        for scope in (Scope.SPECIMEN, Scope.TRIAL, Scope.READING)
    }
