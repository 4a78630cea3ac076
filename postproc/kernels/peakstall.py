"""Peak downforce and stall along a line of constant rake.

A ground-effect floor gains downforce as it is lowered, reaches a maximum,
then loses it again when the underbody flow breaks down (vortex breakdown
and separation in the diffuser; Zhang, Toet & Zerihan, "Ground effect
aerodynamics of race cars", Applied Mechanics Reviews 59(1) 33–49, 2006).
Along one line of constant rake (h_r − h_f fixed) the ride height of that
maximum, and where the running ride height sits relative to it, decide
whether a floor is usable.

Method, for ride heights h (m, the front ride height along the line) and
downforce D (−C_L, or −C_L·A in m²), sorted by h:

* i* = argmax D. A drop is *significant* when it exceeds ``noise`` (units of
  D; the caller passes the combined uncertainty of a difference).
* ``stall``: D falls significantly somewhere below h[i*] (lower ride
  heights lose downforce).
* ``peak_bracketed``: 0 < i* < n − 1 and D falls significantly on both sides.
* Peak location when bracketed: vertex of the parabola through
  (h[i*−1], h[i*], h[i*+1]) (parabolic interpolation of a sampled maximum,
  Press et al., *Numerical Recipes*, 3rd ed., CUP 2007, §10.3, eq. 10.3.1),
  kept only when the parabola opens downwards and its vertex lies in
  [h[i*−1], h[i*+1]]; otherwise the sampled maximum. The true peak lies in
  that bracket (``peak_bracket``). Error of the vertex for a smooth peak:
  O(Δh²) relative to the peak's curvature scale; for a kinked peak up to
  ≈ Δh/2.
* ``distance_past_peak`` = h_peak − h_min (m) when stalled (a lower bound
  when the peak lies above the tested range); ``loss_at_lowest`` = (D_peak −
  D(h_min))/|D_peak| (fraction).
* ``margin`` = h_design − h_peak (m; positive = the design ride height is
  above the peak, on the attached side). When the peak is not bracketed it
  is a bound (``margin_bound`` "at-least"/"at-most").
"""
from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np


@dataclass(frozen=True)
class PeakResult:
    """Peak and stall of one constant-rake line (see the module docstring;
    lengths in m, downforce in the units given)."""

    assessed: bool
    n_points: int
    peak_bracketed: bool
    stall: bool
    peak_h: float | None
    peak_value: float | None
    peak_bracket: tuple[float, float] | None
    lowest_h: float | None
    distance_past_peak: float | None
    distance_is_bound: bool
    loss_at_lowest: float | None
    design_h: float | None
    margin: float | None
    margin_bound: str | None   # "exact" | "at-least" | "at-most"
    note: str

    def to_dict(self) -> dict:
        d = asdict(self)
        d["peak_bracket"] = list(self.peak_bracket) if self.peak_bracket else None
        return d


def _parabola_vertex(h: np.ndarray, y: np.ndarray) -> tuple[float, float] | None:
    """Vertex (h, value) of the parabola through three points, or None when
    it does not open downwards or lies outside them."""
    a, b, c = np.polyfit(h, y, 2)
    if not a < 0:
        return None
    hv = -b / (2 * a)
    if not (h[0] <= hv <= h[-1]):
        return None
    return float(hv), float(a * hv**2 + b * hv + c)


def _margin(design_h: float | None, peak_h: float | None, bound: str | None) -> tuple[float | None, str | None]:
    if design_h is None or peak_h is None:
        return None, None
    return float(design_h - peak_h), bound


def find_peak(h, downforce, noise: float = 0.0, design_h: float | None = None) -> PeakResult:
    """Peak downforce and stall along one line (module docstring). ``h``
    ride heights (m), ``downforce`` (−C_L or −C_L·A), ``noise`` the smallest
    significant drop (same units, ≥ 0), ``design_h`` the design ride height
    on this line (m) or None. Non-finite points are dropped."""
    h = np.asarray(h, dtype=float).ravel()
    y = np.asarray(downforce, dtype=float).ravel()
    ok = np.isfinite(h) & np.isfinite(y)
    h, y = h[ok], y[ok]
    order = np.argsort(h)
    h, y = h[order], y[order]
    n = len(h)
    if n < 3 or len(np.unique(h)) < n:
        why = "fewer than 3 ride heights on this line" if n < 3 else "repeated ride heights: average them first"
        return PeakResult(False, n, False, False, None, None, None, float(h[0]) if n else None, None, False, None,
                          design_h, None, None, why)
    i = int(np.argmax(y))
    tol = max(float(noise), 0.0)
    drop_below = i > 0 and (y[i] - y[:i].min()) > tol
    drop_above = i < n - 1 and (y[i] - y[i + 1:].min()) > tol
    stall = bool(drop_below)
    if drop_below and drop_above:
        v = _parabola_vertex(h[i - 1:i + 2], y[i - 1:i + 2])
        ph, pv = v if v is not None else (float(h[i]), float(y[i]))
        margin, bound = _margin(design_h, ph, "exact")
        return PeakResult(True, n, True, True, ph, pv, (float(h[i - 1]), float(h[i + 1])), float(h[0]),
                          ph - float(h[0]), False, float((pv - y[0]) / abs(pv)) if pv else None, design_h, margin,
                          bound, "downforce peaks inside the tested range and falls again below it")
    if stall:   # no significant drop above the maximum: the peak lies at or above h[i]
        margin, bound = _margin(design_h, float(h[i]), "at-most")
        where = ("the highest tested ride height" if i == n - 1 else
                 f"{1000 * h[i]:.1f} mm (flat within the noise above it)")
        return PeakResult(True, n, False, True, None, float(y[i]), None, float(h[0]), float(h[i] - h[0]), True,
                          float((y[i] - y[0]) / abs(y[i])) if y[i] else None, design_h, margin, bound,
                          f"downforce falls as the floor is lowered below {where}: the peak lies at or above it "
                          "(not bracketed)")
    if i == 0 and drop_above:
        margin, bound = _margin(design_h, float(h[0]), "at-least")
        return PeakResult(True, n, False, False, None, None, None, float(h[0]), None, False, None, design_h, margin,
                          bound, "downforce still rising at the lowest tested ride height: the peak lies below it "
                          "(not bracketed)")
    return PeakResult(True, n, False, False, None, None, None, float(h[0]), None, False, None, design_h, None, None,
                      "no significant change of downforce along the line (within the noise)")
