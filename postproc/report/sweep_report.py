"""Self-contained HTML report of a sweep: ranking, aero maps, yaw behaviour,
the case table, flags and the safety cautions.

One HTML file, no external assets (charts are inline SVG drawn here), so it
can be mailed, archived or opened on a machine with no network. Rendered
from ``templates/report/sweep_report.html.j2`` with StrictUndefined.

Units: ride heights shown in mm, angles in degrees, coefficients
dimensionless; axes as in caseprep.contract.frames (downforce = −lift).
"""
from __future__ import annotations

import datetime as _dt
import html
import math
import os
from dataclasses import asdict
from pathlib import Path

import numpy as np

from caseprep.contract import __version__
from caseprep.contract.atomicio import write_text_atomic
from caseprep.contract.templating import environment


# A colour-blind-safe qualitative palette (Okabe & Ito 2008, "Color Universal Design").
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442", "#000000")


def _nice_ticks(lo: float, hi: float, n: int = 5) -> list[float]:
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return []
    if hi == lo:
        hi, lo = hi + 0.5 * (abs(hi) or 1.0), lo - 0.5 * (abs(lo) or 1.0)
    raw = (hi - lo) / max(n, 1)
    mag = 10 ** math.floor(math.log10(raw))
    step = min((s * mag for s in (1, 2, 2.5, 5, 10) if s * mag >= raw), default=10 * mag)
    start = math.floor(lo / step) * step
    ticks = []
    t = start
    while t <= hi + 1e-9 * step:
        ticks.append(round(t, 12))
        t += step
    return ticks


def svg_chart(
    series: list[tuple[str, list[float], list[float]]],
    xlabel: str,
    ylabel: str,
    lines: bool = True,
    width: int = 520,
    height: int = 320,
) -> str:
    """An inline SVG scatter/line chart.

    ``series``: (label, xs, ys) per series; points sorted by x when joined.
    Returns SVG markup (escaped labels). Empty input → a note instead.
    """
    xs = [x for _, sx, _ in series for x in sx if x is not None and math.isfinite(x)]
    ys = [y for _, _, sy in series for y in sy if y is not None and math.isfinite(y)]
    if not xs or not ys:
        return '<p class="note">no data to plot</p>'
    ml, mr, mt, mb = 64, 130, 14, 44
    pw, ph = width - ml - mr, height - mt - mb
    xt, yt = _nice_ticks(min(xs), max(xs)), _nice_ticks(min(ys), max(ys))
    x0, x1 = min(xt[0], min(xs)), max(xt[-1], max(xs))
    y0, y1 = min(yt[0], min(ys)), max(yt[-1], max(ys))
    x1 = x1 if x1 > x0 else x0 + 1
    y1 = y1 if y1 > y0 else y0 + 1

    def X(x):
        return ml + (x - x0) / (x1 - x0) * pw

    def Y(y):
        return mt + ph - (y - y0) / (y1 - y0) * ph

    out = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" role="img" '
           f'aria-label="{html.escape(ylabel)} against {html.escape(xlabel)}">',
           f'<rect x="{ml}" y="{mt}" width="{pw}" height="{ph}" fill="#fff" stroke="#999"/>']
    for t in xt:
        out.append(f'<line x1="{X(t):.1f}" y1="{mt}" x2="{X(t):.1f}" y2="{mt + ph}" stroke="#eee"/>'
                   f'<text x="{X(t):.1f}" y="{mt + ph + 16}" font-size="11" text-anchor="middle">{t:g}</text>')
    for t in yt:
        out.append(f'<line x1="{ml}" y1="{Y(t):.1f}" x2="{ml + pw}" y2="{Y(t):.1f}" stroke="#eee"/>'
                   f'<text x="{ml - 6}" y="{Y(t) + 4:.1f}" font-size="11" text-anchor="end">{t:g}</text>')
    out.append(f'<text x="{ml + pw / 2:.1f}" y="{height - 6}" font-size="12" text-anchor="middle">{html.escape(xlabel)}</text>')
    out.append(f'<text x="14" y="{mt + ph / 2:.1f}" font-size="12" text-anchor="middle" '
               f'transform="rotate(-90 14 {mt + ph / 2:.1f})">{html.escape(ylabel)}</text>')
    for k, (label, sx, sy) in enumerate(series):
        c = PALETTE[k % len(PALETTE)]
        pts = sorted((x, y) for x, y in zip(sx, sy) if x is not None and y is not None and math.isfinite(x) and math.isfinite(y))
        if lines and len(pts) > 1:
            d = " ".join(f"{X(x):.1f},{Y(y):.1f}" for x, y in pts)
            out.append(f'<polyline points="{d}" fill="none" stroke="{c}" stroke-width="1.5"/>')
        for x, y in pts:
            out.append(f'<circle cx="{X(x):.1f}" cy="{Y(y):.1f}" r="3.5" fill="{c}"><title>{html.escape(label)}: '
                       f'{x:g}, {y:.4g}</title></circle>')
        ly = mt + 14 + 16 * k
        out.append(f'<rect x="{ml + pw + 10}" y="{ly - 9}" width="10" height="10" fill="{c}"/>'
                   f'<text x="{ml + pw + 24}" y="{ly}" font-size="11">{html.escape(label)}</text>')
    out.append("</svg>")
    return "".join(out)


def _ramp(t: float) -> str:
    """Our own sequential colour ramp (pale sand → deep blue), t in [0, 1]."""
    stops = ((0.0, (253, 246, 227)), (0.5, (86, 180, 233)), (1.0, (0, 55, 120)))
    t = min(max(t, 0.0), 1.0)
    for (t0, c0), (t1, c1) in zip(stops, stops[1:]):
        if t <= t1:
            f = (t - t0) / (t1 - t0)
            return "#%02x%02x%02x" % tuple(round(a + f * (b - a)) for a, b in zip(c0, c1))
    return "#%02x%02x%02x" % stops[-1][1]


def svg_map(front, rear, values, points_front, points_rear, label: str, size: int = 260) -> str:
    """Inline SVG of a fitted ride-height map: colour = the fitted value on
    the grid ``values`` (rows along ``rear``, columns along ``front``, ride
    heights m, drawn in mm), with the sweep points drawn on top."""
    Z = np.asarray(values, dtype=float)
    n = Z.shape[0]
    f0, f1 = float(front[0]), float(front[-1])
    r0, r1 = float(rear[0]), float(rear[-1])
    zlo, zhi = float(Z.min()), float(Z.max())
    ml, mb, mt = 48, 36, 16
    cell = size / n
    out = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{ml + size + 90}" height="{mt + size + mb}" role="img" '
           f'aria-label="{html.escape(label)} over front and rear ride height">']
    for i in range(n):
        for j in range(n):
            t = (Z[i, j] - zlo) / (zhi - zlo) if zhi > zlo else 0.5
            out.append(f'<rect x="{ml + j * cell:.1f}" y="{mt + size - (i + 1) * cell:.1f}" width="{cell + 0.3:.1f}" '
                       f'height="{cell + 0.3:.1f}" fill="{_ramp(t)}"/>')
    for a, b in zip(points_front, points_rear):
        x = ml + (a - f0) / (f1 - f0) * size
        y = mt + size - (b - r0) / (r1 - r0) * size
        out.append(f'<circle cx="{x:.1f}" cy="{y:.1f}" r="3" fill="none" stroke="#000"/>')
    out.append(f'<text x="{ml}" y="{mt + size + 14}" font-size="10">{1000 * f0:g}</text>'
               f'<text x="{ml + size}" y="{mt + size + 14}" font-size="10" text-anchor="end">{1000 * f1:g}</text>'
               f'<text x="{ml + size / 2}" y="{mt + size + 30}" font-size="11" text-anchor="middle">front ride height (mm)</text>'
               f'<text x="{ml - 4}" y="{mt + size}" font-size="10" text-anchor="end">{1000 * r0:g}</text>'
               f'<text x="{ml - 4}" y="{mt + 8}" font-size="10" text-anchor="end">{1000 * r1:g}</text>'
               f'<text x="12" y="{mt + size / 2}" font-size="11" text-anchor="middle" '
               f'transform="rotate(-90 12 {mt + size / 2})">rear ride height (mm)</text>')
    for k, t in enumerate(np.linspace(1, 0, 6)):
        y = mt + k * size / 6
        out.append(f'<rect x="{ml + size + 10}" y="{y:.1f}" width="14" height="{size / 6 + 0.5:.1f}" fill="{_ramp(t)}"/>'
                   f'<text x="{ml + size + 28}" y="{y + 10:.1f}" font-size="10">{zlo + t * (zhi - zlo):.3g}</text>')
    out.append(f'<text x="{ml + size + 10}" y="{mt + size + 14}" font-size="10">{html.escape(label)}</text></svg>')
    return "".join(out)


def _fmt(x, nd: int = 3) -> str:
    if x is None:
        return "—"
    if isinstance(x, float) and not math.isfinite(x):
        return "—"
    if isinstance(x, (int, np.integer)):
        return str(x)
    return f"{x:.{nd}f}"


def _charts(ok: list, variants: list[str]) -> list[tuple[str, str]]:
    """(title, inline SVG) of the downforce, drag and balance against mean
    ride height at the smallest |yaw| and, when several yaw angles were run,
    of the downforce against yaw, for the unflagged rows ``ok``."""
    charts = []
    # Downforce and balance against mean ride height at zero (smallest |yaw|) per variant
    ymin = min((abs(r.yaw_deg) for r in ok), default=0.0)
    base = [r for r in ok if abs(abs(r.yaw_deg) - ymin) < 1e-9]

    def series(key):
        s = []
        for v in variants:
            rows = [r for r in base if r.variant == v]
            s.append((v, [500.0 * (r.ride_height_front + r.ride_height_rear) for r in rows], [key(r) for r in rows]))
        return s
    charts.append(("Downforce coefficient against mean ride height", svg_chart(
        series(lambda r: -r.cl), "mean ride height (mm)", "downforce coefficient −C_L", lines=False)))
    charts.append(("Drag coefficient against mean ride height", svg_chart(
        series(lambda r: r.cd), "mean ride height (mm)", "drag coefficient C_D", lines=False)))
    charts.append(("Aero balance against mean ride height", svg_chart(
        series(lambda r: r.balance if r.balance is not None else float("nan")), "mean ride height (mm)",
        "aero balance (front share)", lines=False)))
    yawed = sorted({r.yaw_deg for r in ok})
    if len(yawed) > 1:
        ys = []
        for v in variants:
            rows = [r for r in ok if r.variant == v]
            by = {}
            for r in rows:
                by.setdefault(r.yaw_deg, []).append(-r.cl)
            ys.append((v, list(by), [float(np.mean(b)) for b in by.values()]))
        charts.append(("Downforce coefficient against yaw (mean over ride heights)", svg_chart(ys, "yaw β (deg)", "−C_L")))
    return charts


def build_context(analysis) -> dict:
    """Everything the report template needs, as plain strings/lists, from a
    sweep's analysis data (:class:`postproc.pipelines.sweep.SweepAnalysis`:
    ``results`` rows, ``ranking``, ``aero_maps``, ``mesh_study``, ``notes``,
    ``checks`` — per-case run and mesh facts with keys case_id, status,
    cells, iterations, convergence, yplus_median, yplus_p95,
    yplus_share_in_range, yplus_range — ``title`` and ``study``). Computes
    nothing but the layout: no fitting, no ranking."""
    results = list(analysis.results)
    scores = list(analysis.ranking)
    variants = [s.variant for s in scores]
    ok = [r for r in results if not r.flags]
    charts = _charts(ok, variants)
    maps = []
    for m in analysis.aero_maps:
        g = m["grid"]
        if g is not None:
            charts.append((f"{m['variant']}: fitted downforce coefficient map (circles: sweep points)",
                           svg_map(g["front"], g["rear"], g["values"], m["points"]["front"], m["points"]["rear"],
                                   m["label"])))
        maps.append({"variant": m["variant"], "degree": m["degree"], "n": m["n_points"], "r2": _fmt(m["r2"]),
                     "rms": _fmt(m["rms"], 4), "dfront": _fmt(m["d_front_per_mm"], 4),
                     "drear": _fmt(m["d_rear_per_mm"], 4)})
    ranking = [{
        "rank": s.rank if s.metrics.get("downforce") is not None else "—", "variant": s.variant,
        "score": _fmt(s.score) if s.metrics.get("downforce") is not None else "—", "pareto": "yes" if s.pareto else "",
        "n": s.n_cases, "flagged": s.n_flagged,
        **{k: _fmt(v) for k, v in s.metrics.items()},
        "notes": "; ".join(s.notes),
    } for s in scores]
    table = [{
        **{k: _fmt(v, 4) if isinstance(v, float) else ("" if v is None else v) for k, v in asdict(r).items() if k != "flags"},
        "ride_height_front": _fmt(1000 * r.ride_height_front, 1), "ride_height_rear": _fmt(1000 * r.ride_height_rear, 1),
        "pitch_deg": _fmt(r.pitch_deg, 2), "yaw_deg": _fmt(r.yaw_deg, 1),
        "flags": ", ".join(r.flags),
    } for r in results]
    return {
        "title": analysis.title,
        "study": analysis.study,
        "created": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        "version": __version__,
        "ranking": ranking,
        "charts": charts,
        "maps": maps,
        "table": table,
        "flagged": [r for r in table if r["flags"]],
        "notes": list(analysis.notes),
        "checks": [{k: (_fmt(v, 1) if isinstance(v, float) and "yplus" in k and "share" not in k
                         else _fmt(v, 2) if isinstance(v, float) else ("—" if v is None else v))
                     for k, v in c.items()} for c in analysis.checks],
        "mesh_study": [{
            "variant": m["variant"], "coefficient": {"cl": "C_L", "cd": "C_D"}[m["coefficient"]],
            "point": f"{_fmt(1000 * m['ride_height_front'], 1)}/{_fmt(1000 * m['ride_height_rear'], 1)} mm, "
                     f"pitch {_fmt(m['pitch_deg'], 2)}°, yaw {_fmt(m['yaw_deg'], 1)}°",
            "levels": ", ".join(str(x) for x in m["levels"]),
            "values": ", ".join(_fmt(x, 4) for x in m["phi"]),
            "order": _fmt(m["order"], 2), "extrapolated": _fmt(m["extrapolated"], 4),
            "gci": _fmt(100 * m["gci_fine"], 2) if m["gci_fine"] == m["gci_fine"] else "—",
            "note": m["note"] or ("" if m["converged"] else "not in the asymptotic range"),
        } for m in analysis.mesh_study],
        "n_cases": len(results),
        "n_ok": len(ok),
    }


def write_report(analysis, path: str | os.PathLike) -> Path:
    """Render the report of a sweep's analysis data (see :func:`build_context`)
    to ``path`` (atomic write) and return the path."""
    text = environment().get_template("report/sweep_report.html.j2").render(**build_context(analysis))
    p = Path(path)
    write_text_atomic(p, text)
    return p
