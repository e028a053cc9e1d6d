"""The house palette: every colour the tool draws, styles or prints, named by its job.

Shape pictures, monitoring pictures, the HTML report's and monitoring page's CSS and the
terminal's rich styles all take their colours from here, so one change reaches them all.

How the colours were checked (tests/test_palette.py holds each check):
- contrast by the WCAG 2.x rule (relative luminance of sRGB, ratio (L1 + 0.05) /
  (L2 + 0.05)): text colours at least 4.5:1 on the background they sit on, lines, marks
  and bars at least 3:1 on white (WCAG 2.1 success criteria 1.4.3 and 1.4.11);
- colour-vision deficiencies by the simulation of Machado, Oliveira and Fernandes (2009)
  at full severity (protanopia, deuteranopia, tritanopia): every pair of colours that must
  be told apart stays apart, measured as the CIELAB distance (CIE76) after simulation
  (at least 20; monitoring's movers, also named in the legend, at least 20 from each
  other and from the grey of the rest);
- grey-scale print: the same pairs also differ by at least 14 in CIELAB lightness L*,
  so they part without hue; bands are drawn as dashed bounds with hatching, never as a tint alone;
- the terminal's colours sit at a middle luminance (about 0.18), which reads at 4.5:1
  or better on both a black and a white terminal background (rich brings them down to
  the nearest of 256 colours on a terminal without 24-bit colour).
"""

from __future__ import annotations

import numpy as np

# ---------------------------------------------------------------- pictures and pages

INK = "#1e2833"          # text, axes, the diamond of a total
QUIET = "#5f6a75"        # secondary text, reference lines at zero, notes
FAINT = "#d3d9de"        # grid lines and rules: decoration only
SHAPE = "#17466b"        # a shape function's curve or steps; overview bars
BAND = "#6598bd"         # a band's dashed bounds and hatching
MISSING = "#a34f00"      # the missing-value entry, wherever it is drawn
RISE = "#c4553f"         # a level that raises the score
FALL = "#244f78"         # a level that lowers it
DEVELOPMENT = "#46596d"  # monitoring: the development (baseline) value
LATEST = "#c26a12"       # monitoring: a period's value
STEADY = "#e8eeea"       # heat table: below the watch line
WATCH = "#e4b445"        # heat table: from the watch line
ACT = "#a53a28"          # heat table: from the act line
# monitoring's largest movers, each its own; the rest share OTHERS
MOVERS = ("#1c5a85", "#c26a12", "#664422", "#0099ee", "#bb8866", "#aa88bb")
OTHERS = "#bcc4cc"

# ---------------------------------------------------------------- HTML documents

PAGE = "#fafaf7"         # around the text column
PAPER = "#ffffff"        # the text column
HEADING = "#163a5a"
LINK = SHAPE
RULE = "#c5d3e0"         # under a section heading
EDGE = "#e2e2da"         # the text column's sides
CAUTION_PAPER = "#fcf5e6"
CAUTION_EDGE = "#a8700f"
HEADER_PAPER = "#edf1f5"
HEADER_RULE = "#97a8b9"
CELL_RULE = "#e4e8eb"
STRIPE = "#f6f8f9"

# ---------------------------------------------------------------- the terminal (rich)

ERROR_COLOUR = "#dd3311"
CAUTION_COLOUR = "#aa6611"
ERROR_STYLE = f"bold {ERROR_COLOUR}"
WARNING_STYLE = f"bold {CAUTION_COLOUR}"
CAUTION_STYLE = CAUTION_COLOUR

# ---------------------------------------------------------------- the checks

# Machado, Oliveira & Fernandes (2009), "A physiologically-based model for simulation of
# color vision deficiency", severity 1.0, applied to linear RGB (from memory; checked
# against the colorspacious package in tests/test_palette.py).
DEFICIENCIES = {
    "protanopia": ((0.152286, 1.052583, -0.204868),
                   (0.114503, 0.786281, 0.099216),
                   (-0.003882, -0.048116, 1.051998)),
    "deuteranopia": ((0.367322, 0.860646, -0.227968),
                     (0.280085, 0.672501, 0.047413),
                     (-0.011820, 0.042940, 0.968881)),
    "tritanopia": ((1.255528, -0.076749, -0.178779),
                   (-0.078411, 0.930809, 0.147602),
                   (0.004733, 0.691367, 0.303900)),
}


def rgb(colour: str) -> np.ndarray:
    """'#rrggbb' as three sRGB values from 0 to 1."""
    text = colour.lstrip("#")
    return np.array([int(text[i:i + 2], 16) / 255 for i in (0, 2, 4)])


def _linear(values: np.ndarray) -> np.ndarray:
    """sRGB to linear light (IEC 61966-2-1)."""
    return np.where(values <= 0.04045, values / 12.92, ((values + 0.055) / 1.055) ** 2.4)


def _encoded(values: np.ndarray) -> np.ndarray:
    values = np.clip(values, 0, 1)
    return np.where(values <= 0.0031308, values * 12.92,
                    1.055 * values ** (1 / 2.4) - 0.055)


def luminance(colour: str) -> float:
    """WCAG 2.x relative luminance."""
    return float(_linear(rgb(colour)) @ np.array([0.2126, 0.7152, 0.0722]))


def contrast(first: str, second: str) -> float:
    """WCAG 2.x contrast ratio, from 1 (none) to 21 (black on white)."""
    high, low = sorted((luminance(first), luminance(second)), reverse=True)
    return (high + 0.05) / (low + 0.05)


def simulated(colour: str, deficiency: str) -> np.ndarray:
    """The sRGB values (0 to 1) a person with `deficiency` is modelled to see."""
    matrix = np.array(DEFICIENCIES[deficiency])
    return _encoded(matrix @ _linear(rgb(colour)))


def lab(values: np.ndarray) -> np.ndarray:
    """sRGB values (0 to 1) to CIELAB, D65 white (the CIE formulas)."""
    to_xyz = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722],
                       [0.0193, 0.1192, 0.9505]])
    xyz = to_xyz @ _linear(np.asarray(values, dtype=float)) / np.array([0.95047, 1.0,
                                                                         1.08883])
    cube = np.where(xyz > (6 / 29) ** 3, np.cbrt(xyz), xyz / (3 * (6 / 29) ** 2) + 4 / 29)
    return np.array([116 * cube[1] - 16, 500 * (cube[0] - cube[1]),
                     200 * (cube[1] - cube[2])])


def distance(first: str, second: str, deficiency: str | None = None) -> float:
    """CIE76 distance between two colours, as seen with `deficiency` (None: as drawn)."""
    see = (lambda c: rgb(c)) if deficiency is None else (lambda c: simulated(c, deficiency))
    return float(np.linalg.norm(lab(see(first)) - lab(see(second))))


def lightness(colour: str) -> float:
    """CIELAB L*: what is left of a colour in grey-scale print."""
    return float(lab(rgb(colour))[0])


# colours that carry a meaning against each other, with the background they are read on
PAIRS = (
    (SHAPE, MISSING), (BAND, MISSING), (RISE, FALL), (DEVELOPMENT, LATEST),
    (STEADY, WATCH), (WATCH, ACT), (STEADY, ACT),
)
GRAPHICS = (SHAPE, BAND, MISSING, RISE, FALL, DEVELOPMENT, LATEST, ACT, *MOVERS, QUIET)
TEXT_ON = (
    (INK, PAPER), (QUIET, PAPER), (MISSING, PAPER), (HEADING, PAPER), (LINK, PAPER),
    (INK, PAGE), (INK, CAUTION_PAPER), (INK, HEADER_PAPER), (INK, STRIPE),
    (INK, STEADY), (INK, WATCH), (PAPER, ACT),
)
TERMINAL = (ERROR_COLOUR, CAUTION_COLOUR)
