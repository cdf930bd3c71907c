"""K class colours stay apart for colour-blind readers and in grey print.

Sources, each checked beside its use:

* sRGB: IEC 61966-2-1:1999 (the transfer function and the D65 primaries' XYZ matrix; common practice values).
* CIELAB and CIE L*: CIE 15:2004 "Colorimetry", 3rd edition, CIE, 2004 (D65 white).
* CIEDE2000: "The CIEDE2000 Color-Difference Formula: Implementation Notes, Supplementary Test Data,
  and Mathematical Observations", Color Research and Application, 2005; all 34 pairs of its Table 1
  are checked below to 4 decimals.
* Dichromacy: the severity-1.0 protanopia, deuteranopia and tritanopia matrices of "A Physiologically-based
  Model for Simulation of Color Vision Deficiency", IEEE Transactions on Visualization and Computer
  Graphics, 2009 (Table 1), applied to linear sRGB (values from memory, matching the protanopia and
  deuteranopia matrices already used in test_palette.py).

The bounds (CIEDE2000 >= 6 between any two classes in every view for K <= 8 and >= 9 for K <= 6; grey
L* steps >= 8.5 for K <= 8 and >= 12 for K <= 6) are the project's own choice: a difference of about 1 is "just noticeable" and
differences above 5 read as different colours at a glance (common practice, not a standard).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from truthsieve.pipeline.class_colours import MAX_CLASSES, class_colours
from truthsieve.pipeline.report_html import PALETTE

SIMULATIONS = {
    "normal": np.eye(3),
    "protanopia": np.array([[0.152286, 1.052583, -0.204868], [0.114503, 0.786281, 0.099216], [-0.003882, -0.048116, 1.051998]]),
    "deuteranopia": np.array([[0.367322, 0.860646, -0.227968], [0.280085, 0.672501, 0.047413], [-0.011820, 0.042940, 0.968881]]),
    "tritanopia": np.array([[1.255528, -0.076749, -0.178779], [-0.078411, 0.930809, 0.147602], [0.004733, 0.691367, 0.303900]]),
}
RGB_TO_XYZ = np.array([[0.4124564, 0.3575761, 0.1804375], [0.2126729, 0.7151522, 0.0721750], [0.0193339, 0.1191920, 0.9503041]])
WHITE = np.array([0.95047, 1.0, 1.08883])


def linear(hex_colour: str) -> np.ndarray:
    c = np.array([int(hex_colour[k : k + 2], 16) / 255 for k in (1, 3, 5)])
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def lab(rgb_linear: np.ndarray) -> np.ndarray:
    t = (RGB_TO_XYZ @ np.clip(rgb_linear, 0, 1)) / WHITE
    f = np.where(t > (6 / 29) ** 3, np.cbrt(t), t / (3 * (6 / 29) ** 2) + 4 / 29)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def seen(hex_colour: str, view: str) -> np.ndarray:
    return lab(SIMULATIONS[view] @ linear(hex_colour))


def ciede2000(lab1, lab2) -> float:
    """CIEDE2000 with kL = kC = kH = 1, following the 2005 implementation notes step by step."""
    (l1, a1, b1), (l2, a2, b2) = lab1, lab2
    c_mean = (math.hypot(a1, b1) + math.hypot(a2, b2)) / 2
    g = 0.5 * (1 - math.sqrt(c_mean**7 / (c_mean**7 + 25**7)))
    a1p, a2p = (1 + g) * a1, (1 + g) * a2
    c1p, c2p = math.hypot(a1p, b1), math.hypot(a2p, b2)
    h1p = math.degrees(math.atan2(b1, a1p)) % 360 if c1p else 0.0
    h2p = math.degrees(math.atan2(b2, a2p)) % 360 if c2p else 0.0
    dl, dc = l2 - l1, c2p - c1p
    if c1p * c2p == 0:
        dh = 0.0
    elif abs(h2p - h1p) <= 180:
        dh = h2p - h1p
    else:
        dh = h2p - h1p - 360 if h2p > h1p else h2p - h1p + 360
    big_dh = 2 * math.sqrt(c1p * c2p) * math.sin(math.radians(dh / 2))
    l_mean, cp_mean = (l1 + l2) / 2, (c1p + c2p) / 2
    if c1p * c2p == 0:
        h_mean = h1p + h2p
    elif abs(h1p - h2p) <= 180:
        h_mean = (h1p + h2p) / 2
    else:
        h_mean = (h1p + h2p + 360) / 2 if h1p + h2p < 360 else (h1p + h2p - 360) / 2
    t = (1 - 0.17 * math.cos(math.radians(h_mean - 30)) + 0.24 * math.cos(math.radians(2 * h_mean))
         + 0.32 * math.cos(math.radians(3 * h_mean + 6)) - 0.20 * math.cos(math.radians(4 * h_mean - 63)))
    d_theta = 30 * math.exp(-(((h_mean - 275) / 25) ** 2))
    r_c = 2 * math.sqrt(cp_mean**7 / (cp_mean**7 + 25**7))
    s_l = 1 + 0.015 * (l_mean - 50) ** 2 / math.sqrt(20 + (l_mean - 50) ** 2)
    s_c, s_h = 1 + 0.045 * cp_mean, 1 + 0.015 * cp_mean * t
    r_t = -math.sin(math.radians(2 * d_theta)) * r_c
    return math.sqrt((dl / s_l) ** 2 + (dc / s_c) ** 2 + (big_dh / s_h) ** 2 + r_t * (dc / s_c) * (big_dh / s_h))


# Table 1 of the CIEDE2000 implementation notes (Color Research and Application, 2005): L1 a1 b1 L2 a2 b2 dE00
SHARMA_TABLE_1 = """
50.0000 2.6772 -79.7751 50.0000 0.0000 -82.7485 2.0425
50.0000 3.1571 -77.2803 50.0000 0.0000 -82.7485 2.8615
50.0000 2.8361 -74.0200 50.0000 0.0000 -82.7485 3.4412
50.0000 -1.3802 -84.2814 50.0000 0.0000 -82.7485 1.0000
50.0000 -1.1848 -84.8006 50.0000 0.0000 -82.7485 1.0000
50.0000 -0.9009 -85.5211 50.0000 0.0000 -82.7485 1.0000
50.0000 0.0000 0.0000 50.0000 -1.0000 2.0000 2.3669
50.0000 -1.0000 2.0000 50.0000 0.0000 0.0000 2.3669
50.0000 2.4900 -0.0010 50.0000 -2.4900 0.0009 7.1792
50.0000 2.4900 -0.0010 50.0000 -2.4900 0.0010 7.1792
50.0000 2.4900 -0.0010 50.0000 -2.4900 0.0011 7.2195
50.0000 2.4900 -0.0010 50.0000 -2.4900 0.0012 7.2195
50.0000 -0.0010 2.4900 50.0000 0.0009 -2.4900 4.8045
50.0000 -0.0010 2.4900 50.0000 0.0010 -2.4900 4.8045
50.0000 -0.0010 2.4900 50.0000 0.0011 -2.4900 4.7461
50.0000 2.5000 0.0000 50.0000 0.0000 -2.5000 4.3065
50.0000 2.5000 0.0000 73.0000 25.0000 -18.0000 27.1492
50.0000 2.5000 0.0000 61.0000 -5.0000 29.0000 22.8977
50.0000 2.5000 0.0000 56.0000 -27.0000 -3.0000 31.9030
50.0000 2.5000 0.0000 58.0000 24.0000 15.0000 19.4535
50.0000 2.5000 0.0000 50.0000 3.1736 0.5854 1.0000
50.0000 2.5000 0.0000 50.0000 3.2972 0.0000 1.0000
50.0000 2.5000 0.0000 50.0000 1.8634 0.5757 1.0000
50.0000 2.5000 0.0000 50.0000 3.2592 0.3350 1.0000
60.2574 -34.0099 36.2677 60.4626 -34.1751 39.4387 1.2644
63.0109 -31.0961 -5.8663 62.8187 -29.7946 -4.0864 1.2630
61.2901 3.7196 -5.3901 61.4292 2.2480 -4.9620 1.8731
35.0831 -44.1164 3.7933 35.0232 -40.0716 1.5901 1.8645
22.7233 20.0904 -46.6940 23.0331 14.9730 -42.5619 2.0373
36.4612 47.8580 18.3852 36.2715 50.5065 21.2231 1.4146
90.8027 -2.0831 1.4410 91.1528 -1.6435 0.0447 1.4441
90.9257 -0.5406 -0.9208 88.6381 -0.8985 -0.7239 1.5381
6.7747 -0.2908 -2.4247 5.8714 -0.0985 -2.2286 0.6377
2.0776 0.0795 -1.1350 0.9033 -0.0636 -0.5514 0.9082
"""


def test_ciede2000_matches_the_34_published_pairs():
    rows = [list(map(float, line.split())) for line in SHARMA_TABLE_1.strip().splitlines()]
    assert len(rows) == 34
    for row in rows:
        assert ciede2000(row[:3], row[3:6]) == pytest.approx(row[6], abs=5e-5)
        assert ciede2000(row[3:6], row[:3]) == pytest.approx(row[6], abs=5e-5)


def test_cielab_of_known_colours():
    # white is L* 100, a* = b* = 0 by the definition; for grey #777777: c = 119/255 = 0.46667,
    # linear ((c + 0.055)/1.055)^2.4 = 0.18447 = Y, L* = 116 * Y^(1/3) - 16 = 116 * 0.56928 - 16 = 50.04 (hand calculation)
    assert lab(linear("#ffffff")) == pytest.approx([100, 0, 0], abs=1e-3)
    assert lab(linear("#777777"))[0] == pytest.approx(50.04, abs=0.01)
    assert lab(linear("#000000")) == pytest.approx([0, 0, 0], abs=1e-9)


@pytest.mark.parametrize("view", ["protanopia", "deuteranopia", "tritanopia"])
def test_the_simulations_keep_greys_grey(view):
    # each matrix maps white to white (rows sum to 1, a property the 2009 model states), so greys stay put
    assert SIMULATIONS[view].sum(axis=1) == pytest.approx([1, 1, 1], abs=2e-6)
    for grey in ("#000000", "#777777", "#ffffff"):
        assert ciede2000(seen(grey, view), seen(grey, "normal")) < 0.01


def test_the_check_catches_a_palette_that_fails_colour_blind_readers():
    # red and green of similar lightness: far apart for normal vision, close under deuteranopia
    red, green = "#d03030", "#3a8a3a"
    assert ciede2000(seen(red, "normal"), seen(green, "normal")) > 30
    assert ciede2000(seen(red, "deuteranopia"), seen(green, "deuteranopia")) < 8
    # blue and green: apart under deuteranopia, closer under tritanopia
    blue, teal = "#3050d0", "#30a050"
    assert ciede2000(seen(blue, "tritanopia"), seen(teal, "tritanopia")) < ciede2000(seen(blue, "deuteranopia"), seen(teal, "deuteranopia"))


@pytest.mark.parametrize("count", range(2, MAX_CLASSES + 1))
@pytest.mark.parametrize("view", list(SIMULATIONS))
def test_every_pair_of_class_colours_stays_apart(count, view):
    colours = class_colours(count)
    assert len(set(colours)) == count
    for one, other in itertools.combinations(colours, 2):
        assert ciede2000(seen(one, view), seen(other, view)) >= (9.0 if count <= 6 else 6.0), (count, view, one, other)


@pytest.mark.parametrize("count", range(2, MAX_CLASSES + 1))
def test_class_colours_print_as_a_grey_ramp_in_class_order(count):
    grey = [lab(linear(c))[0] for c in class_colours(count)]  # grey print keeps lightness
    steps = np.diff(grey)
    assert (steps > 0).all(), grey  # class 0 darkest: ordered grades print in order
    assert steps.min() >= (12.0 if count <= 6 else 8.5), grey
    # the lightest class still shows on the white chart panel (with the ink outline the marks carry)
    assert lab(linear(PALETTE["panel"]))[0] - grey[-1] >= 15


def test_class_colours_outside_their_range_are_refused():
    for count in (0, 1, MAX_CLASSES + 1):
        with pytest.raises(ValueError):
            class_colours(count)


def test_the_binary_report_keeps_its_colours():
    # unchanged by K classes (report_html.PALETTE as of commit adefb98)
    assert (PALETTE["calm"], PALETTE["heed"], PALETTE["faint"], PALETTE["cut"]) == ("#174a7c", "#f0a030", "#7a828e", "#6a3d9a")
