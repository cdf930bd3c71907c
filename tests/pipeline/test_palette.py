"""The palette stays readable for colour-blind readers and in grey print.

Contrast: relative luminance and contrast ratio as defined by the Web Content Accessibility
Guidelines (WCAG) 2.1, W3C Recommendation, 2018 (success criteria 1.4.3 and 1.4.11: 4.5:1
for text, 3:1 for graphical objects). Colour-vision deficiency: the severity-1.0 deuteranopia
and protanopia matrices of "A Physiologically-based Model for Simulation of Color Vision
Deficiency", IEEE Transactions on Visualization and Computer Graphics, 2009 (Table 1; the
values are from memory), applied to linear RGB. Grey print: the luminance Y itself.
"""

from __future__ import annotations

import numpy as np
import pytest

from truthsieve.pipeline.report_html import PALETTE

DEUTERANOPIA = np.array([[0.367322, 0.860646, -0.227968], [0.280085, 0.672501, 0.047413], [-0.011820, 0.042940, 0.968881]])
PROTANOPIA = np.array([[0.152286, 1.052583, -0.204868], [0.114503, 0.786281, 0.099216], [-0.003882, -0.048116, 1.051998]])


def linear(hex_colour: str) -> np.ndarray:
    c = np.array([int(hex_colour[k : k + 2], 16) / 255 for k in (1, 3, 5)])
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def luminance(rgb: np.ndarray) -> float:
    return float(np.clip(rgb, 0, 1) @ np.array([0.2126, 0.7152, 0.0722]))


def contrast(a: float, b: float) -> float:
    high, low = max(a, b), min(a, b)
    return (high + 0.05) / (low + 0.05)


def test_the_contrast_formula_matches_wcag_reference_values():
    # WCAG 2.1: black on white is 21:1; #777777 on white is about 4.48:1 (common practice example)
    assert contrast(luminance(linear("#000000")), luminance(linear("#ffffff"))) == pytest.approx(21.0)
    assert contrast(luminance(linear("#777777")), luminance(linear("#ffffff"))) == pytest.approx(4.48, abs=0.01)


@pytest.mark.parametrize("view", ["normal", "deuteranopia", "protanopia", "grey"])
def test_signal_colours_stay_apart_and_text_stays_legible(view):
    matrix = {"deuteranopia": DEUTERANOPIA, "protanopia": PROTANOPIA}.get(view)

    def lum(name):
        rgb = linear(PALETTE[name])
        return luminance(rgb if matrix is None else matrix @ rgb)

    # the two signal colours (dots, squares, badges) differ by luminance alone: 3:1 for graphics
    assert contrast(lum("calm"), lum("heed")) >= 3.0
    # every text colour on its background: 4.5:1
    for text, ground in [("ink", "paper"), ("ink", "panel"), ("calm", "calm_wash"), ("heed_ink", "heed_wash"), ("calm", "paper"), ("ink", "heed_wash"), ("cut", "panel")]:
        assert contrast(lum(text), lum(ground)) >= 4.5, (text, ground)
    # the signal marks stand out from the chart panel
    for mark in ("calm", "heed", "faint"):
        assert contrast(lum(mark), lum("panel")) >= 1.9, mark
