"""The house palette: contrast, colour-vision deficiencies and grey-scale print, checked
with published formulas and an outside implementation of the simulation."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from glassbox.publishing import palette
from glassbox.publishing.report_document import STYLE

SEEN = (None, *palette.DEFICIENCIES)


def test_contrast_follows_the_wcag_rule():
    # WCAG 2.x definition: black on white is 21:1, a colour on itself 1:1
    assert palette.contrast("#000000", "#ffffff") == pytest.approx(21.0)
    assert palette.contrast("#3a7d44", "#3a7d44") == pytest.approx(1.0)
    # from memory: #767676 on white is 4.54:1, the lightest grey to pass AA for text
    assert palette.contrast("#767676", "#ffffff") == pytest.approx(4.54, abs=0.005)


def test_simulation_and_lab_agree_with_colorspacious():
    # colorspacious (Smith & van der Walt) implements Machado et al. (2009) and CIELAB
    colorspacious = pytest.importorskip("colorspacious")
    names = {"protanopia": "protanomaly", "deuteranopia": "deuteranomaly",
             "tritanopia": "tritanomaly"}
    for colour in (*palette.GRAPHICS, palette.WATCH, palette.STEADY):
        for ours, theirs in names.items():
            space = {"name": "sRGB1+CVD", "cvd_type": theirs, "severity": 100}
            expected = np.clip(colorspacious.cspace_convert(palette.rgb(colour), space,
                                                            "sRGB1"), 0, 1)
            np.testing.assert_allclose(palette.simulated(colour, ours), expected, atol=1e-6)
        np.testing.assert_allclose(palette.lab(palette.rgb(colour)),
                                   colorspacious.cspace_convert(palette.rgb(colour), "sRGB1",
                                                                "CIELab"), atol=0.02)


def test_text_and_marks_have_contrast():
    # WCAG 2.1 SC 1.4.3 (text 4.5:1) and SC 1.4.11 (graphical objects 3:1)
    for text, background in palette.TEXT_ON:
        assert palette.contrast(text, background) >= 4.5, (text, background)
    for colour in palette.GRAPHICS:
        assert palette.contrast(colour, palette.PAPER) >= 3.0, colour


def test_terminal_colours_read_on_dark_and_light_terminals():
    for colour in palette.TERMINAL:
        assert palette.contrast(colour, "#000000") >= 4.5, colour
        assert palette.contrast(colour, "#ffffff") >= 4.5, colour
    assert palette.ERROR_STYLE.endswith(palette.ERROR_COLOUR)


def test_pairs_stay_apart_with_each_deficiency_and_in_grey():
    # 20 CIE76 units: common practice, no source (about ten just-noticeable differences)
    for first, second in palette.PAIRS:
        for deficiency in SEEN:
            assert palette.distance(first, second, deficiency) >= 20, (first, second,
                                                                       deficiency)
        assert abs(palette.lightness(first) - palette.lightness(second)) >= 14
    for first, second in itertools.combinations((*palette.MOVERS, palette.OTHERS), 2):
        for deficiency in SEEN:
            assert palette.distance(first, second, deficiency) >= 20, (first, second,
                                                                       deficiency)


def test_the_pages_take_their_colours_from_the_palette():
    used = {word.rstrip(";,").lower() for word in STYLE.split() if word.startswith("#")}
    own = {value.lower() for name, value in vars(palette).items()
           if name.isupper() and isinstance(value, str) and value.startswith("#")}
    assert used and used <= own, used - own
