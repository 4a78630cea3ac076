"""Validation in ground effect with the real solver: a sphere over a moving
ground against published wall-effect correlations.

A sphere at rest over a ground that moves with the free stream is, in the
sphere's frame, the published problem of a sphere translating parallel to a
plane wall through fluid at rest. The whole tool chain is driven through its
command-line interfaces, as a user would (``caseprep write``, ``caseprep
run``, ``postproc forces --json``), on the bundled example configs in
``example_cases/sphere_ground/``:

- ``sweep_re100.toml``: Re = 100, gaps h/D = 0.25, 0.5, 1, 2, 4, plus the
  smallest gap one mesh level finer (every length of the mesh / √2);
- ``sweep_re20.toml``: Re = 20, gaps h/D = 0.25, 0.5, 1, 4;
- ``stationary_re100.toml``: the stationary-ground twin of the smallest gap
  (ground at rest, uniform inflow), Re = 100.

Gap convention: the configs measure ``ride_height`` at the sphere's lowest
point, so ride height = gap h (sphere surface to ground) and δ = h/D, the
correlations' gap parameter δ = L/d − 1/2 (L the centre-to-wall distance).

Cost: 11 cases, 1.41 M cells in all, about 14 CPU-minutes of solver time
(measured from the solver's logs); two sweeps run side by side, each one case
at a time on one MPI rank (one case per core of a 2-core machine). Measured
times are in the README ("Validation in ground effect").
"""
from __future__ import annotations

import json
import math
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest


ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "example_cases" / "sphere_ground"
CONFIGS = ("sweep_re100", "sweep_re20", "stationary_re100")
D = 0.1  # m, sphere diameter of the example configs


# --------------------------------------------------------------------------- reference correlations
def cd_schiller_naumann(re: float) -> float:
    """Standard drag curve of a sphere in unbounded uniform flow,
    C_D = 24/Re (1 + 0.15 Re^0.687) (dimensionless, area πd²/4).

    Valid for Re < 800 (±5 % about the standard curve; at Re = 20 it lies
    4.6 % below the Clift, Grace & Weber curve, at Re = 100 0.4 % above it).
    Schiller, L. & Naumann, A. (1933), Z. Ver. Dtsch. Ing. 77, 318; as quoted
    in Clift, R., Grace, J. R. & Weber, M. E. (1978), Bubbles, Drops, and
    Particles, Academic Press, table 5.2 (from memory).
    """
    return 24.0 / re * (1.0 + 0.15 * re**0.687)


def cd_translating_near_wall(re: float, delta: float) -> float:
    """Drag coefficient of a non-rotating sphere translating parallel to a
    plane wall through fluid at rest (dimensionless, force / (½ρU²πd²/4)):

        C_D = 24/Re · [1.028 − 0.07/(1 + 4δ²) − (8/15) ln(270δ / (135 + 256δ))]
                    · [1 + 0.15 (1 − exp(−√δ)) Re^(0.687 + 0.313 exp(−2√δ))]

    with Re = U d/ν and δ = L/d − 1/2 the gap between sphere surface and
    wall over the diameter (L: centre-to-wall distance). The first bracket
    is the creeping-flow wall correction, the second the finite-Re factor;
    far from the wall (δ → ∞) it tends to Schiller–Naumann (the first bracket
    to 0.9996), but slowly: at δ = 4 the second bracket is still that of
    Schiller–Naumann with 0.15 → 0.130 (C_D 2.9 % below it at Re = 100,
    0.5 % at Re = 20).

    Source: Zeng, L., Najjar, F., Balachandar, S. & Fischer, P. (2009),
    "Forces on a finite-sized particle located close to a wall in a linear
    shear flow", Phys. Fluids 21, 033302 — fitted to their resolved
    (spectral-element) simulations. The paper itself was not accessible to
    us: the equation and δ are as published in a secondary transcription,
    not checked against the original. Validity range of the drag fit: not
    given there; the paper's simulations covered Re up to a few
    hundred and gaps down to nearly touching (from memory). Units: none.
    """
    sd = math.sqrt(delta)
    stokes = 1.028 - 0.07 / (1.0 + 4.0 * delta**2) - 8.0 / 15.0 * math.log(270.0 * delta / (135.0 + 256.0 * delta))
    return 24.0 / re * stokes * (1.0 + 0.15 * (1.0 - math.exp(-sd)) * re ** (0.687 + 0.313 * math.exp(-2.0 * sd)))


def _cl_far(re: float, l_over_d: float) -> float:
    """Outer part of the wall-induced lift (see :func:`cl_translating_near_wall`)."""
    ls = l_over_d * re  # L* = L U/ν
    if ls < 10.0:
        c0 = (9.0 / 8.0 + 5.78e-6 * ls**4.58) * math.exp(-0.292 * ls)
    else:
        c0 = 8.94 * ls**-2.09
    f0 = 1.0 + 0.329 * re + 0.00485 * re**2
    f1 = -0.9 * math.tanh(0.022 * re)
    return f0 * c0 * l_over_d**f1


def cl_translating_near_wall(re: float, delta: float) -> float:
    """Wall-induced lift coefficient of a non-rotating sphere translating
    parallel to a plane wall through fluid at rest, positive away from the
    wall (dimensionless, force / (½ρU²πd²/4)):

        C_L = F(L/d) + (C_Lw − F(1/2)) exp(−11 (δ/g)^1.2)
        F(L/d) = (1 + 0.329 Re + 0.00485 Re²) · C_L0(L*) · (L/d)^(−0.9 tanh(0.022 Re))
        C_L0(L*) = (9/8 + 5.78·10⁻⁶ L*^4.58) exp(−0.292 L*)   for L* < 10
                 = 8.94 L*^−2.09                            for 10 ≤ L* < 300
        C_Lw = 0.313 + 0.812 exp(−0.125 Re^0.77)   (the lift at contact, δ = 0)
        g = 3 exp(−0.17 Re^0.7)

    with Re = U d/ν, δ = L/d − 1/2 and L* = (L/d) Re = L U/ν.
    Stated validity: 0 < Re < 100 and L* < 300 (so at Re = 100 up to
    δ = 2.5; our δ = 4 point at Re = 100 (L* = 450) lies outside and is
    checked only against the absolute tolerance).

    Source: Zeng, Najjar, Balachandar & Fischer (2009), Phys. Fluids 21,
    033302; C_L0 is the low-Re near-wall lift of Takemura, F. (2004),
    "Migration velocities of spherical solid particles near a vertical wall
    for Reynolds number from 0.1 to 5", Phys. Fluids 16, 204. The
    coefficients, the stated validity range and the composition are taken
    from the same secondary transcription as the drag (not checked against
    the original paper); the transcription writes
    5.78·10⁻⁶ L* without the exponent 4.58, which we take from memory of
    Takemura (2004) — it is the value that makes C_L0 continuous at L* = 10
    (0.0725 from both branches; without it the branches differ by 17 %).
    The transcription also mixes dimensional and dimensionless L; we use
    L/d throughout. Units: none.
    """
    clw = 0.313 + 0.812 * math.exp(-0.125 * re**0.77)
    g = 3.0 * math.exp(-0.17 * re**0.7)
    return _cl_far(re, delta + 0.5) + (clw - _cl_far(re, 0.5)) * math.exp(-11.0 * (delta / g) ** 1.2)


def test_reference_correlations_known_values():
    """The transcribed correlations against their own limits (no solver)."""
    # far from the wall the creeping-flow bracket tends to 1 (0.9996): Schiller–Naumann
    assert cd_translating_near_wall(100.0, 1e6) == pytest.approx(cd_schiller_naumann(100.0), rel=1e-3)
    # the two branches of Takemura's C_L0 meet at L* = 10 (with the exponent 4.58)
    lo = (9.0 / 8.0 + 5.78e-6 * 10.0**4.58) * math.exp(-0.292 * 10.0)
    assert lo == pytest.approx(8.94 * 10.0**-2.09, rel=0.01)
    # near contact the lift tends to C_Lw(Re) (the composite's design)
    assert cl_translating_near_wall(20.0, 1e-9) == pytest.approx(0.313 + 0.812 * math.exp(-0.125 * 20.0**0.77), rel=1e-6)
    # the wall raises the drag and pushes the sphere away from it, more so the closer it is
    for re in (20.0, 100.0):
        cds = [cd_translating_near_wall(re, d) for d in (0.25, 0.5, 1.0)]
        cls = [cl_translating_near_wall(re, d) for d in (0.25, 0.5, 1.0)]
        assert cds[0] > cds[1] > cds[2] and cls[0] > cls[1] > cls[2] > 0.0


# --------------------------------------------------------------------------- running the examples
def _tool(name: str) -> str:
    """The package's console script ``name`` of the running interpreter's
    environment (the venv), else from PATH."""
    exe = Path(sys.executable).parent / name
    if exe.exists():
        return str(exe)
    found = shutil.which(name)
    if not found:
        pytest.fail(f"command {name!r} not found beside {sys.executable} or on PATH; install the package (make test)")
    return found


def _run(args: list[str], timeout: float) -> subprocess.CompletedProcess:
    return subprocess.run(args, capture_output=True, text=True, timeout=timeout, env={**os.environ, "PYTHONUNBUFFERED": "1"})


def test_example_configs_plan_the_gaps():
    """``caseprep plan`` accepts the three configs and gives each case a clearance equal to its ride height (the gap
    convention above) and the blockage of the 12.5 D × 25 D section (no solver needed)."""
    caseprep = _tool("caseprep")
    expected = {"sweep_re100": [25, 50, 100, 200, 400, 25], "sweep_re20": [25, 50, 100, 400], "stationary_re100": [25]}
    for name in CONFIGS:
        cfg = EXAMPLE / f"{name}.toml"
        r = _run([caseprep, "plan", str(cfg)], timeout=120)  # exit 2 on any config or geometry problem
        assert r.returncode == 0, r.stdout + r.stderr
        lines = r.stdout.splitlines()
        head = lines[1].split()
        rows = [dict(zip(head, ln.split())) for ln in lines[3:] if ln.startswith("sphere-")]
        assert [float(row["rh_front_mm"]) for row in rows] == expected[name]
        for row in rows:
            assert float(row["clearance_mm"]) == pytest.approx(float(row["rh_front_mm"]), abs=1e-6)
            # frontal area of the faceted sphere (0.0078141 m², 0.5 % below πD²/4) over the 1.25 m × 2.5 m inlet
            # (target blockage 0.27 %, section rounded up to whole 0.05 m background cells; one cell less per
            # side at the finer mesh level: 0.255 %)
            assert float(row["blockage_pct"]) == pytest.approx(100 * 0.0078141 / (1.25 * 2.5), abs=0.01)


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    """Write and run the three example configs through the CLIs; return
    {config: [row per case]} with row = dict(delta, level, re, cd, cl, cs,
    verdict, end_reason, cells)."""
    out = tmp_path_factory.mktemp("sphere_ground")
    caseprep, postproc = _tool("caseprep"), _tool("postproc")
    for name in CONFIGS:
        r = _run([caseprep, "write", str(EXAMPLE / f"{name}.toml"), "-o", str(out / name)], timeout=300)
        assert r.returncode == 0, r.stdout + r.stderr
    # Two sweeps at a time, each one case at a time on one rank: one case per core of a 2-core machine. The
    # Re = 100 sweep (6 cases, about half of the CPU time) runs beside the Re = 20 sweep and then the twin.
    from concurrent.futures import ThreadPoolExecutor

    def run(name: str) -> subprocess.CompletedProcess:
        return _run([caseprep, "run", str(out / name), "-j", "1", "--ranks", "1", "-q"], timeout=10800)

    with ThreadPoolExecutor(max_workers=2) as pool:
        done = dict(zip(CONFIGS, pool.map(run, CONFIGS)))
    for name, r in done.items():
        assert r.returncode == 0, f"{name}: caseprep run exit {r.returncode}\n{r.stdout[-4000:]}\n{r.stderr[-2000:]}"
    table: dict[str, list[dict]] = {}
    for name in CONFIGS:
        manifest = json.loads((out / name / "manifest.json").read_text())
        rows = []
        for rec in manifest["cases"]:
            case = out / name / rec["folder"]
            r = _run([postproc, "forces", str(case), "--json"], timeout=300)
            assert r.returncode == 0, r.stdout + r.stderr
            rep = json.loads(r.stdout)
            run = json.loads((case / "underfloor-run.json").read_text())
            ref = rec["reference"]
            p = rec["params"]
            assert p["ride_height_front"] == pytest.approx(p["ride_height_rear"])
            c = rep["coefficients"]
            rows.append(dict(delta=round(p["ride_height_front"] / D, 6), level=p["mesh_level"],
                             re=ref["speed"] * ref["length"] / ref["nu"], cd=c["drag"], cl=c["lift"], cs=c["side"],
                             clearance=rec["min_clearance"], ground=rec["ground"], verdict=rep["convergence"]["verdict"],
                             end_reason=run.get("end_reason"), cells=run.get("cells"), flags=run.get("flags", [])))
        table[name] = rows
    return table


def _row(results, name: str, delta: float, level: int = 0) -> dict:
    (row,) = [r for r in results[name] if abs(r["delta"] - delta) < 1e-9 and r["level"] == level]
    return row


MOVING = [("sweep_re100", d) for d in (0.25, 0.5, 1.0, 2.0, 4.0)] + [("sweep_re20", d) for d in (0.25, 0.5, 1.0, 4.0)]
SMALLEST = 0.25
FAR = 4.0


@pytest.mark.solver
@pytest.mark.slow
def test_cases_ran_and_converged(results):
    for name, rows in results.items():
        for r in rows:
            # the solver's residual targets (p 1e-4, U 1e-5) were met: steady laminar flow at Re ≤ 100
            assert r["end_reason"] == "converged", (name, r)
            assert not r["flags"], (name, r)
            # the gap convention: the ride height at the sphere's lowest point is its clearance
            assert r["clearance"] == pytest.approx(r["delta"] * D, rel=1e-6)
    assert {round(r["re"], 6) for r in results["sweep_re100"]} == {100.0}
    assert {round(r["re"], 6) for r in results["sweep_re20"]} == {20.0}
    assert {r["ground"] for r in results["stationary_re100"]} == {"stationary"}
    # the flow is symmetric about the vertical centre plane: no side force (mesh and solver noise only)
    for name, d in MOVING:
        r = _row(results, name, d)
        assert abs(r["cs"]) < 1e-3 * r["cd"], r


def cd_standard(re: float) -> float:
    """Standard drag curve of a sphere in unbounded flow (dimensionless):
    Clift, R., Grace, J. R. & Weber, M. E. (1978), Bubbles, Drops, and
    Particles, Academic Press, table 5.2, through the reference library
    ``fluids`` (``fluids.drag.drag_sphere(Re, Method="Clift")``): 2.735 at
    Re = 20, 1.087 at Re = 100."""
    from fluids.drag import drag_sphere

    return float(drag_sphere(re, Method="Clift"))


def cd_reference(re: float, delta: float) -> float:
    """The wall correlation with its unbounded limit moved onto the standard
    drag curve: C_D,Zeng(Re, δ) · C_D,std(Re) / C_D,SN(Re) (dimensionless).

    Why: :func:`cd_translating_near_wall` tends to Schiller–Naumann far from
    the wall by construction, and Schiller–Naumann lies 4.6 % below the
    standard curve at Re = 20 (0.4 % above it at Re = 100) — a known error of
    the reference's free-stream part, not of the wall effect. Keeping the
    correlation's wall factor C_D,Zeng/C_D,SN and putting it on the standard
    curve compares the wall effect itself. The raw correlation is reported
    beside it in the README."""
    return cd_translating_near_wall(re, delta) * cd_standard(re) / cd_schiller_naumann(re)


# Drag tolerance: 6 % = 5 % for the correlation's own fit error (the paper's stated scatter of its fit was not
# accessible to us: common practice, no source) + 1 % for ours, measured: one mesh level
# finer (every length / √2) moves C_D by 0.3 % at the smallest gap; the domain at 0.27 % blockage against 0.93 % moves
# it by 0.2 % (δ = 0.25) to 0.8 % (δ = 4, Re = 20); the faceted sphere's frontal area is 0.5 % below πD²/4.
CD_TOL = 0.06
# Lift tolerance: 20 % or 0.01, whichever is larger. 20 %: lift is a small difference of the pressure over the
# lower and upper halves; on our meshes it moved by 12 % when the upper half of the sphere went from D/16 to D/32
# cells and by 1.3 % for one level finer after that; the correlation is a composite fit and one of its exponents is
# from memory (see cl_translating_near_wall). 0.01: at the far gaps the predicted lift is 0.001-0.004, below what the
# steady runs pin down (the monitor's lift still drifts by ~0.5 % of its value when the residual targets stop the
# run, and the slip top 7.5 D away adds its own image effect of the same order).
CL_TOL_REL, CL_TOL_ABS = 0.20, 0.01


@pytest.mark.solver
@pytest.mark.slow
@pytest.mark.parametrize("name,delta", MOVING, ids=[f"{n}-gap{d:g}D" for n, d in MOVING])
def test_drag_against_wall_correlation(results, name, delta):
    r = _row(results, name, delta)
    re = r["re"]
    ref = cd_reference(re, delta)
    # Zeng, Najjar, Balachandar & Fischer 2009, Phys. Fluids 21, 033302 (drag of a sphere translating parallel to a
    # wall, see cd_translating_near_wall; free-stream part on Clift, Grace & Weber 1978, see cd_reference)
    assert r["cd"] == pytest.approx(ref, rel=CD_TOL), (r, ref, cd_translating_near_wall(re, delta))


@pytest.mark.solver
@pytest.mark.slow
@pytest.mark.parametrize("name,delta", MOVING, ids=[f"{n}-gap{d:g}D" for n, d in MOVING])
def test_lift_against_wall_correlation(results, name, delta):
    r = _row(results, name, delta)
    ref = cl_translating_near_wall(r["re"], delta)
    # Zeng et al. 2009, Phys. Fluids 21, 033302, with Takemura 2004, Phys. Fluids 16, 204 (see
    # cl_translating_near_wall): the sphere is pushed away from the ground, the more the closer it is
    assert abs(r["cl"] - ref) <= max(CL_TOL_REL * abs(ref), CL_TOL_ABS), (r, ref)


@pytest.mark.solver
@pytest.mark.slow
@pytest.mark.parametrize("name", ["sweep_re100", "sweep_re20"])
def test_wall_effect_grows_as_the_gap_closes(results, name):
    # the ordering, free of any tolerance: drag and lift rise monotonically as the gap closes (both correlations,
    # and the physics of a wall in the inner region of the sphere's disturbance)
    rows = sorted((r for r in results[name] if r["level"] == 0), key=lambda r: r["delta"])
    cds = [r["cd"] for r in rows]
    cls = [r["cl"] for r in rows if r["delta"] <= 1.0]
    assert all(a > b for a, b in zip(cds[:3], cds[1:4])), cds
    assert all(a > b for a, b in zip(cls, cls[1:])) and cls[-1] > 0.0, cls


@pytest.mark.solver
@pytest.mark.slow
@pytest.mark.parametrize("name", ["sweep_re100", "sweep_re20"])
def test_far_gap_drag_against_standard_curve(results, name):
    r = _row(results, name, FAR)
    re = r["re"]
    # At δ = 4 (centre 4.5 D above the ground, L U/ν = 90 at Re = 20, 450 at Re = 100: far outside the viscous
    # region of the sphere's disturbance, where a wall acts) the drag is that of unbounded flow to about 1 %.
    # Clift, Grace & Weber 1978 standard curve (fluids.drag_sphere "Clift"); 2 % = our 1 % (see CD_TOL) + 1 % for
    # the wall's remaining effect.
    assert r["cd"] == pytest.approx(cd_standard(re), rel=0.02), r
    # Schiller & Naumann 1933, C_D = 24/Re (1 + 0.15 Re^0.687), as in test_validation.py; its own departure from
    # the standard curve (4.6 % at Re = 20, 0.4 % at Re = 100) is added to the 2 %.
    sn = cd_schiller_naumann(re)
    assert r["cd"] == pytest.approx(sn, rel=abs(sn - cd_standard(re)) / cd_standard(re) + 0.02), r
    # and the lift has (nearly) vanished: Zeng et al. 2009 give 0.0006 (Re = 100) and 0.004 (Re = 20)
    assert abs(r["cl"]) < 0.01, r


@pytest.mark.solver
@pytest.mark.slow
def test_mesh_refinement_at_the_smallest_gap(results):
    coarse = _row(results, "sweep_re100", SMALLEST, level=0)
    fine = _row(results, "sweep_re100", SMALLEST, level=1)
    assert fine["cells"] > 2.0 * coarse["cells"]  # every length / √2: about 2.8 × the cells
    # one level finer changes C_D by less than 1 % and C_L by less than 5 % (measured 0.3 % and 1.3 %) ...
    assert fine["cd"] == pytest.approx(coarse["cd"], rel=0.01), (coarse, fine)
    assert fine["cl"] == pytest.approx(coarse["cl"], rel=0.05), (coarse, fine)
    # ... far less than the distance to the correlation (measured −3.3 % drag, −8 % lift), which therefore is not a
    # resolution artefact of our mesh: it stays when the mesh is refined and when the pair is extrapolated to zero
    # cell size (Richardson, second-order scheme, refinement ratio √2: f∞ = f₁ + (f₁ − f₀)/(√2² − 1); Richardson
    # 1911, as in Roache 1998, Verification and Validation in Computational Science and Engineering, from memory).
    ref_cd = cd_reference(100.0, SMALLEST)
    ref_cl = cl_translating_near_wall(100.0, SMALLEST)
    for key, ref in (("cd", ref_cd), ("cl", ref_cl)):
        e0 = coarse[key] / ref - 1.0
        e1 = fine[key] / ref - 1.0
        ext = fine[key] + (fine[key] - coarse[key]) / (2.0 - 1.0)
        assert abs(e1 - e0) < 0.25 * abs(e0), (key, e0, e1)
        assert abs(ext / ref - 1.0) <= (CD_TOL if key == "cd" else CL_TOL_REL), (key, ext, ref)


@pytest.mark.solver
@pytest.mark.slow
def test_stationary_ground_twin(results):
    moving = _row(results, "sweep_re100", SMALLEST)
    (still,) = results["stationary_re100"]
    assert still["delta"] == SMALLEST and still["ground"] == "stationary" and moving["ground"] == "moving"
    # Over a ground at rest the uniform inflow grows a boundary layer from the inlet, 0.55 m ahead of the sphere's
    # centre: Blasius thickness δ99 ≈ 5 x/√Re_x = 5 × 0.55 m/√550 ≈ 0.12 m (Blasius 1908; Schlichting,
    # Boundary-Layer Theory), about the height of the sphere's top (0.125 m). The sphere sits in slowed, sheared air:
    # less drag on the free-stream q (measured −11 %) ...
    assert still["cd"] < 0.95 * moving["cd"], (still, moving)
    # ... and a much larger lift away from the ground (measured 2.7 ×): a sphere held in a wall-bounded shear flow is
    # lifted away from the wall (the shear case of Zeng et al. 2009, Phys. Fluids 21, 033302; at low Re Leighton &
    # Acrivos 1985, J. Appl. Math. Phys. (ZAMP) 36, 174 — both from memory for the sign only). The factor 2 is our
    # measurement with margin, not a published value.
    assert still["cl"] > 2.0 * moving["cl"] > 0.0, (still, moving)
    # The moving-ground references are missed by more than their tolerances — the lift by several times: a
    # stationary ground in place of a moving one is not a small error for a body in ground effect, and these
    # checks catch it.
    assert abs(still["cd"] / cd_reference(100.0, SMALLEST) - 1.0) > CD_TOL, still
    ref_cl = cl_translating_near_wall(100.0, SMALLEST)
    assert abs(still["cl"] - ref_cl) > 3.0 * max(CL_TOL_REL * ref_cl, CL_TOL_ABS), still
