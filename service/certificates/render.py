"""Render a certificate document to PDF bytes (fpdf2, core fonts, vector plots and QR code)."""

from __future__ import annotations

import math
from collections.abc import Sequence
from datetime import datetime
from pathlib import Path

import segno
from fpdf import FPDF, FontFace
from fpdf.enums import XPos, YPos

from service.certificates.document import (
    SIGNOFF_LABELS,
    CertificateDocument,
    SampleSection,
    TestSection,
    format_k,
)
from service.certificates.series import render_series
from service.common import CertificateKind
from service.figures import power_of_ten
from service.scope.service import OUTSIDE as OUTSIDE_SCOPE
from service.scope.service import UNCONFIRMED

INK = (25, 32, 40)
MUTED = (95, 104, 114)
RULE = (190, 196, 202)
ACCENT = (21, 94, 117)
SHADE = (236, 241, 244)
WATERMARK = (222, 226, 230)
DRAFT_MARK = "DRAFT \u2014 not for use"
STATUS_COLOURS = {
    "pass": (30, 120, 60),
    "warn": (170, 110, 0),
    "fail": (170, 30, 30),
    "not_applicable": MUTED,
}
STATUS_TEXT = {"pass": "pass", "warn": "warning", "fail": "FAIL", "not_applicable": "n/a"}
COMPLIANCE_COLOURS = {
    "complies": (30, 120, 60),
    "does_not_comply": (170, 30, 30),
    "no_limit": MUTED,
}
# DejaVu Sans Condensed (Bitstream Vera licence, fonts/LICENSE-DejaVu.txt), embedded as a subset: it
# draws ×, superscripts, ≤, ±, Greek symbols and client names in non-Latin scripts, which the
# PDF core fonts cannot.
FONT = "DejaVu"
FONT_FILES = {
    "": Path(__file__).with_name("fonts") / "DejaVuSansCondensed.ttf",
    "B": Path(__file__).with_name("fonts") / "DejaVuSansCondensed-Bold.ttf",
}


def _date(value: datetime) -> str:
    return value.strftime("%Y-%m-%d %H:%M UTC")


class CertificatePDF(FPDF):
    def __init__(self, document: CertificateDocument) -> None:
        super().__init__(orientation="portrait", unit="mm", format="A4")
        self.document = document
        for style, path in FONT_FILES.items():
            self.add_font(FONT, style, str(path))
        self.set_margins(15, 24, 15)
        self.set_auto_page_break(auto=True, margin=20)
        self.set_title(f"{document.title} {document.number} rev {document.revision}")
        self.set_author(document.lab.name)
        self.set_creator("Seepline")
        self.set_subject(f"{document.project_number} {document.project_name}")

    def header(self) -> None:
        doc = self.document
        if doc.draft:
            self._watermark()
        self.set_y(10)
        self.set_font(FONT, "B", 10)
        self.set_text_color(*ACCENT)
        self.cell(110, 5, (doc.lab.name))
        self.set_font(FONT, "", 9)
        self.set_text_color(*INK)
        self.cell(
            0,
            5,
            (DRAFT_MARK if doc.draft else f"Certificate {doc.number}  rev {doc.revision}"),
            align="R",
            new_x=XPos.LMARGIN,
            new_y=YPos.NEXT,
        )
        self.set_font(FONT, "", 7.5)
        self.set_text_color(*MUTED)
        self.cell(110, 4, (doc.lab.address.replace("\n", ", ")))
        when = "Not issued" if doc.draft else f"Issued {_date(doc.issued_at)}"
        self.cell(0, 4, when, align="R")
        self.set_draw_color(*RULE)
        self.line(15, 20, 195, 20)
        self.set_y(24)
        self.set_text_color(*INK)

    def footer(self) -> None:
        doc = self.document
        self.set_y(-14)
        self.set_draw_color(*RULE)
        self.line(15, self.get_y() - 1, 195, self.get_y() - 1)
        self.set_font(FONT, "", 7.5)
        self.set_text_color(*MUTED)
        line = (
            f"{DRAFT_MARK}: not signed, not numbered, not stored as issued"
            if doc.draft
            else f"Verification code {doc.verification_code}  -  {doc.verify_url}"
        )
        self.cell(140, 4, (line))
        self.cell(0, 4, f"Page {self.page_no()} of {{nb}}", align="R")

    def _watermark(self) -> None:
        """The draft mark across the middle of the page, in light grey under the content."""
        self.set_font(FONT, "B", 54)
        self.set_text_color(*WATERMARK)
        with self.rotation(40, x=105, y=150):
            self.text(105 - self.get_string_width(DRAFT_MARK) / 2, 150, (DRAFT_MARK))
        self.set_text_color(*INK)

    # Building blocks ------------------------------------------------------------------

    def heading(self, text: str, size: float = 11) -> None:
        self.ensure_space(14)
        self.ln(2)
        self.set_font(FONT, "B", size)
        self.set_text_color(*ACCENT)
        self.cell(0, 6, (text), new_x=XPos.LMARGIN, new_y=YPos.NEXT)
        self.set_text_color(*INK)
        self.ln(0.5)

    def ensure_space(self, height: float) -> None:
        if self.get_y() + height > self.h - self.b_margin:
            self.add_page()

    def paragraph(self, text: str, size: float = 8.5, style: str = "") -> None:
        self.set_font(FONT, style, size)
        self.multi_cell(0, size * 0.48, (text), new_x=XPos.LMARGIN, new_y=YPos.NEXT)

    def key_values(
        self, rows: Sequence[tuple[str, str]], *, key_width: float = 42, width: float = 180
    ) -> None:
        x0 = self.get_x()
        for key, value in rows:
            self.ensure_space(5)
            self.set_x(x0)
            self.set_font(FONT, "", 8)
            self.set_text_color(*MUTED)
            self.cell(key_width, 4.4, (key))
            self.set_text_color(*INK)
            self.set_font(FONT, "", 8.5)
            self.multi_cell(
                width - key_width, 4.4, (value or "-"), new_x=XPos.LMARGIN, new_y=YPos.NEXT
            )

    def table_rows(
        self,
        headings: Sequence[str],
        rows: Sequence[Sequence[str]],
        widths: Sequence[float],
        *,
        align: Sequence[str] | None = None,
        font_size: float = 7.8,
        colours: Sequence[Sequence[tuple[int, int, int] | None]] | None = None,
    ) -> None:
        self.set_font(FONT, "", font_size)
        self.set_draw_color(*RULE)
        self.set_fill_color(255, 255, 255)
        heading_style = FontFace(emphasis="BOLD", color=INK, fill_color=SHADE)
        with self.table(
            col_widths=tuple(widths),
            width=sum(widths),
            align="LEFT",
            text_align=tuple(align) if align else "LEFT",
            headings_style=heading_style,
            line_height=font_size * 0.5,
            padding=(0.8, 1.2),
            borders_layout="HORIZONTAL_LINES",
            cell_fill_mode="NONE",
        ) as table:
            table.row(list(headings))
            for r, row in enumerate(rows):
                line = table.row()
                for c, text in enumerate(row):
                    colour = colours[r][c] if colours else None
                    style = FontFace(color=colour, emphasis="BOLD") if colour else None
                    line.cell(text, style=style)
        self.ln(1.5)

    def qr_code(self, url: str, x: float, y: float, size: float) -> None:
        """Draw the QR code as vector squares (crisp at any zoom, no image decoding)."""
        qr = segno.make(url, error="m")
        matrix = qr.matrix
        count = len(matrix)
        cell = size / count
        self.set_fill_color(0, 0, 0)
        for row_index, row in enumerate(matrix):
            run_start: int | None = None
            for col_index in range(count + 1):
                dark = col_index < count and bool(row[col_index])
                if dark and run_start is None:
                    run_start = col_index
                elif not dark and run_start is not None:
                    self.rect(
                        x + run_start * cell,
                        y + row_index * cell,
                        (col_index - run_start) * cell,
                        cell,
                        style="F",
                    )
                    run_start = None

    def log_plot(
        self,
        *,
        x: float,
        y: float,
        width: float,
        height: float,
        points: Sequence[tuple[float, float, bool]],
        log_axis: str,
        x_label: str,
        y_label: str,
        limit: float | None = None,
        invert_y: bool = False,
        legend: str = "filled: determinations used",
    ) -> None:
        """A small scatter plot; `log_axis` ('x' or 'y') is logarithmic, the other linear.

        Each point is (x, y, highlighted); `limit` draws the specification line on the log axis."""
        left, bottom = x + 14, y + height - 9
        plot_w, plot_h = width - 18, height - 13
        log_values = [p[0] if log_axis == "x" else p[1] for p in points]
        lin_values = [p[1] if log_axis == "x" else p[0] for p in points]
        if limit:
            log_values = [*log_values, limit]
        positive = [v for v in log_values if v > 0] or [1e-9]
        lo = math.floor(math.log10(min(positive)) - 0.2)
        hi = math.ceil(math.log10(max(positive)) + 0.2)
        if hi - lo < 2:
            lo, hi = lo - 1, hi + 1
        lin_lo, lin_hi = min(lin_values), max(lin_values)
        pad = (lin_hi - lin_lo) * 0.1 or 0.5
        lin_lo, lin_hi = lin_lo - pad, lin_hi + pad
        if log_axis == "y":
            lin_lo = min(lin_lo, 0.5)
        if invert_y:
            lin_lo = min(lin_lo, 0.0)

        def log_pos(value: float) -> float:
            return (math.log10(value) - lo) / (hi - lo)

        def lin_pos(value: float) -> float:
            return (value - lin_lo) / (lin_hi - lin_lo)

        def to_page(px: float, py: float) -> tuple[float, float]:
            fy = 1 - py if invert_y else py
            return left + px * plot_w, bottom - fy * plot_h

        self.set_draw_color(*RULE)
        self.set_line_width(0.15)
        self.set_font(FONT, "", 6.5)
        self.set_text_color(*MUTED)
        for exponent in range(lo, hi + 1):
            frac = log_pos(10.0**exponent)
            if log_axis == "y":
                _, py = to_page(0, frac)
                self.line(left, py, left + plot_w, py)
                self.text(left - 11, py + 1, power_of_ten("1", exponent).replace("1 × ", ""))
            else:
                px, _ = to_page(frac, 0)
                self.line(px, bottom - plot_h, px, bottom)
                self.text(px - 5, bottom + 3.5, power_of_ten("1", exponent).replace("1 × ", ""))
        ticks = _nice_ticks(lin_lo, lin_hi)
        for tick in ticks:
            frac = lin_pos(tick)
            if log_axis == "y":
                px, _ = to_page(frac, 0)
                self.line(px, bottom, px, bottom + 1)
                self.text(px - 1.5, bottom + 3.5, f"{tick:g}")
            else:
                _, py = to_page(0, frac)
                self.line(left - 1, py, left, py)
                self.text(left - 8, py + 1, f"{tick:g}")
        self.set_draw_color(*INK)
        self.set_line_width(0.25)
        self.rect(left, bottom - plot_h, plot_w, plot_h)
        if limit:
            frac = log_pos(limit)
            self.set_draw_color(170, 30, 30)
            self.set_dash_pattern(dash=1.2, gap=0.8)
            if log_axis == "y":
                _, py = to_page(0, frac)
                self.line(left, py, left + plot_w, py)
            else:
                px, _ = to_page(frac, 0)
                self.line(px, bottom - plot_h, px, bottom)
            self.set_dash_pattern()
        for px_value, py_value, highlighted in points:
            if log_axis == "y":
                fx, fy = lin_pos(px_value), log_pos(py_value)
            else:
                fx, fy = log_pos(px_value), lin_pos(py_value)
            cx, cy = to_page(fx, fy)
            if highlighted:
                self.set_fill_color(*ACCENT)
                self.set_draw_color(*ACCENT)
                self.circle(cx, cy, 0.9, style="FD")
            else:
                self.set_draw_color(*MUTED)
                self.circle(cx, cy, 0.9, style="D")
        self.set_text_color(*INK)
        self.set_font(FONT, "", 7)
        self.text(left + plot_w / 2 - len(x_label) * 0.6, bottom + 7.5, (x_label))
        self.text(x, y - 0.5, (y_label))
        self.set_font(FONT, "", 6.5)
        self.set_text_color(*MUTED)
        if limit:
            legend += "; dashed red: specification limit"
        self.text(left, bottom + 10.5, (legend))
        self.set_text_color(*INK)
        self.set_line_width(0.2)


def _nice_ticks(lo: float, hi: float) -> list[float]:
    span = hi - lo
    if span <= 0:
        return [lo]
    step = 10 ** math.floor(math.log10(span / 4))
    for factor in (1, 2, 5, 10):
        if span / (step * factor) <= 6:
            step *= factor
            break
    first = math.ceil(lo / step) * step
    ticks = []
    value = first
    while value <= hi + 1e-12:
        ticks.append(round(value, 10))
        value += step
    return ticks


# Sections ---------------------------------------------------------------------------------


def _title_block(pdf: CertificatePDF, doc: CertificateDocument) -> None:
    top = pdf.get_y()
    pdf.set_font(FONT, "B", 15)
    pdf.set_text_color(*INK)
    pdf.multi_cell(140, 7, (doc.title), new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    pdf.ln(1)
    by = f"{doc.issued_by.name} ({doc.issued_by.role.replace('_', ' ')})"
    if doc.draft:
        pdf.key_values(
            [
                ("Status", DRAFT_MARK),
                ("Certificate number", "given at issue"),
                ("Prepared", _date(doc.issued_at)),
                ("Prepared by", by),
            ],
            key_width=34,
            width=140,
        )
        pdf.ln(2)
        return
    pdf.key_values(
        [
            ("Certificate number", f"{doc.number}"),
            ("Revision", str(doc.revision)),
            ("Issued", _date(doc.issued_at)),
            ("Issued by", by),
            ("Verification code", doc.verification_code),
            ("Verify at", doc.verify_url),
        ],
        key_width=34,
        width=140,
    )
    qr_size = 30.0
    pdf.qr_code(doc.verify_url, 195 - qr_size, top, qr_size)
    pdf.set_font(FONT, "", 6.5)
    pdf.set_text_color(*MUTED)
    pdf.text(195 - qr_size + 1, top + qr_size + 3, "Scan to check this certificate")
    pdf.set_text_color(*INK)
    pdf.set_y(max(pdf.get_y(), top + qr_size + 5))
    if doc.supersedes:
        pdf.set_fill_color(*SHADE)
        pdf.set_font(FONT, "B", 8.5)
        text = f"This revision replaces certificate {doc.supersedes}."
        if doc.supersede_reason:
            text += f" Reason: {doc.supersede_reason}"
        pdf.multi_cell(0, 4.6, (text), fill=True, new_x=XPos.LMARGIN, new_y=YPos.NEXT)
        pdf.ln(1)


def _parties(pdf: CertificatePDF, doc: CertificateDocument) -> None:
    pdf.heading("Laboratory, client and project")
    spec = doc.spec_text or "none stated"
    if doc.spec_text and doc.spec_source:
        spec += f" ({doc.spec_source})"
    pdf.key_values(
        [
            ("Laboratory", ", ".join(p for p in (doc.lab.name, doc.lab.address) if p)),
            *([("Accreditation", doc.lab.accreditation)] if doc.lab.accreditation else []),
            ("Client", ", ".join(p for p in (doc.client.name, doc.client.address) if p)),
            ("Project", f"{doc.project_number}  {doc.project_name}"),
            ("Site", doc.site),
            ("Specification limit", f"k20 ≤ {spec}" if doc.spec_text else spec),
        ]
    )


def _sample_block(pdf: CertificatePDF, sample: SampleSection) -> None:
    pdf.heading(f"Sample {sample.lab_id}")
    pdf.key_values(
        [
            ("Lab ID / client ID", f"{sample.lab_id}  /  {sample.client_sample_id}"),
            ("Location", sample.location),
            ("Depth", sample.depth),
            ("Sample type", sample.sample_type),
            ("Description", sample.description),
            ("Condition on receipt", sample.condition),
            ("Received", _date(sample.received_at)),
        ]
    )


def _side_by_side(
    pdf: CertificatePDF,
    left_title: str,
    left: Sequence[tuple[str, str]],
    right_title: str,
    right: Sequence[tuple[str, str]],
) -> None:
    height = 5 + 4.4 * max(len(left), len(right), 1)
    pdf.ensure_space(height)
    top = pdf.get_y()
    pdf.set_font(FONT, "B", 8.5)
    pdf.cell(88, 5, (left_title))
    pdf.cell(0, 5, (right_title), new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    start = pdf.get_y()
    pdf.key_values(left or [("-", "")], key_width=42, width=88)
    end_left = pdf.get_y()
    pdf.set_y(start)
    pdf.set_left_margin(107)
    pdf.set_x(107)
    pdf.key_values(right or [("-", "")], key_width=38, width=88)
    pdf.set_left_margin(15)
    pdf.set_y(max(end_left, pdf.get_y(), top + height))


def _test_block(pdf: CertificatePDF, test: TestSection) -> None:
    title = f"Test {test.series}"
    if test.revision > 1:
        title += f" (revision {test.revision})"
    pdf.heading(f"{title}: {test.method_label}, {test.standard}", size=10)
    scope = "" if test.in_scope else f" ({OUTSIDE_SCOPE})"
    rows = [
        ("Method", test.method_label),
        ("Standard", test.standard + scope),
        ("Rules applied", test.rules_words),
        ("Permeant", test.permeant),
        (
            "Reference temperature",
            f"{test.reference_temperature_c:g} °C (viscosity ratio, {test.temperature_correction})",
        ),
        ("Specimen preparation", test.preparation),
    ]
    if test.apparatus:
        rows.append(("Apparatus", "; ".join(test.apparatus)))
    if test.specimen_description:
        rows.append(("Specimen description", test.specimen_description))
    if test.correction_reason:
        rows.append(("Correction", test.correction_reason))
    pdf.key_values(rows)
    pdf.ln(1)
    _side_by_side(pdf, "Specimen as prepared", test.measured, "At permeation (derived)", test.state)
    if test.conditions:
        pdf.ln(1)
        pdf.set_font(FONT, "B", 8.5)
        pdf.cell(0, 5, "Test conditions", new_x=XPos.LMARGIN, new_y=YPos.NEXT)
        pdf.key_values(test.conditions)
    _stages_block(pdf, test)
    pdf.ln(1)
    pdf.ensure_space(20)
    pdf.set_font(FONT, "B", 8.5)
    pdf.cell(0, 5, "Trials", new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    trial_rows = []
    for trial in test.trials:
        trial_rows.append(
            [
                str(trial.seq),
                trial.entries
                + (f" [excluded: {trial.excluded_reason}]" if trial.excluded_reason else ""),
                trial.temperature,
                "-" if trial.gradient is None else f"{trial.gradient:.3g}",
                format_k(trial.k_m_per_s),
                format_k(trial.k_ref_m_per_s),
                "yes" if trial.used else "no",
            ]
        )
    pdf.table_rows(
        ["#", "Recorded (as typed)", "Temp.", "i", "k at T (m/s)", "k20 (m/s)", "Used"],
        trial_rows,
        [7, 78, 17, 11, 24, 24, 10],
        align=["CENTER", "LEFT", "RIGHT", "RIGHT", "RIGHT", "RIGHT", "CENTER"],
    )
    _result_block(pdf, test)


def _stages_block(pdf: CertificatePDF, test: TestSection) -> None:
    """Flexible-wall tests: each recorded stage with its figures."""
    if not test.stages:
        return
    pdf.ln(1)
    pdf.ensure_space(20)
    pdf.set_font(FONT, "B", 8.5)
    pdf.cell(0, 5, "Stages of the flexible-wall test", new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    for title, lines in test.stages:
        pdf.ensure_space(10)
        pdf.set_font(FONT, "B", 8.5)
        pdf.cell(0, 4.6, (title), new_x=XPos.LMARGIN, new_y=YPos.NEXT)
        pdf.key_values(lines)


def _result_block(pdf: CertificatePDF, test: TestSection) -> None:
    pdf.ensure_space(62)
    pdf.set_font(FONT, "B", 8.5)
    pdf.cell(0, 5, "Result", new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    top = pdf.get_y()
    u_text = "not evaluated (no input uncertainties recorded)"
    if test.expanded_u_m_per_s is not None and test.expanded_u_rel is not None:
        u_text = (
            f"± {format_k(test.expanded_u_m_per_s)} m/s "
            f"({test.expanded_u_rel * 100:.1f} %, about 95 %; coverage factor {test.coverage}, "
            "ν_eff: effective degrees of freedom, Welch–Satterthwaite)"
        )
    reference = f"{test.reference_temperature_c:g}"
    pdf.set_fill_color(*SHADE)
    pdf.rect(15, top, 92, 32, style="F")
    pdf.set_xy(17, top + 1.5)
    pdf.set_font(FONT, "", 8)
    pdf.set_text_color(*MUTED)
    pdf.cell(0, 4, f"Hydraulic conductivity at {reference} °C, k{reference}")
    pdf.set_xy(17, top + 6)
    pdf.set_font(FONT, "B", 14)
    pdf.set_text_color(*INK)
    pdf.cell(0, 7, f"{format_k(test.k_ref_m_per_s)} m/s")
    pdf.set_xy(17, top + 13.5)
    pdf.set_font(FONT, "", 7.5)
    pdf.multi_cell(88, 3.6, f"Expanded uncertainty U: {u_text}")
    pdf.set_x(17)
    alternates = f"= {format_k(test.k_ref_cm_per_s)} cm/s" if test.k_ref_cm_per_s else ""
    if test.k_ref_ft_per_day:
        alternates += f" = {format_k(test.k_ref_ft_per_day)} ft/day"
    pdf.multi_cell(88, 3.6, alternates)
    pdf.set_x(17)
    pdf.multi_cell(
        88,
        3.6,
        (f"k at test temperature (mean of determinations used): {format_k(test.k_m_per_s)} m/s"),
    )
    plot_points = [(float(t.seq), t.k_ref_m_per_s, t.used) for t in test.trials if t.k_ref_m_per_s]
    if plot_points:
        pdf.log_plot(
            x=110,
            y=top + 3,
            width=85,
            height=48,
            points=plot_points,
            log_axis="y",
            x_label="trial",
            y_label="k20 (m/s)",
            limit=test.spec_limit_m_per_s,
        )
    pdf.set_y(top + 34)
    pdf.set_font(FONT, "B", 9)
    pdf.set_text_color(*COMPLIANCE_COLOURS.get(test.compliance, INK))
    pdf.multi_cell(92, 4.4, (test.compliance_text), new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    pdf.set_text_color(*INK)
    if test.compliance != "no_limit":
        pdf.set_font(FONT, "", 7)
        pdf.multi_cell(
            92,
            3.4,
            (f"Decision rule: {test.decision_rule}."),
            new_x=XPos.LMARGIN,
            new_y=YPos.NEXT,
        )
    pdf.set_y(max(pdf.get_y(), top + 52))
    pdf.ln(1)
    pdf.set_font(FONT, "B", 8.5)
    pdf.cell(0, 5, "Checks of the standard", new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    rows = []
    colours = []
    for check in test.checks:
        label = f"{check.label} [1]" if check.confirmed is False else check.label
        rows.append([label, STATUS_TEXT.get(check.status, check.status), check.message])
        colours.append([None, STATUS_COLOURS.get(check.status), None])
    pdf.table_rows(
        ["Check", "Status", "Finding"], rows, [40, 16, 124], colours=colours, font_size=7.4
    )
    if any(check.confirmed is False for check in test.checks):
        pdf.paragraph(f"[1] {UNCONFIRMED}.", size=7)
    pdf.set_font(FONT, "B", 8.5)
    pdf.cell(0, 5, "Deviations from the standard", new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    if test.deviations:
        for deviation in test.deviations:
            pdf.paragraph(f"- {deviation}", size=8)
    else:
        pdf.paragraph("None: every evaluated check of the standard passed.", size=8)
    pdf.ln(1)
    pdf.set_font(FONT, "B", 8.5)
    pdf.cell(0, 5, "Sign-offs", new_x=XPos.LMARGIN, new_y=YPos.NEXT)
    pdf.table_rows(
        ["", "Name", "Role", "Date"],
        [
            [
                SIGNOFF_LABELS.get(s.meaning, s.meaning),
                s.name,
                s.role.replace("_", " "),
                _date(s.signed_at),
            ]
            for s in test.signoffs
        ]
        or [["-", "no sign-offs recorded", "", ""]],
        [28, 70, 36, 46],
    )
    pdf.set_font(FONT, "", 6.5)
    pdf.set_text_color(*MUTED)
    pdf.multi_cell(
        0,
        3,
        (
            f"Reduced by Seepline engine {test.engine_version}; "
            f"input hash {test.input_hash or '-'}; test record {test.test_id}."
        ),
        new_x=XPos.LMARGIN,
        new_y=YPos.NEXT,
    )
    pdf.set_text_color(*INK)


def _project_table(pdf: CertificatePDF, doc: CertificateDocument) -> None:
    pdf.heading("Results")
    rows = []
    colours = []
    points: list[tuple[float, float, bool]] = []
    for sample in doc.samples:
        for test in sample.tests:
            u = "-" if test.expanded_u_rel is None else f"{test.expanded_u_rel * 100:.1f}"
            verdict = {
                "complies": "complies",
                "does_not_comply": "does not comply",
                "undecided": "not decidable",
                "no_limit": "no limit",
            }[test.compliance]
            rows.append(
                [
                    sample.lab_id,
                    sample.client_sample_id,
                    sample.location.split(" (")[0],
                    sample.depth,
                    test.method_label,
                    test.standard + ("" if test.in_scope else " *"),
                    format_k(test.k_ref_m_per_s),
                    u,
                    verdict,
                ]
            )
            row_colours: list[tuple[int, int, int] | None] = [None] * 8
            row_colours.append(COMPLIANCE_COLOURS.get(test.compliance))
            colours.append(row_colours)
            if sample.depth_top_m is not None:
                points.append(
                    (test.k_ref_m_per_s, sample.depth_top_m, test.compliance != "does_not_comply")
                )
    pdf.table_rows(
        [
            "Lab ID",
            "Client ID",
            "Location",
            "Depth",
            "Method",
            "Standard",
            "k20 (m/s)",
            "U (%)",
            "Compliance",
        ],
        rows,
        [16, 18, 16, 28, 30, 20, 18, 11, 23],
        align=["LEFT"] * 6 + ["RIGHT", "RIGHT", "LEFT"],
        font_size=7,
        colours=colours,
    )
    notes = [
        "U: expanded uncertainty, about 95 % coverage; coverage factors: "
        + "; ".join(
            f"{sample.lab_id} test {test.series}: {test.coverage or 'no uncertainty stated'}"
            for sample in doc.samples
            for test in sample.tests
        )
        + "."
    ]
    if any(not test.in_scope for test in doc.tests):
        notes.append(f"* {OUTSIDE_SCOPE.capitalize()} of the laboratory.")
    decision_rules = sorted({t.decision_rule for t in doc.tests if t.compliance != "no_limit"})
    notes += [f"Decision rule: {rule}." for rule in decision_rules]
    for note in notes:
        pdf.paragraph((note), size=7)
    if points:
        pdf.ensure_space(70)
        top = pdf.get_y() + 2
        pdf.log_plot(
            x=15,
            y=top,
            width=110,
            height=68,
            points=points,
            log_axis="x",
            x_label="k20 (m/s)",
            y_label="depth to top (m)",
            limit=doc.tests[0].spec_limit_m_per_s if doc.tests else None,
            invert_y=True,
            legend="filled: complies or no limit; open: does not comply",
        )
        pdf.set_y(top + 70)


def _closing(pdf: CertificatePDF, doc: CertificateDocument) -> None:
    pdf.heading("Cautions")
    for caution in doc.cautions:
        pdf.paragraph(f"- {caution}", size=8)
    pdf.heading("Authorisation")
    if doc.draft:
        pdf.paragraph(
            f"{DRAFT_MARK}. Prepared by {doc.issued_by.name} on {_date(doc.issued_at)} to "
            f"check before issue. It is not signed, carries no certificate number and is "
            f"not held by {doc.lab.name} as issued.",
            size=8,
        )
        return
    pdf.paragraph(
        f"Issued by {doc.issued_by.name} ({doc.issued_by.role.replace('_', ' ')}) for "
        f"{doc.lab.name} on {_date(doc.issued_at)}. This PDF is signed by the laboratory with "
        f"an Ed25519 key (key id {doc.key_id}); its SHA-256 and signature are held by the "
        f"laboratory. Upload it at {doc.verify_url.rsplit('/', 1)[0]} or scan the code to "
        "check that it is genuine and current.",
        size=8,
    )


def render_pdf(doc: CertificateDocument) -> bytes:
    """The certificate as PDF bytes."""
    pdf = CertificatePDF(doc)
    pdf.add_page()
    _title_block(pdf, doc)
    _parties(pdf, doc)
    if doc.kind == CertificateKind.PROJECT:
        _project_table(pdf, doc)
        render_series(pdf, doc.series)
    else:
        for sample in doc.samples:
            _sample_block(pdf, sample)
            for test in sample.tests:
                _test_block(pdf, test)
    _closing(pdf, doc)
    return bytes(pdf.output())
