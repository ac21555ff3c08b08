"""Compaction series rules: who edits them, members from the project's own tests, typed
moulding states and compaction-curve points, and the analysis through the lab-tests door.

The analysis (classing each specimen against the limit and drawing the acceptable zone) is the
engine's, after Daniel & Benson (1990) (docs/methods.md §14.7); nothing of it is stored, so a
corrected test's new k shows at once."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from pydantic import BaseModel, ConfigDict, Field
from sqlmodel import Session, col, select

from service.access import get_visible, is_client
from service.accounts.models import User
from service.audit.service import apply_changes, record_change, record_created
from service.common import Role, TestState
from service.errors import Conflict, NotFound, invalid, require_version
from service.lab_tests.models import PermeabilityTest
from service.lab_tests.reduction import (
    SERIES_WATER_DENSITY_KG_PER_M3,
    SeriesAnalysis,
    SeriesPoint,
    SeriesSpecimen,
    analyse_series,
    saturation_of,
)
from service.projects.models import Project
from service.quantities import CONDUCTIVITY, DENSITY, FRACTION, typed
from service.samples.models import Sample
from service.series.models import CompactionCurvePoint, CompactionSeries, SeriesMember
from service.text import Identifier

SERIES_EDITORS = frozenset({Role.TECHNICIAN, Role.REVIEWER, Role.LAB_MANAGER, Role.ADMIN})
# What a client sees of a member's k: certified results only (as on the project page).
CLIENT_RESULT_STATES = frozenset({TestState.ISSUED.value, TestState.SUPERSEDED.value})
_WATER = "with its % sign, e.g. '16.5 %'"
_DENSITY = "with its unit, e.g. '1.78 g/cm**3', '1780 kg/m**3' or '111.1 lb/ft**3'"


def may_edit_series(user: User) -> bool:
    """Whether `user` opens series and adds or removes their members and curve points."""
    return user.role in SERIES_EDITORS


# --- schemas -------------------------------------------------------------------------------


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", str_strip_whitespace=True)


class SeriesCreate(_Strict):
    name: str = Field(min_length=1, max_length=80, description="unique in the project")
    material: str = Field(default="", max_length=300, description="the material tested")
    specific_gravity: float = Field(
        default=2.70, ge=1.0, le=5.0, allow_inf_nan=False, description="G_s of the solids"
    )
    spec_k_max: str | None = Field(
        default=None,
        max_length=60,
        description="limit on k20 with its unit ('1e-9 m/s'); the project's limit when omitted",
    )
    min_saturation: str | None = Field(
        default=None, max_length=40, description="least degree of saturation of the zone, '85 %'"
    )
    compaction_effort: str = Field(default="", max_length=120, description="e.g. 'standard'")


class SeriesUpdate(_Strict):
    version: int = Field(ge=1, description="the version you read; a stale one answers 409")
    name: str | None = Field(default=None, min_length=1, max_length=80)
    material: str | None = Field(default=None, max_length=300)
    specific_gravity: float | None = Field(default=None, ge=1.0, le=5.0, allow_inf_nan=False)
    spec_k_max: str | None = Field(default=None, max_length=60, description="'' removes it")
    min_saturation: str | None = Field(default=None, max_length=40, description="'' removes it")
    compaction_effort: str | None = Field(default=None, max_length=120)


class MemberCreate(_Strict):
    test_id: int = Field(description="a test of a sample of the same project")
    label: Identifier | None = Field(
        default=None, max_length=40, description="the specimen's name; the lab ID when omitted"
    )
    water_content: str = Field(min_length=1, max_length=40, description="moulding, " + _WATER)
    dry_density: str = Field(min_length=1, max_length=40, description="moulding, " + _DENSITY)


class CurvePointCreate(_Strict):
    water_content: str = Field(min_length=1, max_length=40, description=_WATER)
    dry_density: str = Field(min_length=1, max_length=40, description=_DENSITY)


class MemberRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: int
    test_id: int
    label: str
    water_content_text: str
    water_content: float
    dry_density_text: str
    dry_density_kg_per_m3: float


class CurvePointRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: int
    water_content_text: str
    water_content: float
    dry_density_text: str
    dry_density_kg_per_m3: float


class SeriesRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: int
    project_id: int
    name: str
    material: str
    specific_gravity: float
    spec_k_max_text: str
    spec_k_max_m_per_s: float | None
    min_saturation_text: str
    min_saturation: float | None
    compaction_effort: str
    version: int


# --- series --------------------------------------------------------------------------------


def _limit(text: str | None) -> tuple[str, float | None]:
    if text is None or not text.strip():
        return "", None
    return typed(text, CONDUCTIVITY, ("spec_k_max",), positive=True)


def _min_saturation(text: str | None) -> tuple[str, float | None]:
    if text is None or not text.strip():
        return "", None
    shown, value = typed(text, FRACTION, ("min_saturation",), positive=True)
    if not 0 < value <= 1:
        raise invalid(
            ("min_saturation",),
            "must be above 0 % and at most 100 %",
            value=shown,
            accepted="a degree of saturation with its % sign, e.g. '85 %'",
            kind="out_of_range",
        )
    return shown, value


def _refuse_duplicate_name(
    session: Session, project_id: int, name: str, series_id: int | None = None
) -> None:
    query = select(CompactionSeries.id).where(
        CompactionSeries.project_id == project_id, CompactionSeries.name == name
    )
    if series_id is not None:
        query = query.where(CompactionSeries.id != series_id)
    if session.exec(query).first() is not None:
        raise Conflict(
            f"this project already has a compaction series named '{name}'",
            detail={"field": "name"},
        )


def create_series(
    session: Session, project_id: int, data: SeriesCreate, *, actor: User
) -> CompactionSeries:
    """Open a compaction series in a project; the limit is the project's unless typed."""
    project = get_visible(session, Project, project_id, actor, "project")
    assert project.id is not None
    if data.spec_k_max is None:
        spec_text, spec_si = project.spec_k_max_text, project.spec_k_max_m_per_s
    else:
        spec_text, spec_si = _limit(data.spec_k_max)
    sat_text, sat = _min_saturation(data.min_saturation)
    _refuse_duplicate_name(session, project.id, data.name)
    series = CompactionSeries(
        project_id=project.id,
        name=data.name,
        material=data.material,
        specific_gravity=data.specific_gravity,
        spec_k_max_text=spec_text,
        spec_k_max_m_per_s=spec_si,
        min_saturation_text=sat_text,
        min_saturation=sat,
        compaction_effort=data.compaction_effort,
        created_by_id=actor.id,
    )
    session.add(series)
    session.flush()
    record_created(session, series, actor_id=actor.id)
    return series


def get_series(session: Session, series_id: int, *, user: User) -> CompactionSeries:
    return get_visible(session, CompactionSeries, series_id, user, "compaction series")


def project_series(session: Session, project_id: int, *, user: User) -> list[CompactionSeries]:
    """A visible project's compaction series, by name."""
    project = get_visible(session, Project, project_id, user, "project")
    query = (
        select(CompactionSeries)
        .where(CompactionSeries.project_id == project.id)
        .order_by(col(CompactionSeries.name))
    )
    return list(session.exec(query).all())


def update_series(
    session: Session, series_id: int, data: SeriesUpdate, *, actor: User
) -> CompactionSeries:
    """Edit against the version the editor read; each changed field is audited."""
    series = get_series(session, series_id, user=actor)
    require_version(
        series,
        data.version,
        f"compaction series {series_id}",
        yours=data.model_dump(mode="json", exclude_unset=True, exclude={"version"}),
        current=SeriesRead.model_validate(series).model_dump(mode="json"),
    )
    plain = data.model_dump(exclude_unset=True, exclude={"version", "spec_k_max", "min_saturation"})
    changes: dict[str, Any] = {k: v for k, v in plain.items() if v is not None}
    if "name" in changes:
        _refuse_duplicate_name(session, series.project_id, changes["name"], series.id)
    if "spec_k_max" in data.model_fields_set:
        changes["spec_k_max_text"], changes["spec_k_max_m_per_s"] = _limit(data.spec_k_max)
    if "min_saturation" in data.model_fields_set:
        changes["min_saturation_text"], changes["min_saturation"] = _min_saturation(
            data.min_saturation
        )
    if "specific_gravity" in changes:
        for member in members_of(session, series_id):
            _refuse_above_solids(
                member.water_content,
                member.dry_density_kg_per_m3,
                changes["specific_gravity"],
                ("specific_gravity",),
                member.dry_density_text,
            )
    apply_changes(session, series, changes, actor_id=actor.id)
    return series


# --- members and curve points --------------------------------------------------------------


def _refuse_above_solids(
    water_content: float,
    dry_density: float,
    specific_gravity: float,
    loc: tuple[str, ...],
    shown: str,
) -> None:
    try:
        saturation_of(water_content, dry_density, specific_gravity)
    except ValueError as exc:
        raise invalid(
            loc,
            f"gives an impossible moulding state: {exc}",
            value=shown,
            accepted=f"a dry density below G_s·ρ_w = "
            f"{specific_gravity * SERIES_WATER_DENSITY_KG_PER_M3:.0f} kg/m³ "
            f"(G_s {specific_gravity:g} of the series)",
            kind="impossible_state",
        ) from None


def _moulding(data: MemberCreate | CurvePointCreate) -> tuple[str, float, str, float]:
    w_text, w = typed(data.water_content, FRACTION, ("water_content",), non_negative=True)
    rho_text, rho = typed(data.dry_density, DENSITY, ("dry_density",), positive=True)
    return w_text, w, rho_text, rho


def _editable(session: Session, series_id: int, actor: User) -> CompactionSeries:
    series = get_series(session, series_id, user=actor)
    session.refresh(series, with_for_update=True)  # members of one series added one at a time
    return series


def add_member(
    session: Session, series_id: int, data: MemberCreate, *, actor: User
) -> SeriesMember:
    """Add a test of the project with its moulding water content and dry density."""
    series = _editable(session, series_id, actor)
    assert series.id is not None
    found = session.exec(
        select(PermeabilityTest, Sample)
        .join(Sample, col(Sample.id) == col(PermeabilityTest.sample_id))
        .where(PermeabilityTest.id == data.test_id)
    ).first()
    if found is None or found[1].project_id != series.project_id:
        raise invalid(
            ("test_id",),
            f"no test of this project has id {data.test_id}",
            value=data.test_id,
            accepted="the id of a test on a sample of the series' project",
            kind="unknown_test",
        )
    w_text, w, rho_text, rho = _moulding(data)
    _refuse_above_solids(w, rho, series.specific_gravity, ("dry_density",), rho_text)
    label = data.label or found[1].lab_id
    for member in members_of(session, series.id):
        if member.test_id == data.test_id:
            raise Conflict(
                f"test {data.test_id} is already in this series", detail={"field": "test_id"}
            )
        if member.label == label:
            raise Conflict(
                f"this series already has a specimen named '{label}'", detail={"field": "label"}
            )
    member = SeriesMember(
        series_id=series.id,
        test_id=data.test_id,
        label=label,
        water_content=w,
        water_content_text=w_text,
        dry_density_kg_per_m3=rho,
        dry_density_text=rho_text,
    )
    session.add(member)
    session.flush()
    record_created(session, member, actor_id=actor.id)
    return member


def add_curve_point(
    session: Session, series_id: int, data: CurvePointCreate, *, actor: User
) -> CompactionCurvePoint:
    """Add a point of the material's compaction test (e.g. a Proctor test)."""
    series = _editable(session, series_id, actor)
    assert series.id is not None
    w_text, w, rho_text, rho = _moulding(data)
    _refuse_above_solids(w, rho, series.specific_gravity, ("dry_density",), rho_text)
    point = CompactionCurvePoint(
        series_id=series.id,
        water_content=w,
        water_content_text=w_text,
        dry_density_kg_per_m3=rho,
        dry_density_text=rho_text,
    )
    session.add(point)
    session.flush()
    record_created(session, point, actor_id=actor.id)
    return point


def _remove(
    session: Session, series_id: int, model: Any, row_id: int, what: str, *, actor: User
) -> None:
    _editable(session, series_id, actor)
    row = session.get(model, row_id)
    if row is None or row.series_id != series_id:
        raise NotFound(f"{what} {row_id} not found in compaction series {series_id}")
    record_change(
        session,
        entity=str(model.__tablename__),
        entity_id=row_id,
        field="deleted",
        old=getattr(row, "label", None) or f"{row.water_content_text}, {row.dry_density_text}",
        new=None,
        actor_id=actor.id,
    )
    session.delete(row)
    session.flush()


def remove_member(session: Session, series_id: int, member_id: int, *, actor: User) -> None:
    """Take a specimen out of the series (its test is untouched)."""
    _remove(session, series_id, SeriesMember, member_id, "member", actor=actor)


def remove_curve_point(session: Session, series_id: int, point_id: int, *, actor: User) -> None:
    """Remove a compaction-curve point typed by mistake."""
    _remove(session, series_id, CompactionCurvePoint, point_id, "curve point", actor=actor)


def members_of(session: Session, series_id: int) -> list[SeriesMember]:
    query = select(SeriesMember).where(SeriesMember.series_id == series_id)
    return list(session.exec(query.order_by(col(SeriesMember.water_content))).all())


def curve_points_of(session: Session, series_id: int) -> list[CompactionCurvePoint]:
    query = select(CompactionCurvePoint).where(CompactionCurvePoint.series_id == series_id)
    return list(session.exec(query.order_by(col(CompactionCurvePoint.water_content))).all())


# --- the analysis --------------------------------------------------------------------------


@dataclass(frozen=True)
class MemberResult:
    """One member as shown: its test, the k20 the viewer may see, and its classing."""

    member: SeriesMember
    test: PermeabilityTest
    lab_id: str
    k_ref_m_per_s: float | None
    saturation: float
    meets_limit: bool | None
    acceptable: bool | None
    relative_compaction_pct: float | None
    water_content_from_optimum: float | None


@dataclass(frozen=True)
class SeriesResults:
    series: CompactionSeries
    members: tuple[MemberResult, ...]
    curve_points: tuple[CompactionCurvePoint, ...]
    analysis: SeriesAnalysis

    @property
    def with_k(self) -> list[MemberResult]:
        return [m for m in self.members if m.k_ref_m_per_s is not None]


def _current(session: Session, test: PermeabilityTest) -> PermeabilityTest:
    """The latest revision of a test (a correction supersedes the one a member names)."""
    seen = 0
    while test.superseded_by_id is not None and seen < 100:
        newer = session.get(PermeabilityTest, test.superseded_by_id)
        if newer is None:
            break
        test, seen = newer, seen + 1
    return test


def _visible_k(test: PermeabilityTest, user: User) -> float | None:
    if is_client(user) and test.state not in CLIENT_RESULT_STATES:
        return None
    return test.result_k_ref_m_per_s


def series_results(
    session: Session, series_id: int, *, user: User, only_tests: set[int] | None = None
) -> SeriesResults:
    """The series with each member's k20 (clients: certified results only; `only_tests`
    narrows the k20 shown to those tests, e.g. a certificate's) and the engine's analysis."""
    series = get_series(session, series_id, user=user)
    members = members_of(session, series_id)
    rows: list[tuple[SeriesMember, PermeabilityTest, str, float | None]] = []
    for member in members:
        found = session.exec(
            select(PermeabilityTest, Sample)
            .join(Sample, col(Sample.id) == col(PermeabilityTest.sample_id))
            .where(PermeabilityTest.id == member.test_id)
        ).one()
        test = _current(session, found[0])
        k = _visible_k(test, user)
        if only_tests is not None and test.id not in only_tests:
            k = None
        rows.append((member, test, found[1].lab_id, k))
    points = curve_points_of(session, series_id)
    with_k = [(m, k) for m, _t, _l, k in rows if k is not None]
    analysis = analyse_series(
        [SeriesSpecimen(m.label, m.water_content, m.dry_density_kg_per_m3, k) for m, k in with_k],
        [SeriesPoint(m.water_content, m.dry_density_kg_per_m3) for m, *_ in rows],
        k_max_m_per_s=series.spec_k_max_m_per_s,
        specific_gravity=series.specific_gravity,
        min_saturation=series.min_saturation,
        curve_points=[SeriesPoint(p.water_content, p.dry_density_kg_per_m3) for p in points],
    )
    classed = {m.id: c for (m, _k), c in zip(with_k, analysis.classified, strict=False)}
    results = []
    for (member, test, lab_id, k), saturation in zip(rows, analysis.saturations, strict=True):
        c = classed.get(member.id)
        results.append(
            MemberResult(
                member=member,
                test=test,
                lab_id=lab_id,
                k_ref_m_per_s=k,
                saturation=saturation,
                meets_limit=c.meets_limit if c else None,
                acceptable=c.acceptable if c else None,
                relative_compaction_pct=(
                    100.0 * member.dry_density_kg_per_m3 / analysis.curve.max_dry_density_kg_per_m3
                    if analysis.curve
                    else None
                ),
                water_content_from_optimum=(
                    member.water_content - analysis.curve.optimum_water_content
                    if analysis.curve
                    else None
                ),
            )
        )
    return SeriesResults(series, tuple(results), tuple(points), analysis)


def series_json(results: SeriesResults) -> dict[str, Any]:
    """A series for export.json and the API: every value as typed beside its SI value."""
    s = results.series
    a = results.analysis
    zone = a.zone
    return {
        **SeriesRead.model_validate(s).model_dump(mode="json"),
        "water_density_kg_per_m3": SERIES_WATER_DENSITY_KG_PER_M3,
        "members": [
            {
                **MemberRead.model_validate(m.member).model_dump(mode="json"),
                "lab_id": m.lab_id,
                "current_test_id": m.test.id,
                "test_state": m.test.state,
                "k20_m_per_s": m.k_ref_m_per_s,
                "reference_temperature_c": m.test.reference_temperature_c,
                "degree_of_saturation": m.saturation,
                "meets_limit": m.meets_limit,
                "acceptable": m.acceptable,
                "relative_compaction_pct": m.relative_compaction_pct,
            }
            for m in results.members
        ],
        "compaction_curve": {
            "points": [
                CurvePointRead.model_validate(p).model_dump(mode="json")
                for p in results.curve_points
            ],
            "optimum_water_content": a.curve.optimum_water_content if a.curve else None,
            "max_dry_density_kg_per_m3": a.curve.max_dry_density_kg_per_m3 if a.curve else None,
            "problem": a.curve_problem or None,
        },
        "acceptable_zone": None
        if zone is None
        else {
            "hull": [
                {"water_content": p.water_content, "dry_density_kg_per_m3": p.dry_density_kg_per_m3}
                for p in zone.hull
            ],
            "conflicts": [results.with_k[j].member.label for j in zone.conflicts],
            "saturation_bound": zone.saturation_bound,
            "acceptable_below_bound": [
                results.with_k[j].member.label for j in zone.acceptable_below_bound
            ],
            "method": "Daniel & Benson (1990), J. Geotech. Eng. 116(12)",
        },
    }


def project_series_json(session: Session, project_id: int, *, user: User) -> list[dict[str, Any]]:
    """Every compaction series of a project as export.json carries it (`series`)."""
    return [
        series_json(series_results(session, s.id, user=user))
        for s in project_series(session, project_id, user=user)
        if s.id is not None
    ]
