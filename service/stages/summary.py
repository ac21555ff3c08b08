"""The stages in words and figures, for the stage pages, the review page and the certificate:
per stage its title, whether it is recorded, and its lines (label, value with its unit)."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from service.lab_tests.reduction import catalogue
from service.stages.fields import STAGES
from service.stages.models import StageName, TestStage

CHECK_WORDS = {"pass": "pass", "warn": "warning", "fail": "fail", "not_applicable": "n/a"}
# Checks that judge the permeation stage (the termination rules and the saturation).
STAGE_CHECKS = ("steady_state", "flow_ratio", "trend", "gradient_limit", "saturation")


@dataclass
class StageSummary:
    id: str
    title: str
    recorded: bool
    lines: list[tuple[str, str]] = field(default_factory=list)
    refused: list[str] = field(default_factory=list)


def sci(value: float, plain: bool = False) -> str:
    """3.94 × 10⁻¹⁰ (plain: 3.94E-10, for documents drawn in Latin-1)."""
    if plain:
        return f"{value:.2E}"
    mantissa, exponent = f"{value:.2e}".split("e")
    sup = str(int(exponent)).translate(str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹"))
    return f"{float(mantissa):.2f} × 10{sup}"


def _typed(row: TestStage, *ids: str) -> list[tuple[str, str]]:
    spec = next(s for s in STAGES if s.id == row.stage)
    labels = {e.id: e.label for e in spec.entries}
    return [(labels[i], str(row.typed[i])) for i in ids if row.typed.get(i)]


def _setup(row: TestStage) -> list[tuple[str, str]]:
    return _typed(
        row, "membrane", "filter_papers", "porous_stones", "permeant", "diameter", "length",
        "wet_mass", "water_content", "specific_gravity",
    )  # fmt: skip


def _saturation(row: TestStage) -> list[tuple[str, str]]:
    lines = []
    increments = row.typed.get("increments", [])
    if increments:
        last = increments[-1]
        lines.append(("Increments", str(len(increments))))
        lines.append(
            (
                "Last increment",
                f"cell {last.get('cell_pressure')}, back {last.get('back_pressure')}",
            )
        )
    checks = row.outcome.get("b_checks", [])
    if checks:
        last_check = checks[-1]
        lines.append(
            (
                "Last B check",
                f"B = {last_check['b_value']:.2f} at back pressure "
                f"{last_check['back_pressure_pa'] / 1000:.0f} kPa",
            )
        )
    verdict = row.outcome.get("check")
    if verdict:
        lines.append(("Saturation check", CHECK_WORDS.get(verdict["status"], verdict["status"])))
    return lines


def _consolidation(row: TestStage) -> list[tuple[str, str]]:
    out = row.outcome
    lines = []
    if "effective_stress_pa" in out:
        lines.append(("Effective stress", f"{out['effective_stress_pa'] / 1000:.0f} kPa"))
    end = out.get("end")
    if end:
        lines.append(("Volume change", f"{end['volume_change_m3'] * 1e6:.2f} mL"))
        judged = "reached" if end["complete"] else "not yet reached"
        lines.append(("End of consolidation", f"{judged} ({end['method']})"))
        if end.get("t100_s"):
            lines.append(("t₁₀₀ (root time)", f"{end['t100_s'] / 60:.0f} min"))
    dims = out.get("dimensions")
    if dims:
        how = (
            "isotropic strain from the volume change"
            if dims["method"] == "isotropic"
            else "measured height change and the volume change"
        )
        lines.append(
            (
                "At permeation",
                f"L = {dims['length_m'] * 1000:.2f} mm, D = {dims['diameter_m'] * 1000:.2f} mm "
                f"({how})",
            )
        )
    if out.get("pore_volume_m3"):
        lines.append(("Pore volume", f"{out['pore_volume_m3'] * 1e6:.1f} mL"))
    return lines


def _permeation(row: TestStage, plain: bool = False) -> list[tuple[str, str]]:
    out = row.outcome
    method = row.typed.get("permeation_method", "")
    lines = [("Hydraulic system", catalogue.method_name(method))] if method else []
    if "zero_flow_head_m" in out:
        lines.append(("Zero-flow head", f"{out['zero_flow_head_m'] * 1000:.1f} mm"))
    found = out.get("determinations", [])
    if found:
        ks = [d["k_ref_m_per_s"] for d in found]
        lines.append(("Intervals", str(len(found))))
        lines.append(("k₂₀ of the last interval", f"{sci(ks[-1], plain)} m/s"))
        ratios = [d["flow_ratio"] for d in found if d["flow_ratio"] is not None]
        if ratios:
            lines.append(("Outflow/inflow", f"{min(ratios):.2f} to {max(ratios):.2f}"))
        if found[-1]["pore_volumes"] is not None:
            lines.append(("Pore volumes of flow", f"{found[-1]['pore_volumes']:.3f}"))
    if out.get("k_ref_m_per_s"):
        lines.append(
            ("k₂₀ (mean of the last four intervals)", f"{sci(out['k_ref_m_per_s'], plain)} m/s")
        )
    for check in out.get("checks", []):
        if check["id"] in STAGE_CHECKS:
            words = check["id"].replace("_", " ").capitalize()
            lines.append((words, CHECK_WORDS.get(check["status"], check["status"])))
    return lines


def _post_test(row: TestStage) -> list[tuple[str, str]]:
    out = row.outcome
    lines = _typed(row, "post_diameter", "post_length", "post_wet_mass", "post_dry_mass")
    if "water_content" in out:
        lines.append(("Water content", f"{out['water_content'] * 100:.1f} %"))
    if out.get("dry_density_kg_per_m3"):
        lines.append(("Dry density", f"{out['dry_density_kg_per_m3'] / 1000:.3f} g/cm³"))
    if out.get("degree_of_saturation") is not None:
        lines.append(("Degree of saturation", f"{out['degree_of_saturation'] * 100:.0f} %"))
    return lines


_LINES: dict[str, Any] = {
    StageName.SETUP: _setup,
    StageName.SATURATION: _saturation,
    StageName.CONSOLIDATION: _consolidation,
    StageName.PERMEATION: _permeation,
    StageName.POST_TEST: _post_test,
}


def summarise(rows: Mapping[str, TestStage], *, plain: bool = False) -> list[StageSummary]:
    """Every stage in order, recorded or not (`plain`: powers of ten as 3.94E-10)."""
    out = []
    for spec in STAGES:
        row = rows.get(spec.id)
        item = StageSummary(spec.id, spec.title, row is not None)
        if row is not None:
            item.lines = (
                _permeation(row, plain) if spec.id == StageName.PERMEATION else _LINES[spec.id](row)
            )
            item.refused = list(row.outcome.get("refused", []))
            if row.outcome.get("pending"):
                item.lines.append(("Still needed", str(row.outcome["pending"])))
        out.append(item)
    return out


def plot_data(rows: Mapping[str, TestStage]) -> dict[str, Any]:
    """The series the stage plots draw, in display units (kPa, mL, h)."""
    data: dict[str, Any] = {}
    sat = rows.get(StageName.SATURATION)
    if sat is not None and sat.outcome.get("b_checks"):
        checks = sat.outcome["b_checks"]
        data["b"] = ([c["back_pressure_pa"] / 1000 for c in checks], [c["b_value"] for c in checks])
    con = rows.get(StageName.CONSOLIDATION)
    if con is not None and con.si.get("readings"):
        readings = con.si["readings"]
        data["volume"] = (
            [r["elapsed"] for r in readings],
            [r["volume_change"] * 1e6 for r in readings],
        )
    per = rows.get(StageName.PERMEATION)
    if per is not None and per.outcome.get("determinations"):
        found = per.outcome["determinations"]
        data["k_time"] = (
            [d["time_end_s"] / 3600 for d in found],
            [d["k_ref_m_per_s"] for d in found],
        )
        if all(d["pore_volumes"] is not None for d in found):
            data["k_pore"] = (
                [d["pore_volumes"] for d in found],
                [d["k_ref_m_per_s"] for d in found],
            )
    return data
