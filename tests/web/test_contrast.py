"""Colour pairs of the stylesheet meet WCAG 2.1 AA contrast (4.5:1 for normal text).

Relative luminance and contrast ratio as defined by WCAG 2.1 (W3C Recommendation, 2018),
success criterion 1.4.3; the 4.5:1 floor for normal text is from the same criterion.
"""

from __future__ import annotations

import re

import pytest

from cds_service.web.routes import STATIC_DIR

CSS = (STATIC_DIR / "tonicity.css").read_text(encoding="utf-8")
VARS = dict(re.findall(r"--([a-z-]+):\s*(#[0-9a-fA-F]{6})", CSS))


def _channel(c: int) -> float:
    s = c / 255
    return s / 12.92 if s <= 0.04045 else ((s + 0.055) / 1.055) ** 2.4


def luminance(hex_colour: str) -> float:
    r, g, b = (int(hex_colour[i : i + 2], 16) for i in (1, 3, 5))
    return 0.2126 * _channel(r) + 0.7152 * _channel(g) + 0.0722 * _channel(b)


def contrast(a: str, b: str) -> float:
    la, lb = sorted((luminance(a), luminance(b)), reverse=True)
    return (la + 0.05) / (lb + 0.05)


def _c(name: str) -> str:
    return "#ffffff" if name == "white" else VARS[name]


def test_wcag_formula_against_its_known_extremes() -> None:
    # Black on white is 21:1 and a colour on itself 1:1 (WCAG 2.1, definition of contrast ratio).
    assert contrast("#000000", "#ffffff") == pytest.approx(21.0)
    assert contrast("#0b5d5e", "#0b5d5e") == pytest.approx(1.0)


# (text, background) pairs the pages use for text.
PAIRS = [
    ("ink", "sand"),
    ("ink", "paper"),
    ("ink", "sand-deep"),
    ("ink-soft", "paper"),
    ("ink-soft", "sand"),
    ("teal", "paper"),
    ("teal-dark", "paper"),
    ("teal-dark", "teal-tint"),
    ("white", "teal"),
    ("white", "teal-dark"),
    ("sand-deep", "teal-dark"),
    ("critical", "critical-tint"),
    ("critical", "paper"),
    ("warning", "warning-tint"),
    ("info", "info-tint"),
    ("teal-dark", "sand-deep"),
]


@pytest.mark.parametrize(("fg", "bg"), PAIRS)
def test_text_colours_meet_aa(fg: str, bg: str) -> None:
    assert contrast(_c(fg), _c(bg)) >= 4.5, f"{fg} on {bg}"
