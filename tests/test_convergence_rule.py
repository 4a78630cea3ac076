"""The convergence rule for runs that used their whole iteration budget
(caseprep.contract.convergence: judge_convergence, judge_case_monitor;
the runner's summarize_logs): residuals low, or the force monitor settled
in coefficient counts and residuals fallen by orders of magnitude; a
drifting monitor is never converged. One monitor gets one verdict from the
runner, ``postproc forces``, ``postproc sweep`` and the report.

Synthetic histories are our own invented numbers; the real-run checks use
a trimmed log (iteration, residual, continuity and timing lines only) and
the force monitor of one real 150-iteration smoke run of the demo's flat
floor at 20 mm ride height (tests/data/smoke_run, written by the solver). The thresholds are the runner's
documented defaults (common practice, no source)."""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from caseprep.run import runner
from caseprep.contract import convergence as cv
from caseprep.contract.frames import Placement
from caseprep.contract.manifest import Reference
from caseprep.contract.monitor import FORCES_NAME
from tiny_case import write_manifest_only

REAL = Path(__file__).parent / "data" / "smoke_run"


def _hist(start: float, final: float, n: int = 100) -> tuple[float, ...]:
    """A residual history falling geometrically from ``start`` to ``final``."""
    return tuple(float(v) for v in np.geomspace(start, final, n))


def _summary(verdict: str, drift: float = 0.001, std: float = 0.0005) -> dict:
    """A monitor verdict in the form judge_case_monitor gives (one coefficient, C_L)."""
    return {"window": 30, "verdict": verdict, "series": {"cl": {"name": "cl", "n": 30, "mean": -1.2, "std": std,
                                                                 "drift": drift, "r2": 0.1, "tolerance": 0.005,
                                                                 "verdict": verdict}},
            "means": {"cl": -1.2}, "stds": {"cl": std}}


SETTLED = _summary("converged")


def test_low_residuals_converge_without_monitor():
    res = {"Ux": _hist(1.0, 2e-4), "p": _hist(1.0, 5e-4)}
    ok, why, drop = cv.judge_convergence(res, {"Ux": 2e-4, "p": 5e-4}, None)
    assert ok and "≤ 0.001" in why
    assert drop == pytest.approx(math.log10(1.0 / 5e-4))  # smallest drop: p


def test_plateau_residual_with_settled_forces_converges():
    # Uy of a symmetric body stuck at 1.6e-3 after falling 2.8 orders, loads settled: converged.
    res = {"Ux": _hist(1.0, 3e-4), "Uy": _hist(1.0, 1.6e-3), "p": _hist(1.0, 5e-4)}
    fin = {k: v[-1] for k, v in res.items()}
    ok, why, drop = cv.judge_convergence(res, fin, SETTLED)
    assert ok and "settled" in why and "Uy" in why
    assert drop == pytest.approx(math.log10(1 / 1.6e-3), rel=1e-9)


@pytest.mark.parametrize("settling, res, text", [
    (None, {"Uy": _hist(1.0, 1.6e-3)}, "no force monitor"),
    (_summary("oscillating", 0.004, 0.03), {"Uy": _hist(1.0, 1.6e-3)}, "oscillating"),
    (SETTLED, {"p": _hist(1.0, 2e-2)}, "above 0.01"),                 # residual above the ceiling
    (SETTLED, {"p": _hist(0.1, 5e-3)}, "fell less than 2 orders"),    # only 1.3 orders of drop
    (SETTLED, {"p": (1.0, 0.1, math.inf)}, "above 0.01"),            # non-finite final residual
])
def test_not_converged_cases(settling, res, text):
    fin = {k: v[-1] for k, v in res.items()}
    ok, why, _ = cv.judge_convergence(res, fin, settling)
    assert not ok and text in why


def test_drifting_loads_are_not_converged_even_with_low_residuals():
    drifting = _summary("diverging", 0.05, 0.01)
    res = {"p": _hist(1.0, 1e-4)}
    ok, why, _ = cv.judge_convergence(res, {"p": 1e-4}, drifting)
    assert not ok and "drifting" in why and "cl drift +0.05" in why


def test_residual_drop_uses_the_largest_early_value():
    seq = (0.5, 1.0, 0.8, 0.2, 0.1) + _hist(0.1, 1e-3, 20)
    d = cv.residual_drop({"k": seq, "none": (math.nan, math.nan), "zero": (1.0, 0.0)})
    assert d["k"] == pytest.approx(3.0)  # log10(1.0 / 1e-3)
    assert math.isnan(d["none"]) and d["zero"] == math.inf


def test_judge_does_not_modify_its_inputs():
    res = {"Uy": _hist(1.0, 1.6e-3)}
    fin = {"Uy": 1.6e-3}
    settled = dict(SETTLED)
    before = (dict(res), dict(fin), dict(settled))
    cv.judge_convergence(res, fin, settled)
    assert (res, fin, settled) == before


def _write_monitor(case: Path, fx: np.ndarray, fy: np.ndarray, fz: np.ndarray) -> None:
    d = case / "postProcessing" / FORCES_NAME / "0"
    d.mkdir(parents=True)
    lines = ["# Force", "# CofR : (0 0 0)", "#", "# Time (total_x total_y total_z) (pressure_x pressure_y pressure_z) "
             "(viscous_x viscous_y viscous_z)"]
    for i, (x, y, z) in enumerate(zip(fx, fy, fz), 1):
        lines.append(f"{i} ({x:.10e} {y:.10e} {z:.10e}) ({x:.10e} {y:.10e} {z:.10e}) (0 0 0)")
    (d / "force.dat").write_text("\n".join(lines) + "\n")


#: Reference values of the synthetic monitors below (invented): q·A = ½·1.2·40²·0.03 = 28.8 N.
SYNTH_REF = Reference(area=0.03, length=0.7, wheelbase=0.7, front_axle=(0.22, 0.0, 0.05), rear_axle=(0.92, 0.0, 0.05),
                      moment_point=(0.0, 0.0, 0.0), rho=1.2, nu=1.5e-5, speed=40.0)
QA = 0.5 * 1.2 * 40.0**2 * 0.03


def test_case_monitor_window_and_verdicts(tmp_path):
    n = 100
    it = np.arange(1, n + 1, dtype=float)
    settle = 30.0 - 10.0 * np.exp(-it / 8.0)      # start-up transient, settled long before the last 30 %
    side = 0.02 * np.sin(it)                       # symmetric body: side force wanders around 0 by 0.02 N
    write_manifest_only(tmp_path / "a", ["c"], SYNTH_REF)
    a = tmp_path / "a" / "cases" / "c"
    _write_monitor(a, settle, side, -settle)
    s = cv.judge_case_monitor(a)
    assert s["window"] == 30 and s["verdict"] == "converged"  # 30 % of 100 iterations
    # a side force about zero is judged in counts (0.02 N / 28.8 N = 0.0007 < 0.002), not against its ~0 mean
    assert s["series"]["cs"]["std"] == pytest.approx(0.02 / np.sqrt(2) / QA, rel=0.1)
    assert s["means"]["cd"] == pytest.approx(30.0 / QA, rel=1e-4)  # the transient left: 10·e^(-71/8) N ≈ 1e-5

    write_manifest_only(tmp_path / "b", ["c"], SYNTH_REF)
    b = tmp_path / "b" / "cases" / "c"
    _write_monitor(b, settle, side, -(30.0 + 0.05 * it))  # lift still growing 1.5 N (0.05 counts) per window
    assert cv.judge_case_monitor(b)["verdict"] == "diverging"
    # nothing to judge by: no monitor, or a case outside any sweep (no reference values)
    assert cv.judge_case_monitor(tmp_path / "nothing") is None
    loose = tmp_path / "loose"
    _write_monitor(loose, settle, side, -settle)
    assert cv.judge_case_monitor(loose) is None
    # the runner hands over the case's manifest record (no lookup of the manifest per case): same verdict
    from caseprep.contract.manifest import read_manifest

    rec = read_manifest(tmp_path / "a").cases[0]
    assert cv.judge_case_monitor(loose, record=rec) == s


#: The demo smoke case the trimmed run comes from (flat floor, 20 mm, pitch −0.6°): its manifest's
#: reference values, placement and relative wind (as `caseprep write --fidelity smoke` wrote them).
SMOKE_REF = Reference(area=0.12472208374573993, length=0.7, wheelbase=0.7, front_axle=(0.22, 0.0, 0.05),
                      rear_axle=(0.92, 0.0, 0.05), moment_point=(0.57, 0.0, 0.0), rho=1.2041062774092224,
                      nu=1.5060181282756716e-05, speed=40.0, cog=(0.54, 0.0, 0.06))
SMOKE_FRAMES = {"rotation_body_to_ground": [[0.9999451693655121, 0.0, -0.010471784116245586], [0.0, 1.0, 0.0],
                                            [0.010471784116245586, 0.0, 0.9999451693655121]],
                "translation_body_to_ground": [-0.1499917754048268, 0.0, 0.018429232382563162],
                "pitch_deg": -0.5999999999999881, "yaw_deg": 0.0, "yaw_mode": "crosswind"}
SMOKE_WIND = (0.9999451693655121, 0.0, -0.010471784116245586)


def _real_case(tmp_path: Path, iterations: int | None) -> Path:
    """The real smoke run in a sweep of one case, optionally cut after
    ``iterations`` (as if the budget had been smaller)."""
    root = tmp_path / f"sweep{iterations}"
    write_manifest_only(root, ["c"], SMOKE_REF, Placement.from_dict(SMOKE_FRAMES), SMOKE_WIND)
    case = root / "cases" / "c"
    (case / "logs").mkdir(parents=True)
    mon = case / "postProcessing" / FORCES_NAME / "0"
    mon.mkdir(parents=True)
    log = (REAL / "simpleFoam.log").read_text()
    dat = (REAL / "force.dat").read_text()
    if iterations is not None:
        cut = log.index(f"\nTime = {iterations + 1}\n")
        log = log[:cut] + "\nEnd\n"
        dat = "\n".join(l for l in dat.splitlines() if l.startswith("#") or int(l.split()[0]) <= iterations) + "\n"
    (case / "logs" / "simpleFoam.log").write_text(log)
    (mon / "force.dat").write_text(dat)
    return case


def test_real_smoke_run_converged_and_cut_short_flagged(tmp_path):
    full = runner.summarize_logs(_real_case(tmp_path, None), ["solve"])
    assert full["end_reason"] == "end-time"
    assert "not-converged" not in full["flags"], full["convergence"]
    assert full["force_settling"]["verdict"] == "converged"
    # The same run stopped earlier (as with a smaller budget) is flagged while its loads still move:
    # after 30 iterations residuals are also high (p 5.7e-3), after 80 they are low (≤ 1.2e-3) but
    # C_L still drifts by 0.0076 across the window (tolerance 0.005), which alone makes it not converged.
    for n in (30, 80):
        early = runner.summarize_logs(_real_case(tmp_path, n), ["solve"])
        assert early["iterations"] == n and early["flags"] == ("not-converged",), early["convergence"]
        assert early["force_settling"]["verdict"] == "diverging" and "drifting" in early["convergence"]
        assert "cl drift" in early["convergence"]
    # After 120 iterations it has settled.
    assert runner.summarize_logs(_real_case(tmp_path, 120), ["solve"])["flags"] == ()


def _monitor_case(root: Path, fx: np.ndarray, fy: np.ndarray, fz: np.ndarray) -> Path:
    """A written and 'run' sweep of one case with the given force monitor (N,
    one sample per iteration) and residuals that fell 2.7 orders to 2e-3
    (above 1e-3, so the monitor decides): our own invented numbers."""
    import json

    from _surfaces import icosphere
    from _vtkfiles import polydata, write_solver_like_export
    from caseprep.contract.records import RECORD_NAME, CaseRunRecord, StageRun

    write_manifest_only(root, ["c1"], SYNTH_REF)
    case = root / "cases" / "c1"
    n = len(fx)
    _write_monitor(case, fx, fy, fz)
    res = np.geomspace(1.0, 2e-3, n)
    log = "".join(f"Time = {i}\n\nsmoothSolver:  Solving for Ux, Initial residual = {r:.6g}, Final residual = 1e-05, "
                  f"No Iterations 2\nGAMG:  Solving for p, Initial residual = {r:.6g}, Final residual = 1e-05, "
                  f"No Iterations 3\n" for i, r in zip(range(1, n + 1), res)) + "\nEnd\n"
    (case / "logs").mkdir()
    (case / "logs" / "simpleFoam.log").write_text(log)
    for stage in ("mesh", "solve", "export"):
        (case / "logs" / f"{stage}.done").write_text("")
    X, F = icosphere(0.05, 2, (0.4, 0.0, 0.1))
    write_solver_like_export(case, {"body": polydata(X, F[:, ::-1], {"p": np.zeros(len(F)),
                                                                     "wallShearStress": np.zeros((len(F), 3))})},
                             time=n, name="c1")
    info = runner.summarize_logs(case, ["solve"])
    rec = CaseRunRecord(case_id="c1", folder="cases/c1", status="ok",
                        stages=tuple(StageRun(s, "ok", 1.0, 0) for s in ("mesh", "solve", "export")), **info)
    (case / RECORD_NAME).write_text(json.dumps(rec.to_dict()))
    return case


N_IT = 200
IT = np.arange(1, N_IT + 1, dtype=float)
RESULTANT = 128.0


def _side_wanders():
    """Settled except for the side force: 5 N of a 128 N resultant, wandering ±3 % of itself
    (±0.15 N = ±0.0052 in counts on q·A = 28.8 N, std 0.0037 > 0.002)."""
    fy = 5.0 + 0.15 * np.sin(IT / 3.0)
    fx = np.full(N_IT, 120.0)
    return fx, fy, -np.sqrt(RESULTANT**2 - 120.0**2 - 5.0**2) * np.ones(N_IT)


def _drag_drifts():
    """The drag grows steadily by 0.9 N over the settling window (0.031 in counts > 0.002) while the
    lift shrinks so that the resultant stays exactly 128 N: judged against the resultant, the drag's
    drift is 0.7 %, inside a 1 %-of-the-load tolerance."""
    fx = 120.0 + 0.9 * (IT - IT[-60]) / 59.0
    fy = np.full(N_IT, 5.0)
    return fx, fy, -np.sqrt(RESULTANT**2 - fx**2 - fy**2)


@pytest.mark.parametrize("monitor, verdict, flags", [
    (_side_wanders, "oscillating", ("not-converged",)),
    (_drag_drifts, "diverging", ("not-converged", "forces-drifting")),
])
def test_one_verdict_from_runner_forces_sweep_and_report(tmp_path, monitor, verdict, flags):
    import json

    from click.testing import CliRunner

    from postproc.cli import main as postproc_main
    from postproc.pipelines.sweep import SweepOptions, postprocess_sweep

    fx, fy, fz = monitor()
    assert np.allclose(np.sqrt(fx**2 + fy**2 + fz**2), RESULTANT, rtol=1e-4)  # the side force moves it by ≤ 0.006 N
    case = _monitor_case(tmp_path / "sw", fx, fy, fz)
    # the runner (its record, as `caseprep run` writes it)
    rec = json.loads((case / "underfloor-run.json").read_text())
    assert rec["force_settling"]["verdict"] == verdict and rec["flags"] == ["not-converged"], rec["convergence"]
    # postproc forces on the case folder
    r = CliRunner().invoke(postproc_main, ["forces", str(case), "--json"])
    assert r.exit_code == 0, r.output
    assert json.loads(r.output)["convergence"]["verdict"] == verdict
    # postproc sweep: the row's verdict and flags, and the force history the report draws
    r = CliRunner().invoke(postproc_main, ["sweep", str(tmp_path / "sw"), "-q"])
    assert r.exit_code == 0, r.output
    (row,) = json.loads((tmp_path / "sw" / "results.json").read_text())["cases"]
    assert row["convergence"] == verdict and tuple(sorted(row["flags"].split())) == tuple(sorted(flags))
    an = postprocess_sweep(tmp_path / "sw", SweepOptions(out_dir=tmp_path / "tables"))   # what the report renders
    (hist,) = an.report_data.histories
    assert hist.verdict == verdict
    if monitor is _side_wanders:
        # reported: the window mean with its spread (std of a sine: amplitude/√2)
        assert row["u_cs"] == pytest.approx(0.15 / np.sqrt(2) / QA, rel=0.05)
        assert row["cs"] == pytest.approx(5.0 / QA, rel=0.01)
