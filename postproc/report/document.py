"""The sweep report as one self-contained HTML file: rendering only.

Takes the report data (:class:`postproc.pipelines.report_data.ReportData`,
computed by the sweep pipeline and read by attribute; or a ``SweepAnalysis``
carrying it as ``report_data``), draws the pictures (:mod:`.pictures`) and plots (:mod:`.plots`),
phrases the summary and the cautions, and fills
``templates/report/sweep_report.html.j2`` with autoescaping on: every
string from the user (title, study, variant names, notes) is shown as
text. Images are embedded as data URIs (PNG/WebP pictures, SVG plots), so
the file needs no network and no script to be read, and prints cleanly
(print stylesheet in the template).
"""
from __future__ import annotations

import base64
import math
import os
import time
from dataclasses import dataclass, field
from pathlib import Path

import jinja2

from caseprep.contract.atomicio import write_text_atomic
from caseprep.contract.templating import template_dir

from . import plots as pl
from .pictures import VIEW_TITLES, PictureOptions, RenderingUnavailable, render_pictures
from .scales import CP_SCALE, DCP_SCALE, SENSE_COLOURS, SENSE_NAMES, hex_colour

TEMPLATE = "report/sweep_report.html.j2"

METRIC_LABELS = {
    "downforce": "mean −C_L", "drag": "mean C_D", "efficiency": "mean −C_L/C_D", "balance_range": "balance range",
    "yaw_retention": "yaw retention", "downforce_spread": "downforce spread",
}

VIEW_NOTES = {
    "floor": "The body seen from below (nose left, driver's right side at the bottom), coloured by the pressure "
             "coefficient C_p on the one banded scale used for every variant.",
    "ground": "C_p on the ground plane under the car, same camera and scale: the floor's footprint on the road.",
    "difference": "C_p of each variant minus C_p of the baseline at the same plan position (common plan grid); "
                  "blue: more suction than the baseline.",
    "vortices": "Iso-surfaces of Q/(V/h)² (Q-criterion normalised by the gap scale, h the ride height) coloured by "
                "the sense of rotation, tracked core centres as beads; seen from behind, below and the left.",
    "shear": "Wall-shear streak lines on the underside seen from below; orange: reversed streamwise shear; "
             "blue lines: zero streamwise shear (separation and reattachment lines).",
}


def environment() -> jinja2.Environment:
    """The report's jinja2 environment: autoescaping on, StrictUndefined."""
    return jinja2.Environment(loader=jinja2.FileSystemLoader(str(template_dir())), undefined=jinja2.StrictUndefined,
                              autoescape=True, trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=True)


def data_uri(data: bytes, mime: str) -> str:
    return f"data:{mime};base64," + base64.b64encode(data).decode("ascii")


def fmt(x, nd: int = 3) -> str:
    if x is None or isinstance(x, bool):
        return "—" if x is None else ("yes" if x else "")
    if isinstance(x, int):
        return str(x)
    if isinstance(x, float):
        return "—" if not math.isfinite(x) else f"{x:.{nd}f}"
    return str(x)


# --------------------------------------------------------------------------- words

def summary(data) -> dict:
    """The verdict in plain words: the recommended variant, why, and the
    standing of the others."""
    ranked = sorted((f for f in data.variants if f.rank is not None), key=lambda f: f.rank)
    if not ranked:
        return {"headline": "No variant can be recommended: no variant has a usable case.", "reasons": []}
    best = ranked[0]
    m = best.metrics
    reasons = []
    dec = getattr(data, "decision", None)

    def score(f):
        u = getattr(f, "score_uncertainty", None)
        return f"{f.score:.3f}" + (f" ± {u:.2g}" if u is not None else "") if f.score is not None else "—"

    if len(ranked) > 1:
        second = ranked[1]
        reasons.append(f"{best.variant} has the highest score, {score(best)} against {score(second)} for "
                       f"{second.variant} (weighted performance and robustness"
                       + (" on the operating points every variant has" if dec is not None else ", best = 1 per metric")
                       + ").")
    else:
        reasons.append(f"{best.variant} is the only variant with usable cases.")
    if m.get("downforce") is not None:
        others = [f.metrics.get("downforce") for f in ranked[1:] if f.metrics.get("downforce") is not None]
        cmp_ = ""
        if others:
            cmp_ = (" — the most of all variants" if m["downforce"] >= max(others)
                    else f" (best of the others: {max(others):.3f})")
        reasons.append(f"Mean downforce coefficient −C_L {m['downforce']:.3f}{cmp_}; mean efficiency −C_L/C_D "
                       f"{fmt(m.get('efficiency'), 2)}.")
    if m.get("balance_range") is not None:
        reasons.append(f"Its aero balance moves by {100 * m['balance_range']:.1f} % of the downforce across the "
                       f"envelope.")
    if best.pareto:
        reasons.append("No other variant beats it on downforce, efficiency and balance range at once (Pareto front).")
    if best.tie_with:
        reasons.append("Its score is not distinguishable from that of " + ", ".join(best.tie_with) +
                       " within their uncertainty: treat them as a tie.")
    if not best.complete:
        reasons.append("Careful: it lacks usable results at some points of the envelope (see the watch list).")
    if dec is not None:
        status = str(dec.get("status", ""))
        if status == "clear" and dec.get("winner"):
            head = f"Build {dec['winner']}."
        elif status == "incomplete":
            head = "No clean winner yet: " + str(dec.get("message", "")).rstrip(".") + "."
            if dec.get("best_complete"):
                reasons.append(f"The best variant with usable results over the whole envelope is "
                               f"{dec['best_complete']}.")
        elif status == "tie":
            head = "A tie: " + ", ".join(str(t) for t in dec.get("tied") or ()) + " cannot be told apart within " \
                   "their uncertainty."
        else:
            head = "No variant can be recommended: " + str(dec.get("message", status)).rstrip(".") + "."
        return {"headline": head, "reasons": reasons, "variant": dec.get("winner")}
    head = f"Build {best.variant}." if best.complete and not best.tie_with else \
        f"Lean towards {best.variant}, with the reservations below."
    return {"headline": head, "reasons": reasons, "variant": best.variant}


def caution_text(c) -> tuple[str, str]:
    """(severity, sentence) of a caution; severity 'high' or 'note'."""
    v = c.variant or "the sweep"
    n = len(c.cases)
    if c.kind == "missing-points":
        return "high", f"{v}: {n} case(s) have no result ({', '.join(c.cases)}); they are not in the ranking."
    if c.kind == "flagged-points":
        return "high", (f"{v}: {n} case(s) carry flags ({c.detail}) and are not ranked: {', '.join(c.cases)}.")
    if c.kind == "incomplete-winner":
        return "high", f"The best-scoring variant {v} is incomplete: {c.detail.rstrip('.')}."
    if c.kind == "tie":
        return "high", f"{v} ties with {c.detail}: the data do not separate them."
    if c.kind == "stall-in-envelope":
        where = f" at {1000 * c.value:.1f} mm" if c.value is not None else ""
        return "high", f"{v}: downforce peaks{where} and falls again below it inside the envelope (stall). {c.detail}"
    if c.kind == "bottoming":
        return "high", f"{v}: the floor reaches the ground at {c.value:.0f} m/s, below the top speed." \
            if c.value is not None else f"{v}: the floor reaches the ground below the top speed."
    if c.kind == "mesh-uncertainty":
        return "high", f"Mesh uncertainty larger than the difference between the leading variants: {c.detail}."
    if c.kind == "ramp-separation":
        return "note", (f"{v}: the flow separates on the diffuser ramp in {n} case(s), earliest at "
                        f"{100 * c.value:.0f} % of the ramp length from the throat ({', '.join(c.cases)}).")
    if c.kind == "pictures-missing":
        return "note", f"Pictures: {c.detail}"
    if c.kind == "weights":
        return "high", f"The leading variant {v} changes when one ranking weight moves by ±25 %: {c.detail}."
    if c.kind == "decision":
        return "high", f"The analysis names no winner: {c.detail}."
    return "note", c.detail


# --------------------------------------------------------------------------- sections

@dataclass
class RenderInfo:
    """What rendering took: seconds per stage and per pictured case,
    the picture backend, the document size (bytes)."""

    seconds: dict = field(default_factory=dict)
    picture_seconds: dict = field(default_factory=dict)
    backend: str | None = None
    size: int = 0
    notes: list = field(default_factory=list)


def _legend(scale) -> list[dict]:
    return [{"colour": c, "label": lab} for c, lab in scale.legend()]


def picture_groups(data, options: PictureOptions, info: RenderInfo) -> tuple[list[dict], list[str]]:
    """Pictures grouped by view (one camera per view), or reasons why not."""
    notes = []
    if not data.options.pictures:
        return [], ["pictures switched off (--no-pictures)"]
    if not data.scenes:
        return [], ["no case could be pictured"]
    try:
        ps = render_pictures(list(data.scenes), baseline=data.baseline, options=options)
    except RenderingUnavailable as exc:
        return [], [f"pictures not drawn: {exc}"]
    info.backend = ps.backend
    info.picture_seconds = dict(ps.seconds)
    cases = {c.variant: c for c in data.picture_cases}
    groups = []
    for view in options.views:
        items = []
        for variant, pics in ps.pictures.items():
            p = pics.get(view)
            if p is None:
                continue
            pc = cases.get(variant)
            cap = variant
            if pc is not None:
                cap += (f" · {pc.case_id} · front {1000 * pc.ride_height_front:.1f} mm, rear "
                        f"{1000 * pc.ride_height_rear:.1f} mm, yaw {pc.yaw_deg:g}°")
            items.append({"variant": variant, "caption": cap, "src": data_uri(p.data, p.mime), "width": p.width,
                          "height": p.height, "alt": f"{VIEW_TITLES[view]}: {variant}",
                          "notes": list(p.notes) + ([pc.note] if pc is not None and pc.note else [])})
        if not items:
            continue
        legend = None
        if view in ("floor", "ground"):
            legend = {"title": "C_p", "bands": _legend(options.cp_scale)}
        elif view == "difference":
            legend = {"title": f"ΔC_p against {data.baseline}", "bands": _legend(options.dcp_scale)}
        elif view == "vortices":
            legend = {"title": "rotation", "bands": [{"colour": hex_colour(SENSE_COLOURS[s]), "label": SENSE_NAMES[s]}
                                                     for s in (+1, -1)]}
        elif view == "shear":
            from .pictures import SHEAR_STATE_COLOURS

            legend = {"title": "underside flow", "bands": [
                {"colour": hex_colour(SHEAR_STATE_COLOURS[0]), "label": "attached (streamwise shear as on the floor)"},
                {"colour": hex_colour(SHEAR_STATE_COLOURS[1]), "label": "reversed"},
                {"colour": "#00408f", "label": "zero streamwise shear (separation / reattachment)"}]}
        groups.append({"view": view, "title": VIEW_TITLES[view], "about": VIEW_NOTES[view], "legend": legend,
                       "items": items})
    return groups, notes


def plot_figures(data) -> dict[str, list[dict]]:
    """The plots as data URIs, by section."""
    out: dict[str, list[dict]] = {"envelope": [], "maps": [], "pareto": [], "platform": [], "histories": []}
    variants = [f.variant for f in data.variants]

    def add(section, caption, svg):
        out[section].append({"caption": caption, "src": data_uri(svg, "image/svg+xml")})

    if any(p.curves for p in data.ride_height_panels):
        add("envelope", "Downforce, drag and balance against the mean of front and rear ride height; one line per "
                        "variant and yaw angle; hollow markers: flagged cases (not ranked).",
            pl.line_panels(data.ride_height_panels, "mean ride height (mm)", variants=variants))
    if data.yaw_panels:
        add("envelope", "Downforce and side force against yaw, one line per variant and front ride height.",
            pl.line_panels(data.yaw_panels, "yaw β (deg)", variants=variants, width=7.5))
    if data.maps:
        add("maps", "Fitted ride-height maps (filled contours, one colour range for all variants), measured points as "
                    "circles labelled with the fit error (prediction − measured).", pl.map_contours(data.maps))
    if data.pareto:
        add("pareto", "Mean downforce against mean drag per variant (finest mesh, usable cases); filled: no variant has "
                      "more downforce for less drag; bars: uncertainty where known; grey bands join tied variants.",
            pl.pareto_plot(data.pareto))
    if data.platform:
        add("platform", "Ride height under aerodynamic load against speed.", pl.platform_plot(data.platform))
    if data.histories:
        add("histories", "Total force along body x and z of each run over its settling window (the last 30 % of "
                         "the iterations), in per mille of the window mean.", pl.history_multiples(data.histories))
    return out


def _rows(rows, nd=4):
    return [{k: fmt(v, nd) if not isinstance(v, str) else v for k, v in r.items()} for r in rows]


def build_context(data, options: PictureOptions = PictureOptions(), info: RenderInfo | None = None) -> dict:
    info = info or RenderInfo()
    t0 = time.perf_counter()
    groups, pnotes = picture_groups(data, options, info)
    t1 = time.perf_counter()
    figures = plot_figures(data)
    t2 = time.perf_counter()
    info.seconds.update(pictures=t1 - t0, plots=t2 - t1)
    cautions = [caution_text(c) for c in data.cautions]
    for n in pnotes + [f"{cid}: {why}" for cid, why in data.pictures_skipped]:
        cautions.append(("note", f"Pictures: {n}"))
    metric_names = list(dict.fromkeys(k for f in data.variants for k in f.metrics))
    standings = [{
        "rank": f.rank if f.rank is not None else "—", "variant": f.variant,
        "score": fmt(f.score, 3) + (f" ± {f.score_uncertainty:.2g}" if getattr(f, "score_uncertainty", None)
                                    is not None else ""),
        "pareto": "yes" if f.pareto else "", "complete": "yes" if f.complete else "no",
        "tie": ", ".join(f.tie_with), "n": f.n_cases, "flagged": f.n_flagged,
        "values": [fmt(f.metrics.get(k), 3) for k in metric_names], "notes": "; ".join(f.notes),
    } for f in data.variants]
    base_cols = [("variant", "variant", None), ("case_id", "case", None)]
    diff_cols = base_cols + [
        ("diffuser_cpr", "C_pr", 3), ("diffuser_cpr_ideal", "ideal (area)", 3),
        ("diffuser_cpr_ideal_bulk", "ideal (bulk ū)", 3), ("diffuser_effectiveness", "effectiveness", 2),
        ("diffuser_side_inflow", "side inflow", 2), ("diffuser_cp_throat", "C_p throat", 3),
        ("separation_fraction", "separation on ramp", 2), ("floor_suction_area", "suction ∫dA (m²)", 4),
        ("floor_cp_mean", "mean C_p under floor", 3),
    ]
    pair_keys = sorted({k.split("_")[1] for r in data.flow_rows for k in r if k.startswith("vortex_")},
                       key=lambda s: int(s) if s.isdigit() else 0)
    pair_cols = base_cols[:]
    for st in pair_keys:
        pair_cols += [(f"vortex_{st}_circulation", f"Γ at {st} % (m²/s)", 4), (f"vortex_{st}_y", f"±y at {st} % (m)", 3),
                      (f"vortex_{st}_height", f"height at {st} % (m)", 4)]

    def table(cols):
        return {"columns": [lab for _, lab, _ in cols],
                "rows": [[fmt(r.get(k), nd) if nd is not None else str(r.get(k, "")) for k, _, nd in cols]
                         for r in data.flow_rows]}

    flow_tables = [table(diff_cols)] + ([table(pair_cols)] if pair_keys else [])
    return {
        "title": data.title, "study": data.study, "created": data.created, "version": data.version,
        "n_cases": data.n_cases, "n_usable": data.n_usable,
        "summary": summary(data), "cautions": cautions,
        "picture_groups": groups, "figures": figures, "map_note": data.map_note,
        "standings": standings, "flow_tables": flow_tables,
        "metric_labels": [METRIC_LABELS.get(k, k.replace("_", " ")) for k in metric_names],
        "mesh_study": data.mesh_study, "checks": _rows(data.checks, 2), "cases": data.cases, "cost": data.cost,
        "flagged": [c for c in data.cases if c.get("flags")],
        "notes": list(data.notes), "baseline": data.baseline, "analysis": data.analysis,
        "backend": info.backend, "picture_seconds": {k: f"{v:.2f}" for k, v in info.picture_seconds.items()},
        "scales": {"cp": {"name": CP_SCALE.name, "lo": CP_SCALE.lo, "hi": CP_SCALE.hi, "step": CP_SCALE.step},
                   "dcp": {"lo": DCP_SCALE.lo, "hi": DCP_SCALE.hi, "step": DCP_SCALE.step}},
        "size_note": "",
    }


def render_report(data, options: PictureOptions = PictureOptions()) -> tuple[str, RenderInfo]:
    """The HTML text of the report and what rendering took. ``data``: the
    report data, or a sweep analysis carrying it as ``report_data``."""
    data = getattr(data, "report_data", None) or data
    info = RenderInfo()
    ctx = build_context(data, options, info)
    t0 = time.perf_counter()
    tmpl = environment().get_template(TEMPLATE)
    text = tmpl.render(**ctx)
    size = len(text.encode("utf-8"))
    if size > data.options.max_bytes:
        ctx["size_note"] = (f"This report is {size / 1e6:.1f} MB, above the {data.options.max_bytes / 1e6:.1f} MB "
                            f"aimed at; use --no-pictures for very large sweeps.")
        text = tmpl.render(**ctx)
        size = len(text.encode("utf-8"))
    info.seconds["html"] = time.perf_counter() - t0
    info.size = size
    return text, info


def write_report(data, path: str | os.PathLike, options: PictureOptions = PictureOptions(),
                 info: RenderInfo | None = None) -> Path:
    """Render and write the report atomically; returns the path. ``info``
    (optional) is filled with what rendering took."""
    text, got = render_report(data, options)
    if info is not None:
        info.__dict__.update(got.__dict__)
    p = Path(path)
    write_text_atomic(p, text)
    return p
