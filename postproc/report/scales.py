"""Colour scales of the report, declared once and shared by the pictures,
the plots and the HTML legends.

``TIDEWATER`` is our own diverging scale for pressure coefficients: deep
blue (strong suction) through a warm pale grey (Cp = 0) to burnt orange
(stagnation). Blue against orange stays distinguishable for the common
red–green colour-vision deficiencies because the two arms differ in the
blue–yellow direction and in lightness, and the scale is also readable in
grey (lightness falls monotonically from the centre to both ends). The
scale is *banded*: a fixed number of equal steps, so that a colour in a
picture can be read back to a value within one step, and so that every
variant is drawn with exactly the same colours for the same values.

The centre colour always sits at the value 0 (``centre``), whatever the
range: with the asymmetric range of underbody pressures (−2 … +1) the
negative arm has more steps than the positive one and each step has the
same width in Cp.

``SENSE_COLOURS``: rotation sense of vortex cores (about +x, right-hand
rule), two colours from the Okabe & Ito (2008) colour-universal-design set
that differ from both arms of ``TIDEWATER``.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: The arms of the diverging scale, from the centre outwards: (t, RGB 0–255)
#: with t = |value − centre| / (end − centre) in [0, 1]. Our own choice.
_CENTRE = (242, 239, 230)
_NEG_ARM = ((0.0, _CENTRE), (0.25, (166, 203, 227)), (0.55, (74, 137, 194)), (0.8, (33, 86, 158)),
            (1.0, (12, 44, 99)))
_POS_ARM = ((0.0, _CENTRE), (0.25, (247, 205, 153)), (0.55, (228, 141, 62)), (0.8, (184, 88, 23)),
            (1.0, (112, 45, 8)))

#: Okabe & Ito (2008), "Color Universal Design": bluish green and reddish purple.
SENSE_COLOURS = {+1: (0, 158, 115), -1: (204, 121, 167)}
SENSE_NAMES = {+1: "anticlockwise seen from behind (ω_x > 0)", -1: "clockwise seen from behind (ω_x < 0)"}

#: Qualitative palette for variants in plots: Okabe & Ito (2008).
VARIANT_COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442", "#000000")

#: Neutral colours of the pictures: background, body without data, no-data
NEUTRAL = {"background": (255, 255, 255), "body": (190, 190, 186), "nodata": (228, 228, 224),
           "streak": (40, 40, 40), "separation": (20, 20, 20)}


def _interp_arm(arm, t: float) -> tuple[float, float, float]:
    t = min(max(t, 0.0), 1.0)
    for (t0, c0), (t1, c1) in zip(arm, arm[1:]):
        if t <= t1:
            f = (t - t0) / (t1 - t0) if t1 > t0 else 0.0
            return tuple(a + f * (b - a) for a, b in zip(c0, c1))
    return tuple(float(v) for v in arm[-1][1])


@dataclass(frozen=True)
class BandedScale:
    """A banded diverging colour scale over [lo, hi] in steps of ``step``.

    ``name`` our name of the scale; ``quantity`` what it shows (for legends).
    Values outside the range take the end colours. The band k covers
    [lo + k·step, lo + (k+1)·step); its colour is the arm colour at the
    band's middle value.
    """

    name: str
    quantity: str
    lo: float
    hi: float
    step: float
    centre: float = 0.0

    def __post_init__(self):
        n = (self.hi - self.lo) / self.step
        if not (self.hi > self.centre > self.lo) or abs(n - round(n)) > 1e-9 or round(n) < 2:
            raise ValueError(f"expected lo < centre < hi and a whole number of steps, got {self}")

    @property
    def n_bands(self) -> int:
        return int(round((self.hi - self.lo) / self.step))

    def band_edges(self) -> np.ndarray:
        return self.lo + self.step * np.arange(self.n_bands + 1)

    def band_colours(self) -> np.ndarray:
        """(n_bands, 3) uint8 RGB, lowest band first."""
        e = self.band_edges()
        mids = 0.5 * (e[1:] + e[:-1])
        out = []
        for m in mids:
            if m < self.centre:
                out.append(_interp_arm(_NEG_ARM, (self.centre - m) / (self.centre - self.lo)))
            else:
                out.append(_interp_arm(_POS_ARM, (m - self.centre) / (self.hi - self.centre)))
        return np.clip(np.rint(np.asarray(out)), 0, 255).astype(np.uint8)

    def band_index(self, values) -> np.ndarray:
        """Band of each value (clamped to the range)."""
        v = np.asarray(values, dtype=float)
        return np.clip(np.floor((v - self.lo) / self.step), 0, self.n_bands - 1).astype(int)

    def colour(self, values) -> np.ndarray:
        """RGB (…, 3) uint8 of the values."""
        return self.band_colours()[self.band_index(values)]

    def nearest_band(self, rgb) -> np.ndarray:
        """The band whose colour is nearest (Euclidean in RGB) to each colour
        (…, 3): reads a picture back into bands."""
        c = np.asarray(rgb, dtype=float)[..., None, :]
        d = np.linalg.norm(c - self.band_colours().astype(float), axis=-1)
        return np.argmin(d, axis=-1)

    def legend(self) -> list[tuple[str, str]]:
        """(hex colour, label) per band, highest value first, for HTML legends;
        the end bands say that they include everything beyond."""
        e = self.band_edges()
        cols = self.band_colours()
        out = []
        for k in range(self.n_bands - 1, -1, -1):
            a, b = e[k], e[k + 1]
            if k == self.n_bands - 1:
                lab = f"≥ {_num(a)}"
            elif k == 0:
                lab = f"< {_num(b)}"
            else:
                lab = f"{_num(a)} … {_num(b)}"
            out.append(("#%02x%02x%02x" % tuple(int(v) for v in cols[k]), lab))
        return out


def _num(x: float) -> str:
    if abs(x) < 1e-12:
        return "0"
    s = f"{x:.2f}".rstrip("0").rstrip(".")
    return s.replace("-", "−")


#: Pressure coefficient on the floor and the ground: −2 … +1 in steps of 0.25.
CP_SCALE = BandedScale(name="tidewater", quantity="C_p", lo=-2.0, hi=1.0, step=0.25)
#: Difference of C_p to the baseline variant: −0.6 … +0.6 in steps of 0.1
#: (negative: more suction than the baseline).
DCP_SCALE = BandedScale(name="tidewater", quantity="ΔC_p", lo=-0.6, hi=0.6, step=0.1)


def hex_colour(rgb) -> str:
    return "#%02x%02x%02x" % tuple(int(v) for v in rgb)


def relative_luminance(rgb) -> float:
    """WCAG 2.1 relative luminance of an sRGB colour (0–255)."""
    def lin(c):
        c = c / 255.0
        return c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4
    r, g, b = (lin(float(v)) for v in rgb)
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def is_finite(x) -> bool:
    return x is not None and isinstance(x, (int, float)) and math.isfinite(x)
