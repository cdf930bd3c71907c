"""K colours for K classes: one per class, told apart by lightness first and hue second.

The report's binary palette (``calm`` and ``heed`` in :mod:`truthsieve.pipeline.report_html`)
stays as it is; this is for reports with ``classes``. Class ``k`` of ``K`` gets the CIELAB
lightness ``L* = 22 + 62 k / (K - 1)`` (dark to light, in class order, so grades that are
ordered print as a grey ramp in the same order) and a hue that walks from violet-blue through
teal and green to a yellow-green along the same fraction, with the largest chroma (up to
``MAX_CHROMA``) that stays inside the sRGB gamut at that lightness and hue. Lightness
carries the distinction for readers with any of the three dichromacies and on grey paper;
hue adds to it for everyone else. Up to ``MAX_CLASSES`` classes are coloured; beyond that
colour alone cannot keep them apart, and the report must name classes in text anyway
(every mark carries its class name or a legend row).

``tests/pipeline/test_class_colours.py`` checks every pair for K = 2..8 under simulated
protanopia, deuteranopia and tritanopia (CIEDE2000) and in grey (L* steps).

>>> class_colours(4)
['#00336e', '#006e85', '#36ab8e', '#cbd98c']
"""

from __future__ import annotations

import math
from functools import lru_cache

__all__ = ["class_colours", "MAX_CLASSES"]

MAX_CLASSES = 8
LIGHTNESS = (22.0, 84.0)  # darkest and lightest L*: the lightest still shows on a white panel with an ink outline
HUE = (285.0, 115.0)  # CIELAB hue angle in degrees: violet-blue at the dark end, yellow at the light end
MAX_CHROMA = 40.0

# CIE 1931 XYZ -> linear sRGB (IEC 61966-2-1:1999), D65 white
_XYZ_TO_RGB = (
    (3.2404542, -1.5371385, -0.4985314),
    (-0.9692660, 1.8760108, 0.0415560),
    (0.0556434, -0.2040259, 1.0572252),
)
_WHITE = (0.95047, 1.0, 1.08883)


def _lab_to_linear_rgb(lightness: float, a: float, b: float) -> tuple[float, float, float]:
    fy = (lightness + 16) / 116
    fx, fz = fy + a / 500, fy - b / 200

    def inverse(t: float) -> float:
        return t**3 if t > 6 / 29 else 3 * (6 / 29) ** 2 * (t - 4 / 29)

    xyz = [w * inverse(t) for w, t in zip(_WHITE, (fx, fy, fz))]
    return tuple(sum(m * v for m, v in zip(row, xyz)) for row in _XYZ_TO_RGB)


def _encode(linear: float) -> int:
    linear = min(1.0, max(0.0, linear))
    value = 12.92 * linear if linear <= 0.0031308 else 1.055 * linear ** (1 / 2.4) - 0.055
    return round(value * 255)


def _in_gamut(rgb) -> bool:
    return all(-1e-9 <= c <= 1 + 1e-9 for c in rgb)


def _colour(lightness: float, hue_degrees: float) -> str:
    hue = math.radians(hue_degrees)
    low, high = 0.0, MAX_CHROMA  # bisect for the largest chroma inside the gamut (0 always is)
    if _in_gamut(_lab_to_linear_rgb(lightness, high * math.cos(hue), high * math.sin(hue))):
        low = high
    for _ in range(40):
        if low == high:
            break
        middle = (low + high) / 2
        if _in_gamut(_lab_to_linear_rgb(lightness, middle * math.cos(hue), middle * math.sin(hue))):
            low = middle
        else:
            high = middle
    rgb = _lab_to_linear_rgb(lightness, low * math.cos(hue), low * math.sin(hue))
    return "#" + "".join(f"{_encode(c):02x}" for c in rgb)


@lru_cache(maxsize=None)
def _colours(count: int) -> tuple[str, ...]:
    (dark, light), (first, last) = LIGHTNESS, HUE
    return tuple(
        _colour(dark + (light - dark) * k / (count - 1), first + (last - first) * k / (count - 1)) for k in range(count)
    )


def class_colours(count: int) -> list[str]:
    """``count`` hex colours, class 0 first (darkest); 2 <= count <= ``MAX_CLASSES``."""
    if not 2 <= count <= MAX_CLASSES:
        raise ValueError(f"class colours exist for 2 to {MAX_CLASSES} classes, not {count}")
    return list(_colours(count))
