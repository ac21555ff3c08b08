"""The compaction-series section of a project summary certificate: per series a table of its
specimens (moulding state as typed, degree of saturation, k20 of the certified tests, against
the limit), the acceptable zone in words, and small plots of k20 against moulding water
content and dry density with the limit (after Daniel & Benson 1990, docs/methods.md §14.7).

Only k20 of the tests the certificate reports is shown; a member whose test is not on it is
listed without k20."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

from sqlmodel import Session

from service.accounts.models import User
from service.series.service import SeriesResults, project_series, series_results

if TYPE_CHECKING:
    from service.certificates.render import CertificatePDF

HEADINGS = (
    "Specimen",
    "Lab ID",
    "Water content",
    "Dry density",
    "S (%)",
    "k20 (m/s)",
    "Against the limit",
)
MEETS = "meets the limit"
SERIES_CAUTION = (
    "The acceptable zone describes only the specimens tested. Its use for accepting a liner "
    "in the field, with other criteria such as strength and shrinkage, is for the project's "
    "engineer applying the local codes and regulations and licensed practice."
)


@dataclass(frozen=True)
class SeriesRow:
    label: str
    lab_id: str
    water_content: str
    dry_density: str
    saturation_pct: float
    water_content_pct: float
    dry_density_mg_per_m3: float
    k_ref_m_per_s: float | None
    verdict: str  # meets the limit | above the limit | below the least saturation | -


@dataclass(frozen=True)
class SeriesSection:
    name: str
    material: str
    specific_gravity: float
    limit_text: str
    limit_m_per_s: float | None
    min_saturation_text: str
    rows: tuple[SeriesRow, ...]
    zone_lines: tuple[str, ...]
    curve_text: str


def _verdict(acceptable: bool | None, meets: bool | None) -> str:
    if acceptable is None:
        return "-"
    if acceptable:
        return MEETS
    return "below the least saturation" if meets else "above the limit"


def _zone_lines(results: SeriesResults) -> tuple[str, ...]:
    zone = results.analysis.zone
    if zone is None:
        return ("No limit on k20 is set: no acceptable zone.",)
    with_k = results.with_k
    met = sum(1 for m in with_k if m.acceptable)
    lines = [f"{met} of {len(with_k)} specimens with a certified k20 meet the limit."]
    if len(zone.hull) >= 3:
        corners = ", ".join(
            f"({100 * p.water_content:.1f} %, {p.dry_density_kg_per_m3 / 1000:.3f} Mg/m3)"
            for p in zone.hull
        )
        lines.append(f"Acceptable zone: the region enclosing {corners}.")
    if zone.saturation_bound is not None:
        lines.append(
            "Every specimen moulded at a degree of saturation of "
            f"{100 * zone.saturation_bound:.1f} % or more met the limit."
        )
    for j in zone.conflicts:
        lines.append(
            f"{with_k[j].member.label} did not meet the limit yet lies inside the zone: "
            "the zone is to be drawn by judgement."
        )
    return tuple(lines)


def build_series_sections(
    session: Session, project_id: int, test_ids: Sequence[int], *, issuer: User
) -> tuple[SeriesSection, ...]:
    """The project's compaction series with k20 of the certificate's tests only."""
    sections = []
    for series in project_series(session, project_id, user=issuer):
        assert series.id is not None
        results = series_results(session, series.id, user=issuer, only_tests=set(test_ids))
        curve = results.analysis.curve
        sections.append(
            SeriesSection(
                name=series.name,
                material=series.material,
                specific_gravity=series.specific_gravity,
                limit_text=series.spec_k_max_text,
                limit_m_per_s=series.spec_k_max_m_per_s,
                min_saturation_text=series.min_saturation_text,
                rows=tuple(
                    SeriesRow(
                        label=m.member.label,
                        lab_id=m.lab_id,
                        water_content=m.member.water_content_text,
                        dry_density=m.member.dry_density_text,
                        saturation_pct=100 * m.saturation,
                        water_content_pct=100 * m.member.water_content,
                        dry_density_mg_per_m3=m.member.dry_density_kg_per_m3 / 1000,
                        k_ref_m_per_s=m.k_ref_m_per_s,
                        verdict=_verdict(m.acceptable, m.meets_limit),
                    )
                    for m in results.members
                ),
                zone_lines=_zone_lines(results),
                curve_text=(
                    f"Compaction curve: optimum water content "
                    f"{100 * curve.optimum_water_content:.1f} %, maximum dry density "
                    f"{curve.max_dry_density_kg_per_m3 / 1000:.3f} Mg/m3."
                    if curve
                    else ""
                ),
            )
        )
    return tuple(sections)


def render_series(pdf: CertificatePDF, sections: Sequence[SeriesSection]) -> None:
    """Draw each series: heading, table, zone in words, the two plots, the caution."""
    from service.certificates.document import format_k

    for section in sections:
        pdf.heading(f"Compaction series: {section.name}")
        pdf.paragraph(
            f"{section.material or 'Material as described'}; Gs {section.specific_gravity:.2f}; "
            f"limit on k20 {section.limit_text or 'none'}"
            + (
                f"; least degree of saturation {section.min_saturation_text}"
                if section.min_saturation_text
                else ""
            )
            + ".",
            size=8,
        )
        pdf.table_rows(
            [
                "Specimen",
                "Lab ID",
                "Water content",
                "Dry density",
                "S (%)",
                "k20 (m/s)",
                "Against the limit",
            ],
            [
                [
                    r.label,
                    r.lab_id,
                    r.water_content,
                    r.dry_density,
                    f"{r.saturation_pct:.1f}",
                    format_k(r.k_ref_m_per_s) if r.k_ref_m_per_s is not None else "-",
                    r.verdict,
                ]
                for r in section.rows
            ],
            [20, 18, 24, 30, 14, 22, 34],
            align=["LEFT", "LEFT", "RIGHT", "RIGHT", "RIGHT", "RIGHT", "LEFT"],
            font_size=7,
        )
        for line in (*section.zone_lines, section.curve_text):
            if line:
                pdf.paragraph(line, size=8)
        points = [r for r in section.rows if r.k_ref_m_per_s is not None]
        if points:
            pdf.ensure_space(62)
            top = pdf.get_y() + 4
            for x0, x_label, attribute in (
                (15, "moulding water content (%)", "water_content_pct"),
                (105, "dry density (Mg/m3)", "dry_density_mg_per_m3"),
            ):
                pdf.log_plot(
                    x=x0,
                    y=top,
                    width=85,
                    height=56,
                    points=[
                        (getattr(r, attribute), r.k_ref_m_per_s or 0.0, r.verdict == MEETS)
                        for r in points
                    ],
                    log_axis="y",
                    x_label=x_label,
                    y_label="k20 (m/s)",
                    limit=section.limit_m_per_s,
                    legend="filled: meets the limit",
                )
            pdf.set_y(top + 58)
        pdf.paragraph(SERIES_CAUTION, size=7.5)
