"""The default fidelity (`coarse`, prism layers on a snapped mesh) on the
example floor with the real solver, through the user's commands
(`caseprep write`, `caseprep run`).

``test_hardest_variant_coarse_runs`` (CI): the 14-degree diffuser with
strakes at the lowest ride height of the example sweep, 100 iterations on
2 ranks: no crash, numerics chosen from the mesh, every residual falling.

``test_example_floor_converges_at_coarse`` (marker ``campaign``: hours on two
cores; runs only with UNDERFLOOR_CAMPAIGN=1): every variant at two ride
heights and both yaw angles runs to the runner's convergence verdict; the
measured figures are in the README ("Solver settings").
"""
from __future__ import annotations

import json
import math
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "example_cases" / "floor_study"
BIN = Path(sys.executable).parent


def coarse_config(tmp: Path, *, variants: list[str], ride_heights: list[float], yaws: list[float],
                  iterations: int | None) -> Path:
    """The example floor config at the default fidelity (the `mesh` table
    removed, so the config's default applies), restricted to some variants
    and points; geometry paths point at the example's STL files."""
    text = (EXAMPLE / "sweep.toml").read_text()
    text = text.replace('geometry = "geometry/', f'geometry = "{EXAMPLE}/geometry/')
    text = re.sub(r'(?m)^\[mesh\]\nfidelity = "smoke"\n', "", text)
    assert not re.search(r"(?m)^fidelity", text)  # the config's default fidelity applies
    text = re.sub(r"(?m)^ride_height = .*$", f"ride_height = {ride_heights!r}", text)
    text = re.sub(r"(?m)^yaw_deg = .*$", f"yaw_deg = {yaws!r}", text)
    text = text.replace("[sweep]\n", f"[sweep]\nvariants = {json.dumps(variants)}\n", 1)
    if iterations is not None:  # a fixed budget: every iteration run (the numerics are under test, not the stop)
        text = text.replace("[solver]\n", f"[solver]\niterations = {iterations}\nstop_rule = \"budget\"\n", 1)
    cfg = tmp / "coarse.toml"
    cfg.write_text(text)
    return cfg


def write_and_run(cfg: Path, out: Path, *args: str, timeout: float) -> list[dict]:
    env = dict(os.environ)
    env.pop("UF_RANKS", None)
    w = subprocess.run([str(BIN / "caseprep"), "write", str(cfg), "-o", str(out)],
                       capture_output=True, text=True, timeout=300, env=env)
    assert w.returncode == 0, w.stdout + w.stderr
    r = subprocess.run([str(BIN / "caseprep"), "run", str(out), "-q", *args],
                       capture_output=True, text=True, timeout=timeout, env=env)
    records = [json.loads(p.read_text()) for p in sorted((out / "cases").glob("*/underfloor-run.json"))]
    assert records, r.stdout + r.stderr
    return records


def solver_residuals(case: Path) -> dict[str, list[float]]:
    """Initial residual per iteration and field from the solver's log: the
    first solve of each field in each iteration (the pressure equation is
    solved again for every non-orthogonal corrector)."""
    out: dict[str, list[float]] = {}
    text = (case / "logs" / "simpleFoam.log").read_text()
    for block in re.split(r"(?m)^Time = ", text)[1:]:
        seen: set[str] = set()
        for field, value in re.findall(r"Solving for (\w+), Initial residual = ([-+0-9.eE]+)", block):
            if field not in seen:
                seen.add(field)
                out.setdefault(field, []).append(float(value))
    return out


@pytest.mark.solver
@pytest.mark.slow
def test_hardest_variant_coarse_runs(tmp_path):
    # diffuser14 at the example's lowest ride height: the layered mesh whose
    # pressure equation diverged within 14 iterations before the numerics
    # followed the mesh
    cfg = coarse_config(tmp_path, variants=["diffuser14"], ride_heights=[0.020], yaws=[0.0], iterations=100)
    out = tmp_path / "sweep"
    (rec,) = write_and_run(cfg, out, "--ranks", "2", timeout=3000)
    case = out / "cases" / rec["case_id"]
    assert rec["status"] == "ok", rec  # meshed, solved (budget used up: flagged not-converged) and exported
    assert rec["iterations"] == 100, rec
    check_layered_run(case, 100)
    lo, hi, median = floor_yplus(case)
    # the solver's own y+ on the floor: its area-weighted median inside the band the first cell was sized for
    # (2 y+ nu/u_tau from Schlichting's flat-plate friction at 1.4 V; band of Spalding's wall function,
    # caseprep/contract/walls.py)
    assert lo <= median <= hi, (median, lo, hi)


def floor_yplus(case: Path) -> tuple[float, float, float]:
    """(band low, band high, area-weighted median) of the solver's ``yPlus``
    on the floor: the body's underside faces (their normal, out of the fluid into the body, z > 0.9) in its
    latest VTK export; the band is the one the case's manifest names."""
    import numpy as np

    from caseprep.contract.manifest import read_manifest
    from caseprep.contract.walls import wall_treatment
    from postproc.io.exports import latest_export
    from postproc.io.surfaces import read_surface
    from postproc.kernels.polygons import face_geometry

    rec = next(c for c in read_manifest(case.parent.parent).cases if c.case_id == case.name)
    surf = read_surface(latest_export(case), list(rec.patches["body"]), arrays=["yPlus"])
    S, _ = face_geometry(surf.points, (surf.offsets, surf.connectivity))
    a = np.linalg.norm(S, axis=1)
    down = S[:, 2] / np.where(a > 0, a, 1.0) > 0.9
    yp, w = np.asarray(surf.array("yPlus"), float)[down], a[down]
    order = np.argsort(yp)
    cum = np.cumsum(w[order])
    median = float(yp[order][np.searchsorted(cum, 0.5 * cum[-1])])
    lo, hi = wall_treatment(rec.wall_treatment, rec.turbulence_model).band
    return lo, hi, median


def check_layered_run(case: Path, iterations: int) -> None:
    """What a healthy start on a layered snapped mesh looks like: numerics
    chosen from the mesh, no floating-point exception, every residual
    falling, a finite force monitor with downforce. Separate from the run so
    that it can be applied to a case run by hand."""
    log = (case / "logs" / "simpleFoam.log").read_text()
    # a floating-point trap prints the signal handler in its stack trace
    # (the header line "Floating point exception trapping enabled" is normal)
    assert "sigFpe::sigHandler" not in log and "FOAM FATAL" not in log
    # the mesh stage chose the numerics from the checker's figures
    numerics = (case / "system" / "meshNumerics").read_text()
    nonortho = float(re.search(r"meshMaxNonOrthogonality ([0-9.eE+-]+);", numerics).group(1))
    correctors = int(re.search(r"nNonOrthogonalCorrectors (\d+);", numerics).group(1))
    assert nonortho >= 60.0 and correctors >= 1, numerics  # a layered snapped mesh
    # every residual falls: the last initial residual at least one order of
    # magnitude below the largest of the first five iterations (common
    # practice, no source: a diverging or stalled run does not get there),
    # and no field rises over the last 20 iterations by more than a factor 3
    res = solver_residuals(case)
    for field in ("Ux", "Uy", "Uz", "p", "k", "omega"):
        seq = res[field]
        assert all(math.isfinite(v) for v in seq), field
        drop = math.log10(max(seq[:5]) / seq[-1])
        assert drop >= 1.0, (field, drop, seq[-5:])
        assert seq[-1] <= 3.0 * min(seq[-20:]), (field, seq[-20:])
    # the force monitor is finite and the floor makes downforce
    forces = (case / "postProcessing" / "uf_forces" / "0" / "force.dat").read_text().splitlines()
    rows = [l for l in forces if l and not l.startswith("#")]
    assert len(rows) == iterations
    total = [float(v) for v in rows[-1].split("(")[1].split(")")[0].split()]
    assert all(math.isfinite(v) for v in total)
    assert total[2] < 0.0  # body z up: downforce is a negative z force


CAMPAIGN = os.environ.get("UNDERFLOOR_CAMPAIGN") == "1"


@pytest.mark.solver
@pytest.mark.slow
@pytest.mark.campaign
@pytest.mark.skipif(not CAMPAIGN, reason="hours on two cores: set UNDERFLOOR_CAMPAIGN=1")
def test_example_floor_converges_at_coarse(tmp_path):
    cfg = coarse_config(tmp_path, variants=["flat", "diffuser8", "diffuser14"], ride_heights=[0.020, 0.030],
                        yaws=[0.0, 4.0], iterations=None)
    out = Path(os.environ.get("UNDERFLOOR_CAMPAIGN_OUT", tmp_path / "sweep"))
    records = write_and_run(cfg, out, "-j", "2", "--ranks", "1", timeout=48 * 3600)
    summary = {r["case_id"]: (r["status"], r.get("iterations"), r.get("convergence")) for r in records}
    assert len(records) == 12, summary
    assert all(r["status"] == "ok" and "not-converged" not in r["flags"] for r in records), summary
