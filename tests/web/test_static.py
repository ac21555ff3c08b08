"""Vendored assets and the palette: htmx pinned and free of htmx 2 idioms, nothing from a CDN,
no inline script, and every main text colour pair at 4.5:1 contrast or better."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

from service.web.htmx import HTMX_SCRIPT, HTMX_VERSION

ROOT = Path(__file__).resolve().parents[2]
STATIC = ROOT / "static"
TEMPLATES = ROOT / "templates"
UPGRADE_CHECK = Path(__file__).parent / "vendor" / "htmx-4.0.1-upgrade-check.py.txt"
CSS = STATIC / "css" / "seepline.css"


def test_vendored_htmx_is_the_pinned_version() -> None:
    vendored = STATIC / "vendor" / f"htmx-{HTMX_VERSION}.min.js"
    assert HTMX_VERSION == "4.0.1"
    assert f"/static/vendor/htmx-{HTMX_VERSION}.min.js" == HTMX_SCRIPT
    # The minified file states its own version (htmx sets `version="4.0.1"` on its object).
    assert 'version="4.0.1"' in vendored.read_text(encoding="utf-8")
    assert "Zero-Clause BSD" in (STATIC / "vendor" / "htmx-4.0.1.LICENSE.txt").read_text()
    assert sorted(p.name for p in (STATIC / "vendor").glob("htmx-*.js")) == [vendored.name]


def _upgrade_check(*paths: Path) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, str(UPGRADE_CHECK), "--no-color", *map(str, paths)],
        capture_output=True,
        text=True,
        check=False,
        timeout=60,
    )


def test_templates_and_scripts_use_no_htmx_2_idioms() -> None:
    # The checker ships with htmx 4.0.1 (dist/scripts/upgrade-check.py); exit 0 means clean.
    result = _upgrade_check(TEMPLATES, STATIC / "js")
    assert result.returncode == 0, result.stdout + result.stderr


def test_upgrade_check_does_flag_htmx_2_idioms(tmp_path: Path) -> None:
    # The control: the same checker must refuse markup written for htmx 2.
    old = tmp_path / "old.html"
    old.write_text(
        '<div hx-target="#out"><button hx-get="/a" hx-disabled-elt="this">A</button></div>\n'
        '<div hx-on:htmx:afterSwap="go()"></div>\n'
    )
    assert _upgrade_check(tmp_path).returncode == 1


def _asset_texts() -> list[tuple[Path, str]]:
    files = [*TEMPLATES.rglob("*.html"), *STATIC.rglob("*.css"), *STATIC.rglob("*.js")]
    return [(f, f.read_text(encoding="utf-8")) for f in files if "vendor" not in f.parts]


def test_nothing_loads_from_another_site() -> None:
    external = re.compile(r"""(src|href)=["']?(https?:)?//|url\(\s*["']?(https?:)?//|@import""")
    offenders = [str(path) for path, text in _asset_texts() if external.search(text)]
    assert offenders == []


def test_templates_have_no_inline_script_or_style() -> None:
    # A strict Content-Security-Policy will forbid inline scripts, handlers and styles.
    inline_script = re.compile(r"<script(?![^>]*\bsrc=)[^>]*>", re.IGNORECASE)
    handler = re.compile(r"\son[a-z]+\s*=|\shx-on:", re.IGNORECASE)
    style = re.compile(r"\sstyle\s*=|<style", re.IGNORECASE)
    for path in TEMPLATES.rglob("*.html"):
        text = path.read_text(encoding="utf-8")
        assert not inline_script.search(text), path
        assert not handler.search(text), path
        assert not style.search(text), path


# ---------- contrast ----------


def _palette() -> dict[str, str]:
    text = CSS.read_text(encoding="utf-8")
    root = text[text.index(":root") : text.index("}", text.index(":root"))]
    return dict(re.findall(r"--([a-z-]+):\s*(#[0-9a-fA-F]{6})\s*;", root))


def relative_luminance(hex_colour: str) -> float:
    """WCAG 2.1 relative luminance, https://www.w3.org/TR/WCAG21/#dfn-relative-luminance:
    L = 0.2126 R + 0.7152 G + 0.0722 B, each channel linearised from sRGB as
    c/12.92 if c <= 0.04045 else ((c + 0.055)/1.055)^2.4."""

    def channel(value: int) -> float:
        c = value / 255
        return c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4

    r, g, b = (int(hex_colour[i : i + 2], 16) for i in (1, 3, 5))
    return 0.2126 * channel(r) + 0.7152 * channel(g) + 0.0722 * channel(b)


def contrast_ratio(first: str, second: str) -> float:
    """WCAG 2.1 contrast ratio, https://www.w3.org/TR/WCAG21/#dfn-contrast-ratio:
    (L1 + 0.05) / (L2 + 0.05), L1 the lighter."""
    high, low = sorted((relative_luminance(first), relative_luminance(second)), reverse=True)
    return (high + 0.05) / (low + 0.05)


def test_contrast_formula_matches_known_values() -> None:
    # Black on white is 21:1 by the definition's extremes (WCAG 2.1 note on contrast ratio);
    # #767676 on white is about 4.54:1, the lightest grey passing AA (from memory, WebAIM).
    assert contrast_ratio("#000000", "#ffffff") == pytest.approx(21.0)
    assert contrast_ratio("#767676", "#ffffff") == pytest.approx(4.54, abs=0.01)
    assert contrast_ratio("#777777", "#ffffff") < 4.5


TEXT_PAIRS = [
    ("ink", "paper"),
    ("ink", "surface"),
    ("ink-muted", "paper"),
    ("ink-muted", "surface"),
    ("accent", "paper"),
    ("accent", "surface"),
    ("accent-ink", "accent"),
    ("ink", "accent-soft"),
    ("pass", "pass-bg"),
    ("warn", "warn-bg"),
    ("fail", "fail-bg"),
    ("neutral", "neutral-bg"),
    ("fail", "surface"),
    ("warn", "surface"),
    ("ink-muted", "neutral-bg"),
]


@pytest.mark.parametrize(("text", "background"), TEXT_PAIRS)
def test_main_palette_text_has_at_least_4_5_to_1(text: str, background: str) -> None:
    # WCAG 2.1 success criterion 1.4.3 (contrast, minimum): 4.5:1 for normal text.
    palette = _palette()
    assert contrast_ratio(palette[text], palette[background]) >= 4.5


def test_focus_ring_and_field_borders_reach_3_to_1() -> None:
    # WCAG 2.1 success criterion 1.4.11 (non-text contrast): 3:1 for parts of controls.
    palette = _palette()
    assert contrast_ratio(palette["focus"], palette["paper"]) >= 3
    assert contrast_ratio(palette["field-border"], palette["surface"]) >= 3


def test_touch_target_size_is_44_px() -> None:
    text = CSS.read_text(encoding="utf-8")
    size = re.search(r"--touch:\s*([\d.]+)rem", text)
    assert size is not None
    assert float(size.group(1)) * 16 >= 44
    assert "min-height: var(--touch)" in text
