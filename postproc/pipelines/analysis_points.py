"""From the results table to operating points with uncertainties: repeats
averaged, the mesh study (grid convergence index) per point, and the
combined standard uncertainty of each coefficient.

Uncertainty of a coefficient at one point (standard uncertainties combined
in quadrature, GUM JCGM 100:2008 §5.1, treating the sources as independent):

    u² = u_iter² + u_mesh² + u_fit²

* u_iter: the table's ``u_*`` column (e.g. the iterative standard deviation
  over the settled window), combined with the standard error of repeated
  rows (s/√n) when a point was run more than once;
* u_mesh: GCI_fine·|φ_fine| from the three finest mesh levels of that point
  (Celik et al. 2008, J. Fluids Eng. 130(7) 078001; ``postproc.meshstudy``),
  or |φ1 − φ2| when the three levels do not converge monotonically
  (indicative only); a point without its own study takes the largest
  relative GCI of its variant's studied points;
* u_fit: the leave-one-out RMS error of the variant's aero map of that
  coefficient (added by the pipeline after the maps are fitted).

Mesh level m has the representative cell size h_m ∝ √2^(−m) (the sweep's
mesh levels divide the base cell by √2): a table from elsewhere must follow
that rule for the GCI to hold, or use one mesh level.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from ..io.results_table import ResultsTable
from ..kernels.meshstudy import grid_convergence

COEFS = ("cl", "cd", "cs", "cl_front", "cl_rear")


@dataclass(frozen=True)
class OpPoint:
    """One variant at one operating point and mesh level (m, deg, m/s);
    ``values`` and the uncertainties by coefficient name (:data:`COEFS`)."""

    variant: str
    h_f: float
    h_r: float
    yaw: float
    speed: float
    level: int
    flags: tuple[str, ...]
    values: dict[str, float]
    area: float
    u_iter: dict[str, float] = field(default_factory=dict)
    u_mesh: dict[str, float] = field(default_factory=dict)
    u_fit: dict[str, float] = field(default_factory=dict)
    case_ids: tuple[str, ...] = ()
    rho: float = math.nan

    @property
    def usable(self) -> bool:
        return not self.flags and math.isfinite(self.values["cl"]) and math.isfinite(self.values["cd"])

    def key(self) -> tuple:
        """(variant, h_f, h_r, yaw, speed, level) rounded for matching (1 µm, 0.001 deg, 0.001 m/s)."""
        return (self.variant, round(self.h_f, 6), round(self.h_r, 6), round(self.yaw, 3), round(self.speed, 3),
                self.level)

    def u(self, c: str) -> float:
        """Combined standard uncertainty of coefficient ``c`` (module docstring)."""
        parts = [d.get(c, 0.0) for d in (self.u_iter, self.u_mesh, self.u_fit)]
        return math.sqrt(sum(x * x for x in parts if math.isfinite(x)))


def _combine(rows: list[int], t: ResultsTable, notes: list[str]) -> OpPoint:
    """One OpPoint from the table rows of one key: the usable rows averaged
    (their scatter added to u_iter), or the flagged rows' flags united."""
    i0 = rows[0]
    usable = [i for i in rows if not t.flags[i] and math.isfinite(t.col("cl")[i]) and math.isfinite(t.col("cd")[i])]
    use = usable or rows
    flags = () if usable else tuple(dict.fromkeys(f for i in rows for f in (t.flags[i] or ("no-coefficients",))))
    vals, u_it = {}, {}
    for c in COEFS:
        x = np.array([t.col(c)[i] for i in use])
        vals[c] = float(np.mean(x)) if np.all(np.isfinite(x)) else math.nan
        u = np.array([t.col("u_" + c)[i] for i in use])
        u0 = float(np.mean(u)) if np.all(np.isfinite(u)) else 0.0
        rep = float(np.std(x, ddof=1) / math.sqrt(len(x))) if len(x) > 1 and np.all(np.isfinite(x)) else 0.0
        u_it[c] = math.hypot(u0, rep)
    if len(usable) > 1:
        notes.append(f"{t.variant[i0]}: {len(usable)} repeated rows at one point averaged "
                     f"({', '.join(t.case_id[i] for i in usable)}); their scatter is in the uncertainty")
    if usable and len(usable) < len(rows):
        notes.append(f"{t.variant[i0]}: flagged repeat(s) {', '.join(t.case_id[i] for i in rows if i not in usable)} "
                     "ignored: a usable repeat of the same point exists")
    area, rho = (_finite_mean([t.col(k)[i] for i in use]) for k in ("reference_area", "air_density"))
    c = t.col
    return OpPoint(t.variant[i0], float(c("ride_height_front")[i0]), float(c("ride_height_rear")[i0]),
                   float(c("yaw_deg")[i0]), float(c("speed")[i0]), int(c("mesh_level")[i0]), flags, vals, area,
                   u_it, {}, {}, tuple(t.case_id[i] for i in rows), rho)


def _finite_mean(values) -> float:
    a = np.asarray(values, dtype=float)
    return float(np.mean(a[np.isfinite(a)])) if np.any(np.isfinite(a)) else math.nan


def operating_points(t: ResultsTable) -> tuple[list[OpPoint], list[str]]:
    """The table's rows grouped by (variant, point, mesh level); repeats combined."""
    groups: dict[tuple, list[int]] = {}
    c = t.col
    for i in range(len(t)):
        k = (t.variant[i], round(float(c("ride_height_front")[i]), 6), round(float(c("ride_height_rear")[i]), 6),
             round(float(c("yaw_deg")[i]), 3), round(float(c("speed")[i]), 3), int(c("mesh_level")[i]))
        groups.setdefault(k, []).append(i)
    notes: list[str] = []
    return [_combine(rows, t, notes) for rows in groups.values()], notes


def level_cell_size(level: int) -> float:
    """Representative cell size of mesh level m relative to level 0: each
    level divides the base cell by √2 (caseprep's mesh levels), so
    h_m = 2^(−m/2). Dimensionless."""
    return 2.0 ** (-0.5 * level)


def mesh_study(points: list[OpPoint]) -> tuple[list[dict], list[str]]:
    """Grid convergence per (variant, point) with ≥ 3 usable mesh levels, for
    C_L, C_D, C_LF, C_LR (the three finest levels). One record per point and
    coefficient (phi fine first, the GCI as a fraction of φ_fine)."""
    by: dict[tuple, dict[int, OpPoint]] = {}
    for p in points:
        if p.usable:
            by.setdefault(p.key()[:5], {})[p.level] = p
    out, notes = [], []
    for key, levels in by.items():
        if len(levels) < 3:
            continue
        lv = sorted(levels)[-3:][::-1]
        for c in ("cl", "cd", "cl_front", "cl_rear"):
            phi = [levels[m].values[c] for m in lv]
            if not all(math.isfinite(x) for x in phi):
                continue
            g = grid_convergence(*phi, *(level_cell_size(m) for m in lv))
            u = g.gci_fine * abs(phi[0]) if g.converged and math.isfinite(g.gci_fine) else abs(phi[0] - phi[1])
            out.append({"variant": key[0], "ride_height_front": key[1], "ride_height_rear": key[2],
                        "yaw_deg": key[3], "speed": key[4], "coefficient": c, "levels": lv, **g.to_dict(),
                        "u_mesh": u, "u_mesh_basis": "GCI_fine·|φ1|" if g.converged else "|φ1 − φ2| (indicative)"})
    return out, notes


def comparison_levels(points: list[OpPoint]) -> dict[str, int]:
    """The finest mesh level of each variant (where it is compared and mapped)."""
    lv: dict[str, int] = {}
    for p in points:
        lv[p.variant] = max(lv.get(p.variant, p.level), p.level)
    return lv


def with_mesh_uncertainty(points: list[OpPoint], study: list[dict]) -> tuple[list[OpPoint], list[str]]:
    """Each point's u_mesh from its own study, else the variant's largest
    relative GCI × |φ| (noted); unchanged when the table has no mesh axis."""
    own = {(s["variant"], s["ride_height_front"], s["ride_height_rear"], s["yaw_deg"], s["speed"], s["coefficient"]):
           s["u_mesh"] for s in study}
    worst: dict[tuple[str, str], float] = {}
    for s in study:
        rel = s["u_mesh"] / abs(s["phi"][0]) if s["phi"][0] else 0.0
        worst[(s["variant"], s["coefficient"])] = max(worst.get((s["variant"], s["coefficient"]), 0.0), rel)
    notes = []
    if not study:
        notes.append("no point was solved on three mesh levels: mesh uncertainty (GCI) not included")
    borrowed = set()
    out = []
    for p in points:
        um = {}
        for c in ("cl", "cd", "cl_front", "cl_rear"):
            k = p.key()[:5] + (c,)
            if k in own:
                um[c] = own[k]
            elif (p.variant, c) in worst and math.isfinite(p.values[c]):
                um[c] = worst[(p.variant, c)] * abs(p.values[c])
                borrowed.add(p.variant)
        out.append(replace(p, u_mesh=um))
    for v in sorted(borrowed):
        notes.append(f"{v}: points without their own mesh study take the variant's largest relative GCI")
    return out, notes
