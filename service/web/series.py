"""Compaction series pages: a project's series (and the form to open one), and a series page
with its members and k20, the plots of k20 against moulding water content and dry density,
the compaction plane with the acceptable zone, and the forms to add or remove members and
compaction-curve points. A client sees its own projects' series with certified k20 only."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import Response
from sqlmodel import Session

from service.accounts.models import User
from service.deps import CurrentUser, LabStaff, SessionDep
from service.lab_tests import service as lab_tests
from service.lab_tests.reduction import SeriesPoint
from service.projects.service import get_project
from service.samples.service import list_samples
from service.series.service import (
    CurvePointCreate,
    MemberCreate,
    SeriesCreate,
    SeriesResults,
    add_curve_point,
    add_member,
    create_series,
    may_edit_series,
    project_series,
    remove_curve_point,
    remove_member,
    series_results,
)
from service.web.htmx import PostedForm, redirect, render
from service.web.pages import layout_context
from service.web.reception import with_unit
from service.web.refusals import attempt, simple_name
from service.web.series_plots import Plane, PlotPoint, compaction_plane_svg, k_against_svg

router = APIRouter(include_in_schema=False)

SERIES_FIELDS = (
    "name",
    "material",
    "specific_gravity",
    "spec_k_max",
    "min_saturation",
    "compaction_effort",
)
MEMBER_FIELDS = (
    "test_id",
    "label",
    "water_content",
    "water_content_unit",
    "dry_density",
    "dry_density_unit",
)
POINT_FIELDS = (
    "point_water_content",
    "point_water_content_unit",
    "point_dry_density",
    "point_dry_density_unit",
)
POINT_ALIASES = {"water_content": "point_water_content", "dry_density": "point_dry_density"}
WATER_UNITS = (("%", "%"),)
DENSITY_UNITS = (("Mg/m**3", "Mg/m³"), ("kg/m**3", "kg/m³"), ("lb/ft**3", "lb/ft³"))
MG = 1000.0  # kg/m³ per Mg/m³


def _form(fields: tuple[str, ...], values: Mapping[str, str] | None) -> dict[str, str]:
    form = dict.fromkeys(fields, "")
    for prefix in ("", "point_"):
        form.update({f"{prefix}water_content_unit": "%", f"{prefix}dry_density_unit": "Mg/m**3"})
    form.update({k: v for k, v in (values or {}).items() if k in fields})
    return form


def _typed_pair(values: Mapping[str, str], prefix: str = "") -> dict[str, str]:
    """The moulding state of a form: each number with the unit picked beside it."""
    out = {}
    for name in ("water_content", "dry_density"):
        field = prefix + name
        text = with_unit(values.get(field, ""), values.get(f"{field}_unit", ""))
        if text is not None:
            out[name] = text
    return out


# --- the project's series ------------------------------------------------------------------


def list_context(
    request: Request,
    session: Session,
    user: User,
    project_id: int,
    *,
    form: Mapping[str, str] | None = None,
    errors: Mapping[str, Any] | None = None,
    general: list[str] | None = None,
) -> dict[str, Any]:
    project = get_project(session, project_id, user=user)
    series_form = _form(SERIES_FIELDS, form)
    series_form.setdefault("specific_gravity", "")
    if form is None:
        series_form["specific_gravity"] = "2.70"
    return layout_context(
        request,
        user,
        project=project,
        series_list=project_series(session, project_id, user=user),
        can_edit=may_edit_series(user),
        series_form=series_form,
        series_errors=errors or {},
        series_general=general or [],
    )


@router.get("/projects/{project_id}/series")
def series_list_page(
    project_id: int, request: Request, user: CurrentUser, session: SessionDep
) -> Response:
    """A project's compaction series, and (lab staff) the form to open one."""
    context = list_context(request, session, user, project_id)
    return render(request, "series/list.html", context, fragment="series/_list.html")


@router.post("/projects/{project_id}/series")
def series_create(
    project_id: int, request: Request, user: LabStaff, session: SessionDep, posted: PostedForm
) -> Response:
    """Open a series; the browser then goes to its page. A refusal keeps what was typed."""
    values = {name: str(posted.get(name, "")) for name in SERIES_FIELDS}
    payload: dict[str, Any] = {k: v.strip() for k, v in values.items() if v.strip()}
    with attempt(session) as tried:
        series = create_series(
            session, project_id, SeriesCreate.model_validate(payload), actor=user
        )
    if not tried.refused:
        return redirect(request, f"/series/{series.id}")
    errors, general = tried.fields(simple_name(SERIES_FIELDS))
    context = list_context(
        request, session, user, project_id, form=values, errors=errors, general=general
    )
    return render(
        request, "series/list.html", context, fragment="series/_list.html", status_code=tried.status
    )


# --- one series ----------------------------------------------------------------------------


def _points(results: SeriesResults) -> tuple[list[PlotPoint], list[PlotPoint], list[float]]:
    """(k20 against w [%], k20 against ρ_d [Mg/m³], ρ_d of each member [Mg/m³])."""
    by_w, by_rho, rhos = [], [], []
    for m in results.members:
        rho = m.member.dry_density_kg_per_m3 / MG
        by_w.append(
            PlotPoint(m.member.label, 100.0 * m.member.water_content, m.k_ref_m_per_s, m.acceptable)
        )
        by_rho.append(PlotPoint(m.member.label, rho, m.k_ref_m_per_s, m.acceptable))
        rhos.append(rho)
    return by_w, by_rho, rhos


def _line(points: tuple[SeriesPoint, ...] | list[SeriesPoint]) -> list[tuple[float, float]]:
    return [(100.0 * p.water_content, p.dry_density_kg_per_m3 / MG) for p in points]


def series_plots(results: SeriesResults) -> dict[str, str]:
    """The series' three SVG plots (empty strings where there is nothing to draw)."""
    a = results.analysis
    limit = results.series.spec_k_max_m_per_s
    by_w, by_rho, rhos = _points(results)
    plots = {"k_w": "", "k_rho": "", "plane": ""}
    if results.with_k:
        curve = a.curve
        plots["k_w"] = k_against_svg(
            by_w,
            x_title="Moulding water content w (%)",
            spec_limit=limit,
            marker_x=100.0 * curve.optimum_water_content if curve else None,
            marker_words="optimum water content",
            plot_id="k-water-content",
            title="k20 against moulding water content",
        )
        plots["k_rho"] = k_against_svg(
            by_rho,
            x_title="Dry density (Mg/m³)",
            spec_limit=limit,
            marker_x=curve.max_dry_density_kg_per_m3 / MG if curve else None,
            marker_words="maximum dry density",
            plot_id="k-dry-density",
            title="k20 against dry density",
        )
    if results.members or results.curve_points:
        curve_line: list[tuple[float, float]] = []
        if a.curve is not None:
            used = [results.curve_points[j].water_content for j in a.curve.points_used]
            lo, hi = min(used), max(used)
            ws = [lo + (hi - lo) * j / 30 for j in range(31)]
            curve_line = [(100.0 * w, a.curve.dry_density_at(w) / MG) for w in ws]
        s_words = "S = {:.0f} %: at or above it every specimen met the limit"
        plots["plane"] = compaction_plane_svg(
            Plane(
                specimens=by_w,
                densities=rhos,
                zero_air_voids=_line(a.zero_air_voids),
                curve_points=[
                    (100.0 * p.water_content, p.dry_density_kg_per_m3 / MG)
                    for p in results.curve_points
                ],
                curve=curve_line,
                zone=_line(a.zone_outline),
                zone_line=_line(a.zone_saturation_line),
                zone_line_words=s_words.format(100 * a.zone.saturation_bound)
                if a.zone and a.zone.saturation_bound
                else "",
                min_line=_line(a.min_saturation_line),
                min_line_words=f"S = {100 * (results.series.min_saturation or 0):.0f} %: "
                "the project's least saturation",
            ),
            title="Compaction plane: dry density against moulding water content",
        )
    return plots


def _test_choices(session: Session, user: User, results: SeriesResults) -> list[tuple[str, str]]:
    samples, _n = list_samples(
        session, user=user, project_id=results.series.project_id, limit=500, offset=0
    )
    lab_ids = {s.id: s.lab_id for s in samples}
    taken = {m.member.test_id for m in results.members}
    tests = lab_tests.tests_of_samples(session, [s.id for s in samples if s.id is not None])
    return [
        (
            str(t.id),
            f"{lab_ids.get(t.sample_id, '?')} · test {t.series} rev {t.revision} · {t.state}",
        )
        for t in tests
        if t.id not in taken and t.superseded_by_id is None
    ]


def series_context(
    request: Request,
    session: Session,
    user: User,
    series_id: int,
    *,
    member_form: Mapping[str, str] | None = None,
    member_errors: Mapping[str, Any] | None = None,
    member_general: list[str] | None = None,
    point_form: Mapping[str, str] | None = None,
    point_errors: Mapping[str, Any] | None = None,
    point_general: list[str] | None = None,
    saved: str = "",
) -> dict[str, Any]:
    results = series_results(session, series_id, user=user)
    project = get_project(session, results.series.project_id, user=user)
    can_edit = may_edit_series(user)
    return layout_context(
        request,
        user,
        project=project,
        series=results.series,
        results=results,
        analysis=results.analysis,
        plots=series_plots(results),
        can_edit=can_edit,
        test_choices=_test_choices(session, user, results) if can_edit else [],
        water_units=WATER_UNITS,
        density_units=DENSITY_UNITS,
        member_form=_form(MEMBER_FIELDS, member_form),
        member_errors=member_errors or {},
        member_general=member_general or [],
        point_form=_form(POINT_FIELDS, point_form),
        point_errors=point_errors or {},
        point_general=point_general or [],
        saved=saved,
    )


def _series_answer(request: Request, context: dict[str, Any], status_code: int = 200) -> Response:
    return render(
        request,
        "series/series.html",
        context,
        fragment="series/_series.html",
        status_code=status_code,
    )


@router.get("/series/{series_id}")
def series_page(
    series_id: int, request: Request, user: CurrentUser, session: SessionDep
) -> Response:
    """A compaction series: members and k20, plots, the acceptable zone."""
    return _series_answer(request, series_context(request, session, user, series_id))


@router.post("/series/{series_id}/members")
def member_create(
    series_id: int, request: Request, user: LabStaff, session: SessionDep, posted: PostedForm
) -> Response:
    """Add a member; a refusal answers 422 with the page, the message beside its field."""
    values = {name: str(posted.get(name, "")) for name in MEMBER_FIELDS}
    payload: dict[str, Any] = {
        k: values[k].strip() for k in ("test_id", "label") if values[k].strip()
    }
    payload.update(_typed_pair(values))
    with attempt(session) as tried:
        add_member(session, series_id, MemberCreate.model_validate(payload), actor=user)
    errors, general = tried.fields(simple_name(MEMBER_FIELDS))
    context = series_context(
        request,
        session,
        user,
        series_id,
        member_form=values if tried.refused else None,
        member_errors=errors,
        member_general=general,
        saved="" if tried.refused else "member",
    )
    return _series_answer(request, context, tried.status)


@router.post("/series/{series_id}/curve-points")
def point_create(
    series_id: int, request: Request, user: LabStaff, session: SessionDep, posted: PostedForm
) -> Response:
    """Add a compaction-test point; a refusal keeps what was typed."""
    values = {name: str(posted.get(name, "")) for name in POINT_FIELDS}
    with attempt(session) as tried:
        add_curve_point(
            session,
            series_id,
            CurvePointCreate.model_validate(_typed_pair(values, "point_")),
            actor=user,
        )
    errors, general = tried.fields(simple_name(POINT_FIELDS, POINT_ALIASES))
    context = series_context(
        request,
        session,
        user,
        series_id,
        point_form=values if tried.refused else None,
        point_errors=errors,
        point_general=general,
        saved="" if tried.refused else "point",
    )
    return _series_answer(request, context, tried.status)


@router.post("/series/{series_id}/members/{member_id}/remove")
def member_remove(
    series_id: int, member_id: int, request: Request, user: LabStaff, session: SessionDep
) -> Response:
    """Take a specimen out of the series (its test is untouched)."""
    remove_member(session, series_id, member_id, actor=user)
    context = series_context(request, session, user, series_id, saved="removed")
    return _series_answer(request, context)


@router.post("/series/{series_id}/curve-points/{point_id}/remove")
def point_remove(
    series_id: int, point_id: int, request: Request, user: LabStaff, session: SessionDep
) -> Response:
    """Remove a compaction-test point typed by mistake."""
    remove_curve_point(session, series_id, point_id, actor=user)
    context = series_context(request, session, user, series_id, saved="removed")
    return _series_answer(request, context)
