"""The client portal: a client's projects, each sample's status, its k20 once a reviewer has
approved it, compliance with the specification limit, k20 against depth, and downloads.

What a client may see before certification: the status of every sample, and the figures of
approved or issued tests only. Numbers of running or submitted tests (a submitted result may
still be sent back, and a sent-back test keeps its last result on the record) are never read
here. Approved results are marked 'not yet certified'. Everything outside the client's own
organisation answers 404, like the rest of the service (service.access).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from enum import IntEnum
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Query, Request
from fastapi.responses import Response
from sqlmodel import Session

from service.access import get_visible
from service.accounts.models import User
from service.certificates.document import CAUTIONS, compliance_of
from service.certificates.models import Certificate
from service.certificates.service import (
    current_certificates,
    list_certificates,
    tests_per_certificate,
)
from service.common import Role, TestState
from service.deps import SessionDep, require_roles
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest
from service.projects.models import Project
from service.projects.service import location_names, projects_with_sample_counts
from service.samples.models import Sample
from service.samples.service import samples_of_project
from service.web.htmx import render
from service.web.pages import layout_context
from service.web.plots import k_depth_svg

router = APIRouter(prefix="/portal", include_in_schema=False)

Client = Annotated[User, Depends(require_roles(Role.CLIENT))]

# The states whose stored figures a client may see; everything else shows as a status only.
REPORTED_STATES = frozenset({TestState.APPROVED, TestState.ISSUED})
NO_LOCATION = "No location"


class Status(IntEnum):
    """A sample's progress as the client sees it; a sample is as far on as its least
    advanced test."""

    RECEIVED = 0
    IN_TESTING = 1
    AWAITING_REVIEW = 2
    APPROVED = 3
    CERTIFIED = 4

    @property
    def key(self) -> str:
        return self.name.lower()


STATUS_OF_TEST = {
    TestState.PLANNED: Status.RECEIVED,
    TestState.RUNNING: Status.IN_TESTING,
    TestState.SUBMITTED: Status.AWAITING_REVIEW,
    TestState.APPROVED: Status.APPROVED,
    TestState.ISSUED: Status.CERTIFIED,
    # The latest revision of a series is never superseded; an old one only stands behind it.
    TestState.SUPERSEDED: Status.CERTIFIED,
}
STATUS_FILTERS = tuple(status.key for status in Status)


@dataclass(frozen=True, slots=True)
class ReportedResult:
    """k20 of one test series as the client may see it (approved or issued only)."""

    test: PermeabilityTest
    k_ref_m_per_s: float | None
    expanded_u_rel: float | None
    compliance: str  # complies | does_not_comply | no_limit
    limit_m_per_s: float | None
    certified: bool
    correction_pending: bool  # a newer revision is being worked on (no figures shown)
    replaces_certified: bool  # this approved revision corrects an issued one


@dataclass(slots=True)
class SampleRow:
    sample: Sample
    location: str
    status: Status
    results: list[ReportedResult] = field(default_factory=list)
    certificate: Certificate | None = None

    @property
    def depth_m(self) -> float | None:
        """The middle of the sampled interval, or its top when no bottom was given."""
        top, bottom = self.sample.depth_top_m, self.sample.depth_bottom_m
        if top is None:
            return bottom
        return top if bottom is None else (top + bottom) / 2


@dataclass(frozen=True, slots=True)
class Plot:
    svg: str
    certified_points: int
    uncertified_points: int
    left_out: int


# ---------- what the client may see ----------


def _reported(series: list[PermeabilityTest]) -> ReportedResult | None:
    """The figures of a series: its latest approved or issued revision, if any."""
    by_revision = sorted(series, key=lambda t: t.revision)
    latest = by_revision[-1]
    shown = next((t for t in reversed(by_revision) if t.state in REPORTED_STATES), None)
    if shown is None or not shown.result:
        return None
    summary = shown.result.get("result") or {}
    compliance, _sentence = compliance_of(shown.result, shown.spec_k_max_text)
    return ReportedResult(
        test=shown,
        k_ref_m_per_s=shown.result_k_ref_m_per_s,
        expanded_u_rel=summary.get("expanded_u_rel"),
        compliance=compliance,
        limit_m_per_s=shown.spec_k_max_m_per_s,
        certified=shown.state == TestState.ISSUED,
        correction_pending=latest.id != shown.id,
        replaces_certified=shown.state == TestState.APPROVED
        and any(t.state == TestState.SUPERSEDED for t in by_revision),
    )


def sample_rows(session: Session, project: Project) -> list[SampleRow]:
    """Every sample of the project with its status and the results a client may see."""
    assert project.id is not None
    locations = location_names(session, project.id)
    samples = samples_of_project(session, project.id)
    sample_ids = [s.id for s in samples if s.id is not None]
    tests = lab_tests.tests_of_samples(session, sample_ids)
    series: dict[int, dict[int, list[PermeabilityTest]]] = {}
    for test in tests:
        series.setdefault(test.sample_id, {}).setdefault(test.series, []).append(test)
    current = current_certificates(session, sample_ids)
    rows = []
    for sample in samples:
        assert sample.id is not None
        groups = series.get(sample.id, {})
        latest_states = [max(g, key=lambda t: t.revision).state for g in groups.values()]
        status = min((STATUS_OF_TEST[TestState(s)] for s in latest_states), default=None)
        results = [r for n in sorted(groups) if (r := _reported(groups[n])) is not None]
        rows.append(
            SampleRow(
                sample=sample,
                location=locations.get(sample.location_id, NO_LOCATION)
                if sample.location_id
                else NO_LOCATION,
                status=Status.RECEIVED if status is None else status,
                results=results,
                certificate=current.get(sample.id),
            )
        )
    rows.sort(
        key=lambda r: (
            r.location == NO_LOCATION,
            r.location,
            r.depth_m if r.depth_m is not None else math.inf,
            r.sample.lab_id,
        )
    )
    return rows


def depth_plot(
    rows: Sequence[SampleRow], spec_limit: float | None, units: str | None = "si"
) -> Plot | None:
    """k20 against depth, one series per location; approved results that are not yet
    certified form series of their own, so the legend tells them apart."""
    series: dict[str, list[tuple[float, float]]] = {}
    certified = uncertified = left_out = 0
    for row in rows:
        for result in row.results:
            k = result.k_ref_m_per_s
            depth = row.depth_m
            if k is None or k <= 0 or depth is None or depth < 0:
                left_out += 1
                continue
            name = row.location if result.certified else f"{row.location} (not yet certified)"
            series.setdefault(name, []).append((depth, k))
            if result.certified:
                certified += 1
            else:
                uncertified += 1
    if not series:
        return None
    ordered = dict(sorted(series.items()))
    svg = k_depth_svg(
        ordered, spec_limit=spec_limit, title="k20 against depth, by location", units=units
    )
    return Plot(svg, certified, uncertified, left_out)


def status_counts(rows: Sequence[SampleRow]) -> dict[str, int]:
    counts = {status.key: 0 for status in Status}
    for row in rows:
        counts[row.status.key] += 1
    return counts


# ---------- pages ----------


@router.get("")
def portal_home(request: Request, user: Client, session: SessionDep) -> Response:
    """The client's projects, each linked to its portal page."""
    projects = projects_with_sample_counts(session, user=user)
    context = layout_context(request, user, projects=projects)
    return render(request, "portal/index.html", context)


def _certificates(session: Session, user: User, project_id: int) -> dict[str, Any]:
    """The project's certificates for the downloads table, with how many tests each reports."""
    certificates, _ = list_certificates(session, user=user, project_id=project_id)
    return {
        "certificates": certificates,
        "certificates_by_id": {c.id: c for c in certificates},
        "certificate_tests": tests_per_certificate(
            session, [c.id for c in certificates if c.id is not None]
        ),
    }


def _filtered(rows: list[SampleRow], status: str, location: str) -> list[SampleRow]:
    return [
        row
        for row in rows
        if (not status or row.status.key == status) and (not location or row.location == location)
    ]


def _filter_problems(status: str, location: str, locations: list[str]) -> list[str]:
    """Why a filter of the sample table is refused, naming what is accepted."""
    problems = []
    if status and status not in STATUS_FILTERS:
        problems.append(
            f"status: {status!r} is not a status here; accepted: {', '.join(STATUS_FILTERS)}"
        )
    if location and location not in locations:
        accepted = ", ".join(locations) or "none (no samples yet)"
        problems.append(f"location: {location!r} is not in this project; accepted: {accepted}")
    return problems


@router.get("/projects/{project_id}")
def project_page(
    project_id: int,
    request: Request,
    user: Client,
    session: SessionDep,
    status: Annotated[str, Query(max_length=20)] = "",
    location: Annotated[str, Query(max_length=60)] = "",
) -> Response:
    """One project: samples with status and k20, compliance, the depth plot, downloads.

    `status` and `location` narrow the sample table (an htmx request gets the table only);
    an unknown value is refused with the accepted ones named."""
    project = get_visible(session, Project, project_id, user, "project")
    rows = sample_rows(session, project)
    locations = sorted({row.location for row in rows})
    problems = _filter_problems(status, location, locations)
    shown = rows if problems else _filtered(rows, status, location)
    context = layout_context(
        request,
        user,
        project=project,
        rows=shown,
        all_count=len(rows),
        counts=status_counts(rows),
        locations=locations,
        status_filter=status,
        location_filter=location,
        filter_problems=problems,
        plot=depth_plot(rows, project.spec_k_max_m_per_s, user.display_units),
        cautions=CAUTIONS[1:3],
        **_certificates(session, user, project_id),
    )
    return render(
        request,
        "portal/project.html",
        context,
        fragment="portal/_samples.html",
        status_code=422 if problems else 200,
    )
