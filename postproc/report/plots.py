"""Plots of the report, drawn with matplotlib's Agg/SVG backends (no
display). Rendering only: every function takes plain data (the dataclasses
below, arrays, dicts) computed elsewhere — fits, predictions, Pareto fronts
and ties arrive ready — and returns the encoded figure (SVG bytes by
default, text kept as text so that it prints sharply and stays small).

The data arrive as the dataclasses of
:mod:`postproc.pipelines.report_data` (``Curve``, ``Panel``, ``MapData``,
``ParetoPoint``, ``History``, ``PlatformCurve``), read by attribute.

Colours: variants in the Okabe & Ito (2008) palette
(:data:`postproc.report.scales.VARIANT_COLOURS`), yaw angles by line style
and marker, so that nothing depends on colour alone.
"""
from __future__ import annotations

import io
import math
from typing import Sequence

import numpy as np

from .scales import VARIANT_COLOURS

LINESTYLES = ("-", "--", ":", "-.")
MARKERS = ("o", "s", "^", "D", "v", "P")
INK = "#2b2b2b"
GRID = "#dedbd2"


def _mpl():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    plt.rcParams.update({
        "svg.fonttype": "none", "svg.hashsalt": "underfloor", "font.family": "sans-serif",
        "font.size": 9, "axes.edgecolor": INK, "axes.labelcolor": INK, "xtick.color": INK, "ytick.color": INK,
        "axes.grid": True, "grid.color": GRID, "grid.linewidth": 0.6, "axes.spines.top": False,
        "axes.spines.right": False, "legend.frameon": False, "figure.dpi": 100,
    })
    return plt


def _text(s: str) -> str:
    """A user string safe for matplotlib (no math mode)."""
    return str(s).replace("$", r"\$")


def _save(fig, fmt: str = "svg") -> bytes:
    plt = _mpl()
    buf = io.BytesIO()
    kw = {"metadata": {"Date": None}} if fmt == "svg" else {"metadata": {"Software": None}}
    fig.savefig(buf, format=fmt, bbox_inches="tight", **kw)
    plt.close(fig)
    return buf.getvalue()


def variant_colour(variants: Sequence[str], v: str) -> str:
    return VARIANT_COLOURS[list(variants).index(v) % len(VARIANT_COLOURS)] if v in variants else INK


def line_panels(panels: Sequence, xlabel: str, *, variants: Sequence[str] | None = None,
                width: float = 10.0, height: float = 3.2, fmt: str = "svg") -> bytes:
    """A row of line plots sharing ``xlabel`` (e.g. downforce, drag and
    balance against ride height), one legend for all."""
    plt = _mpl()
    variants = list(variants or dict.fromkeys(c.variant for p in panels for c in p.curves))
    styles = list(dict.fromkeys(c.style for p in panels for c in p.curves))
    fig, axes = plt.subplots(1, len(panels), figsize=(width, height), squeeze=False)
    handles = {}
    for ax, p in zip(axes[0], panels):
        for c in p.curves:
            x = np.asarray(c.x, dtype=float)
            y = np.asarray(c.y, dtype=float)
            ok = np.isfinite(x) & np.isfinite(y)
            if not ok.any():
                continue
            order = np.argsort(x[ok])
            xs, ys = x[ok][order], y[ok][order]
            col = variant_colour(variants, c.variant)
            k = styles.index(c.style)
            ls, mk = LINESTYLES[k % len(LINESTYLES)], MARKERS[k % len(MARKERS)]
            (ln,) = ax.plot(xs, ys, ls=ls, marker=mk, color=col, lw=1.6, ms=5)
            if c.yerr is not None:
                e = np.asarray(c.yerr, dtype=float)[ok][order]
                ax.errorbar(xs, ys, yerr=np.where(np.isfinite(e), e, 0.0), fmt="none", ecolor=col, elinewidth=1,
                            capsize=2)
            if c.flagged is not None:
                fl = np.asarray(c.flagged, dtype=bool)[ok][order]
                if fl.any():
                    ax.plot(xs[fl], ys[fl], ls="none", marker=mk, mfc="white", mec=col, ms=7)
            handles.setdefault(f"{_text(c.variant)} · {_text(c.style)}" if len(styles) > 1 else _text(c.variant), ln)
        ax.set_xlabel(_text(xlabel))
        ax.set_ylabel(_text(p.ylabel))
        if p.title:
            ax.set_title(_text(p.title), fontsize=9, loc="left")
    if handles:
        fig.legend(list(handles.values()), list(handles), loc="lower center", ncol=min(len(handles), 4),
                   bbox_to_anchor=(0.5, -0.02 - 0.06 * math.ceil(len(handles) / 4)))
    fig.tight_layout()
    return _save(fig, fmt)


def map_contours(maps: Sequence, *, levels: int = 12, width: float = 10.0, fmt: str = "svg") -> bytes:
    """Filled contours of each variant's map over front × rear ride height
    (mm), the measured points on top labelled with the prediction error.
    One colour range for all panels, so the variants compare."""
    plt = _mpl()
    from matplotlib.colors import LinearSegmentedColormap

    n = len(maps)
    cols = min(n, 3)
    rows = math.ceil(n / cols)
    fig, axes = plt.subplots(rows, cols, figsize=(width, 3.3 * rows), squeeze=False)
    allv = np.concatenate([np.asarray(m.value, float).ravel() for m in maps])
    allv = allv[np.isfinite(allv)]
    lo, hi = (float(allv.min()), float(allv.max())) if allv.size else (0.0, 1.0)
    if hi <= lo:
        hi = lo + 1e-6
    # our own sequential ramp: pale sand to deep teal
    cmap = LinearSegmentedColormap.from_list("shoal", ["#f7f1df", "#b9dcc9", "#4fa3a5", "#1d5e74", "#0c2f45"])
    lv = np.linspace(lo, hi, levels + 1)
    cs = None
    for ax, m in zip(axes.ravel(), maps):
        F, R = np.meshgrid(1000 * np.asarray(m.front, float), 1000 * np.asarray(m.rear, float))
        cs = ax.contourf(F, R, np.asarray(m.value, float), levels=lv, cmap=cmap, extend="neither")
        ax.contour(F, R, np.asarray(m.value, float), levels=lv, colors="#ffffff", linewidths=0.4, alpha=0.7)
        pf, pr = 1000 * np.asarray(m.points_front, float), 1000 * np.asarray(m.points_rear, float)
        ax.plot(pf, pr, ls="none", marker="o", mfc="white", mec=INK, ms=5)
        if m.points_error is not None:
            for a, b, e in zip(pf, pr, m.points_error):
                if e is not None and math.isfinite(e):
                    ax.annotate(f"{e:+.3f}", (a, b), xytext=(4, 4), textcoords="offset points", fontsize=7,
                                color=INK)
        ax.set_title(_text(m.variant) + (f" — {_text(m.note)}" if m.note else ""), fontsize=9, loc="left")
        ax.set_xlabel("front ride height (mm)")
        ax.set_ylabel("rear ride height (mm)")
        ax.grid(False)
    for ax in axes.ravel()[n:]:
        ax.set_visible(False)
    if cs is not None:
        cb = fig.colorbar(cs, ax=axes.ravel().tolist(), shrink=0.85, pad=0.02)
        cb.set_label(_text(maps[0].quantity))
    return _save(fig, fmt)


def pareto_plot(points: Sequence, *, xlabel: str = "drag coefficient C_D",
                ylabel: str = "downforce coefficient −C_L", width: float = 6.0, height: float = 4.2,
                fmt: str = "svg") -> bytes:
    """Downforce against drag with uncertainty bars; the front joined by a
    step line, tied variants ringed together."""
    plt = _mpl()
    variants = list(dict.fromkeys(p.variant for p in points))
    fig, ax = plt.subplots(figsize=(width, height))
    for p in points:
        col = variant_colour(variants, p.variant)
        xe = p.drag_err if p.drag_err is not None and math.isfinite(p.drag_err) else None
        ye = p.downforce_err if p.downforce_err is not None and math.isfinite(p.downforce_err) else None
        ax.errorbar([p.drag], [p.downforce], xerr=None if xe is None else [xe], yerr=None if ye is None else [ye],
                    fmt="o" if p.on_front else "s", color=col, mfc=col if p.on_front else "white", ms=7,
                    elinewidth=1, capsize=3, label=_text(p.label))
    front = sorted((p for p in points if p.on_front), key=lambda p: p.drag)
    if len(front) > 1:
        ax.plot([p.drag for p in front], [p.downforce for p in front], color=INK, lw=0.8, ls="--", zorder=0)
    groups: dict[int, list[ParetoPoint]] = {}
    for p in points:
        if p.tie_group is not None:
            groups.setdefault(p.tie_group, []).append(p)
    for g, members in groups.items():
        if len(members) < 2:
            continue
        xs = [p.drag for p in members]
        ys = [p.downforce for p in members]
        ax.plot(xs, ys, color="#8a8a8a", lw=6, alpha=0.35, solid_capstyle="round", zorder=0)
        ax.annotate(f"tie {g}", (float(np.mean(xs)), float(np.mean(ys))), xytext=(6, -12), textcoords="offset points",
                    fontsize=7, color="#555555")
    ax.set_xlabel(_text(xlabel))
    ax.set_ylabel(_text(ylabel))
    ax.legend(loc="best", fontsize=8)
    fig.tight_layout()
    return _save(fig, fmt)


def history_multiples(histories: Sequence, *, cols: int = 4, width: float = 10.0,
                      panel_height: float = 1.55, settled_only: bool = True, fmt: str = "svg") -> bytes:
    """Small multiples of force histories, one panel per case, over the
    settling window (``settled_only``; the whole run otherwise), each series
    relative to its mean over the window so that the settling shows at one
    scale (the per-mille deviation)."""
    plt = _mpl()
    n = max(len(histories), 1)
    cols = min(cols, n)
    rows = math.ceil(n / cols)
    fig, axes = plt.subplots(rows, cols, figsize=(width, panel_height * rows + 0.4), squeeze=False, sharex=False)
    names = list(dict.fromkeys(k for h in histories for k in h.series))
    colours = {k: VARIANT_COLOURS[i % len(VARIANT_COLOURS)] for i, k in enumerate(names)}
    for ax, h in zip(axes.ravel(), histories):
        it = np.asarray(h.iterations, dtype=float)
        sel = it >= h.window_start if (settled_only and h.window_start is not None) else np.ones(it.size, bool)
        for k, v in h.series.items():
            y = np.asarray(v, dtype=float)
            if y.size != it.size or not sel.any():
                continue
            ys = y[sel]
            m = float(np.nanmean(ys)) if np.isfinite(ys).any() else float("nan")
            rel = 1000.0 * (ys - m) / abs(m) if m and math.isfinite(m) else ys * np.nan
            ax.plot(it[sel], rel, color=colours[k], lw=1.0, label=_text(k))
        ax.axhline(0.0, color=GRID, lw=0.8)
        t = _text(h.label) + (f" · {_text(h.verdict)}" if h.verdict else "")
        ax.set_title(t, fontsize=7.5, loc="left", color="#9a3d00" if h.flagged else INK)
        ax.tick_params(labelsize=7)
    for ax in axes.ravel()[len(histories):]:
        ax.set_visible(False)
    if names:
        hs = [plt.Line2D([], [], color=colours[k], lw=1.2) for k in names]
        fig.legend(hs, [f"{_text(k)} (‰ from its window mean)" for k in names], loc="lower center",
                   ncol=len(names), bbox_to_anchor=(0.5, -0.03), fontsize=8)
    fig.supxlabel("iteration", fontsize=8, y=0.02)
    fig.tight_layout(rect=(0, 0.04, 1, 1))
    return _save(fig, fmt)


def platform_plot(curves: Sequence, *, ylabel: str = "ride height under load (mm)",
                  scale: float = 1000.0, limits: Sequence[tuple[float, str]] = (), width: float = 6.0,
                  height: float = 3.6, fmt: str = "svg") -> bytes:
    """Platform curves (e.g. front and rear ride height against speed)."""
    plt = _mpl()
    variants = list(dict.fromkeys(c.variant for c in curves))
    styles = list(dict.fromkeys(c.style for c in curves))
    fig, ax = plt.subplots(figsize=(width, height))
    for c in curves:
        k = styles.index(c.style)
        ax.plot(np.asarray(c.speed, float), scale * np.asarray(c.value, float), color=variant_colour(variants, c.variant),
                ls=LINESTYLES[k % len(LINESTYLES)], lw=1.6, label=f"{_text(c.variant)} · {_text(c.style)}")
    for val, lab in limits:
        ax.axhline(scale * val, color="#9a3d00", lw=1.0, ls=(0, (4, 2)))
        ax.annotate(_text(lab), (ax.get_xlim()[0], scale * val), xytext=(4, 3), textcoords="offset points",
                    fontsize=7, color="#9a3d00")
    ax.set_xlabel("speed (m/s)")
    ax.set_ylabel(_text(ylabel))
    ax.legend(fontsize=8)
    fig.tight_layout()
    return _save(fig, fmt)
