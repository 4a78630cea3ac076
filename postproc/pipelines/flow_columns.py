"""The flow columns of one case for the sweep table, and its picture scene:
one pass over the case's volume result (:func:`analyse_case_flow`).

The metrics are a reduction of exactly the payload ``postproc flow`` prints
(:func:`postproc.pipelines.case_flow.flow_payload`, same defaults), so that a number
in the sweep table equals the one ``postproc flow`` gives for the same case.

Columns (all SI or dimensionless; body frame x rearward, y right, z up):

``diffuser_cpr``            C_pr = (p̄_exit − p̄_throat)/(½ρū_throat²)
``diffuser_cpr_ideal``      1 − (A_throat/A_exit)² (closed-duct ideal)
``diffuser_cpr_ideal_bulk`` 1 − (ū_exit/ū_throat)² (ideal of the actual bulk
                            deceleration; open sides, moving ground)
``diffuser_effectiveness``  C_pr / C_pr,ideal; ``..._bulk`` against the bulk ideal
``diffuser_side_inflow``    (ṁ_exit − ṁ_throat)/ṁ_throat
``diffuser_cp_throat``      (p̄_throat − p_ref)/(½ρV²)
``diffuser_throat_x``, ``diffuser_exit_x``  stations (m)
``vortex_<s>_circulation``  main pair at station s (s = % of the floor length
                            from its leading edge): mean |Γ| of the strongest
                            core of each sense (m²/s)
``vortex_<s>_y``            half the spanwise distance between the pair's
                            centres (m); ``vortex_<s>_height`` their mean height
                            above the ground (m); ``vortex_<s>_x`` the station used
``separation_x``            first separation (streamwise wall shear changing
                            from the attached sign) on the centreline between
                            throat and exit (m; None: attached on the ramp;
                            without a diffuser: on the rear half of the floor);
                            ``separation_fraction`` its position from throat (0)
                            to exit (1)
``floor_suction_line``      −∫ min(Cp, 0) dx along the centreline (m)
``floor_suction_area``      −∫ min(Cp, 0) dA over the underside seen from below (m²)
``floor_cp_mean``           ∫ Cp dA / plan area of the underside
"""
from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from caseprep.contract.errors import UserError

from postproc.io import flow as flowio
from postproc.pipelines.case_flow import DEFAULT_YPLUS_BAND, flow_payload, references
from postproc.pipelines.case_scene import build_scene


#: main-pair stations, as fractions of the floor length from its leading edge
PAIR_STATIONS = (0.70, 0.85, 1.00)
#: a pair is taken from the station nearest each of them that holds one, within this fraction of the floor length
PAIR_WINDOW = 0.05


@dataclass(frozen=True)
class FlowOptions:
    """Settings of the per-case flow pass (one object instead of a long
    argument list). ``q_scale``/``q_star``/``gap`` as for ``postproc flow``;
    ``target`` the y+ range of the wall treatment; ``pair_stations`` where
    the main vortex pair is reported; ``scene`` whether the picture scene is
    built; ``plan_cells`` plan-grid cells along the body for the pictures."""

    q_scale: str = "auto"
    q_star: float | None = None
    gap: float | None = None
    target: tuple[float, float] = DEFAULT_YPLUS_BAND
    pair_stations: tuple[float, ...] = PAIR_STATIONS
    scene: bool = False
    plan_cells: int = 320


@dataclass(frozen=True)
class FlowMetrics:
    """The flow columns of one case (see the module docstring) and why any
    part is missing."""

    columns: dict
    notes: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        return {**self.columns, "flow_notes": "; ".join(self.notes)}


def _num(v):
    return float(v) if v is not None and isinstance(v, (int, float)) and math.isfinite(v) else None


def station_label(frac: float) -> str:
    return f"{round(100 * frac):d}"


def flow_metrics(payload: dict, options: FlowOptions = FlowOptions()) -> FlowMetrics:
    """Reduce a ``postproc flow`` payload to the sweep's flow columns.

    Long because: it reads the payload's sections one column after another, each
    with its own guard for a missing part.
    """
    cols: dict = {}
    notes: list[str] = []
    d = payload.get("diffuser") or {}
    keys = ("cpr", "cpr_ideal", "cpr_ideal_bulk", "effectiveness", "effectiveness_bulk", "side_inflow", "cp_throat",
            "throat_x", "exit_x", "area_ratio")
    if "error" in d:
        notes.append("diffuser: " + d["error"].splitlines()[0])
    for k in keys:
        cols[f"diffuser_{k}"] = None if "error" in d else _num(d.get(k))
    # main vortex pair at the fixed stations
    v = payload.get("vortices") or {}
    frame = payload.get("frame") or {}
    ub = payload.get("underbody") or {}
    line0 = next((ln for ln in ub.get("lines", []) if not ln.get("missing") and abs(ln.get("y", 1.0)) < 1e-12), None)
    floor_x = None
    if line0 is not None and line0.get("x"):
        floor_x = (min(line0["x"]), max(line0["x"]))
    elif frame.get("body_x"):
        floor_x = tuple(frame["body_x"])
    gp = np.asarray(frame.get("ground_point", [0, 0, 0]), float)
    gn = np.asarray(frame.get("ground_normal", [0, 0, 1]), float)
    stations = v.get("stations", []) if "error" not in v else []
    if "error" in v:
        notes.append("vortices: " + v["error"].splitlines()[0])
    for frac in options.pair_stations:
        lab = station_label(frac)
        out = {"x": None, "circulation": None, "y": None, "height": None}
        if stations and floor_x is not None:
            span = floor_x[1] - floor_x[0]
            xt = floor_x[0] + frac * span
            # the station nearest the fixed position that holds a pair, within ±PAIR_WINDOW of the floor length
            near = sorted((st for st in stations if abs(st["x"] - xt) <= PAIR_WINDOW * span),
                          key=lambda st: abs(st["x"] - xt))
            for st in near:
                best = {}
                for c in st["cores"]:
                    sn = int(c["sense"])
                    if sn not in best or abs(c["circulation"]) > abs(best[sn]["circulation"]):
                        best[sn] = c
                if +1 in best and -1 in best:
                    a, b = best[+1], best[-1]
                    out["x"] = float(st["x"])
                    out["circulation"] = 0.5 * (abs(a["circulation"]) + abs(b["circulation"]))
                    out["y"] = 0.5 * abs(a["centre"][1] - b["centre"][1])
                    out["height"] = float(np.mean([(np.asarray(c["centre"]) - gp) @ gn for c in (a, b)]))
                    break
        for k, val in out.items():
            cols[f"vortex_{lab}_{k}"] = _num(val)
    # separation on the ramp (centreline)
    w = payload.get("walls") or {}
    sep = None
    if "error" in w:
        notes.append("walls: " + w["error"].splitlines()[0])
    else:
        # on the ramp: from the throat to the exit (without a diffuser: the rear half of the floor)
        tx, ex = cols.get("diffuser_throat_x"), cols.get("diffuser_exit_x")
        if tx is not None and ex is not None:
            x_from, x_to = tx, ex
        elif floor_x is not None:
            x_from, x_to = floor_x[0] + 0.5 * (floor_x[1] - floor_x[0]), floor_x[1]
        else:
            x_from, x_to = -math.inf, math.inf
        for rv in w.get("shear_reversals", []):
            if abs(rv.get("y", 1.0)) > 1e-12:
                continue
            for r in rv.get("reversals", []):
                if r["kind"] == "separation" and x_from <= r["x"] <= x_to and (sep is None or r["x"] < sep):
                    sep = r["x"]
    cols["separation_x"] = _num(sep)
    tx, ex = cols.get("diffuser_throat_x"), cols.get("diffuser_exit_x")
    cols["separation_fraction"] = (_num((sep - tx) / (ex - tx)) if sep is not None and tx is not None
                                   and ex is not None and ex > tx else None)
    # floor suction
    if "error" in ub:
        notes.append("underbody: " + ub["error"].splitlines()[0])
    cols["floor_suction_line"] = _num(line0.get("suction_integral")) if line0 else None
    u = ub.get("underside") or {}
    cols["floor_suction_area"] = _num(u.get("suction_area_integral"))
    cols["floor_cp_mean"] = _num(u.get("cp_mean"))
    return FlowMetrics(cols, tuple(notes))


@dataclass(frozen=True, eq=False)
class CaseFlow:
    """The flow pass of one case: its metrics, the ``postproc flow``
    payload, the picture scene (None unless asked for) and the time taken."""

    metrics: FlowMetrics
    payload: dict
    scene: object | None = None
    seconds: dict = field(default_factory=dict)
    scene_error: str | None = None


def analyse_case_flow(source, options: FlowOptions = FlowOptions(), *, label: str | None = None) -> CaseFlow:
    """Read a case (folder, .vtm or .vtu) once and compute its flow payload,
    its flow columns and, with ``options.scene``, its picture scene.
    Raises UserError when the case has no readable volume result."""
    t0 = time.perf_counter()
    case = source if isinstance(source, flowio.FlowCase) else flowio.read_flow(Path(source))
    t1 = time.perf_counter()
    payload, gd = flow_payload(case, q_star=options.q_star, q_scale=options.q_scale, gap=options.gap,
                                  target=options.target)
    t2 = time.perf_counter()
    metrics = flow_metrics(payload, options)
    scene = None
    scene_error = None
    if options.scene:
        refs = references(case)
        qn = payload.get("q_normalisation") or {}
        v = payload.get("vortices") or {}
        vres = None
        if gd is not None and "error" not in v:
            vres = tracks_only(v)
        rec = case.record
        q_scale = v.get("q_scale") if "error" not in v else None
        try:
            scene = build_scene(case, refs, label=label or (rec.case_id if rec else str(case.source)),
                                variant=rec.variant if rec else "", case_id=rec.case_id if rec else str(case.source),
                                gd=gd, vortices=vres, q_scale=q_scale, q_level=qn.get("threshold"),
                                spacing=None)
        except UserError as exc:
            scene_error = str(exc).splitlines()[0]
    t3 = time.perf_counter()
    return CaseFlow(metrics, payload, scene, {"read": t1 - t0, "flow": t2 - t1, "scene": t3 - t2}, scene_error)


@dataclass(frozen=True)
class _Track:
    centres: np.ndarray
    sense: int
    members: tuple


@dataclass(frozen=True)
class _Tracks:
    tracks: tuple
    wall_rotation_min: float | None


def tracks_only(v: dict) -> _Tracks:
    """The tracks of a vortices payload in the shape the scene builder reads."""
    tr = tuple(_Track(np.asarray(t["centres"], float), int(t["sense"]), tuple(t["stations"])) for t in v["tracks"])
    return _Tracks(tr, v.get("wall_rotation_min"))


