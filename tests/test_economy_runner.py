"""The run economy in the runner, with stand-in run.sh scripts (no solver):
mesh sharing (links, owner first, fall-back when the owner failed or has no
mesh), the run plan's order and its dependencies under ``-j N``. The real
solver's side (a shared mesh solves, a warm start converges sooner) is in
tests/test_economy_solver.py."""
from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest

from caseprep.contract.manifest import read_manifest
from caseprep.run import runner
from caseprep.run.economy import plan_run

sys.path.insert(0, str(Path(__file__).parent))
from test_runner import FIX  # noqa: E402
from tiny_case import write_manifest_only  # noqa: E402

SCRIPT = r"""#!/bin/bash
# stand-in following the case folder contract; the mesh stage makes a fake polyMesh
set -u
cd "$(dirname "$0")" || exit 1
FIX="{fix}"
mkdir -p logs
[ $# -eq 0 ] && set -- mesh solve export
for s in "$@"; do
  echo "$s $(date +%s.%N)" >> logs/calls.txt
  case "$s" in
    mesh)
      rm -f logs/mesh.done; rm -rf constant/polyMesh
      sleep {sleep}
      {mesh_fail}
      mkdir -p constant/polyMesh system
      echo "faces of $(basename "$PWD")" > constant/polyMesh/faces
      echo "points" > constant/polyMesh/points
      echo "meshNumerics" > system/meshNumerics
      cp "$FIX/blockMesh.log" logs/blockMesh.log
      cp "$FIX/snappyHexMesh_layers.log" logs/snappyHexMesh.log
      cp "$FIX/checkMesh_ok.log" logs/checkMesh.log
      touch logs/mesh.done ;;
    solve)
      rm -f logs/solve.done
      [ -f constant/polyMesh/faces ] || exit 4
      sleep {sleep}
      cp "$FIX/{solver}" logs/simpleFoam.log
      mkdir -p 5 && printf '{u5}' > 5/U && printf '{p5}' > 5/p
      echo "end $(date +%s.%N)" >> logs/calls.txt
      touch logs/solve.done ;;
    export)
      cp "$FIX/foamToVTK.log" logs/foamToVTK.log
      touch logs/export.done ;;
  esac
done
"""


HEADER = "FoamFile\n{{\n    version 2.0;\n    format ascii;\n    class {cls};\n    object {name};\n}}\n"
UNIFORM = HEADER + ("dimensions [0 1 -1 0 0 0 0];\n\ninternalField   uniform {value};\n\nboundaryField\n{{\n"
                    "    inlet\n    {{\n        type fixedValue;\n        value uniform {value};\n    }}\n}}\n")
#: the stand-in's "solution": three cells
SOLVED_U = [(10.0, 0.0, 1.0), (20.0, 0.5, 0.0), (30.0, 0.0, -1.0)]
SOLVED_P = [-100.0, 0.0, 50.0]


def _list_file(cls: str, name: str, kind: str, values) -> str:
    body = "\n".join(f"({a} {b} {c})" if kind == "vector" else f"{a}" for a, b, c in
                     (v if isinstance(v, tuple) else (v, 0, 0) for v in values))
    return (HEADER.format(cls=cls, name=name).replace("{{", "{").replace("}}", "}")
            + f"internalField   nonuniform List<{kind}>\n{len(values)}\n(\n{body}\n)\n;\n\nboundaryField\n{{\n}}\n")


def stand_in(root: Path, cid: str, sleep: float = 0.2, mesh_fail: bool = False,
             solver: str = "simpleFoam_converged.log") -> None:
    case = root / "cases" / cid
    p = case / "run.sh"
    u5 = _list_file("volVectorField", "U", "vector", SOLVED_U).replace("%", "%%")
    p5 = _list_file("volScalarField", "p", "scalar", SOLVED_P).replace("%", "%%")
    p.write_text(SCRIPT.format(fix=FIX, sleep=sleep, mesh_fail="exit 1" if mesh_fail else "", solver=solver,
                               u5=u5.replace("\n", "\\n"), p5=p5.replace("\n", "\\n")))
    p.chmod(0o755)
    (case / "0").mkdir(exist_ok=True)
    (case / "0" / "U").write_text(UNIFORM.format(cls="volVectorField", name="U", value="(40 0 0)"))
    (case / "0" / "p").write_text(UNIFORM.format(cls="volScalarField", name="p", value="0"))


def economy_sweep(root: Path, points: dict[str, tuple[float, float, str | None]], warm: str = "off",
                  variant: dict[str, str] | None = None, sleep: float = 0.2) -> Path:
    # reference speed = the point's speed (the warm start scales by their ratio)
    """A manifest of stand-in cases: id → (ride height m, speed m/s, mesh owner or None)."""
    write_manifest_only(root, list(points))
    m = json.loads((root / "manifest.json").read_text())
    for c in m["cases"]:
        h, v, owner = points[c["case_id"]]
        c["params"] = {"ride_height_front": h, "ride_height_rear": h + 0.02, "pitch_deg": 0.0, "yaw_deg": 0.0,
                       "speed": v, "mesh_level": 0}
        c["mesh_owner"] = owner or c["case_id"]
        c["mesh_key"] = f"sha256:{owner or c['case_id']}"
        c["warm_start"] = warm
        c["variant"] = (variant or {}).get(c["case_id"], "v")
        c["reference"]["speed"] = v
    (root / "manifest.json").write_text(json.dumps(m))
    for cid in points:
        stand_in(root, cid, sleep)
    return root


def calls(root: Path, cid: str) -> list[tuple[str, float]]:
    p = root / "cases" / cid / "logs" / "calls.txt"
    return [(a, float(b)) for a, b in (line.split() for line in p.read_text().splitlines())] if p.exists() else []


def test_a_speed_pair_meshes_once_and_the_second_case_links_the_mesh(tmp_path):
    # the sharer comes first in the manifest: the plan still runs the owner's mesh first
    root = economy_sweep(tmp_path / "s", {"b40": (0.02, 40.0, "a30"), "a30": (0.02, 30.0, None)})
    events = []
    recs = {r.case_id: r for r in runner.run_sweep(root, jobs=2, ranks=1, progress=events.append)}
    assert [c for c, _ in calls(root, "b40")] == ["solve", "end", "export"]  # no mesh stage of its own
    assert [c for c, _ in calls(root, "a30")][0] == "mesh"
    a, b = root / "cases" / "a30", root / "cases" / "b40"
    assert (b / "constant/polyMesh/faces").stat().st_ino == (a / "constant/polyMesh/faces").stat().st_ino
    assert (b / "constant/polyMesh/faces").read_text() == "faces of a30\n"
    assert (b / "system/meshNumerics").read_text() == "meshNumerics\n"
    assert "no meshing tool ran" in (b / "logs/meshShared.log").read_text()
    rb = recs["b40"]
    assert rb.status == "ok" and rb.mesh_source["owner"] == "a30" and rb.mesh_source["shared"] is True
    assert rb.mesh_source["how"] == "hard links" and rb.mesh_source["files"] == 2
    assert rb.cells == recs["a30"].cells == 1904  # the owner's mesh facts, from its copied logs
    assert recs["a30"].mesh_source is None
    # b started after a's mesh stage ended
    a_mesh_done = next(i for i, e in enumerate(events) if e.case_id == "a30" and e.event == "stage-done"
                       and e.stage == "mesh")
    b_start = next(i for i, e in enumerate(events) if e.case_id == "b40" and e.event == "case-start")
    assert b_start > a_mesh_done
    # the mesh stage of the sharer cost almost nothing
    assert rb.stage_run("mesh").wall_time < 0.5 * recs["a30"].stage_run("mesh").wall_time


def test_a_failed_owner_makes_the_sharer_mesh_itself(tmp_path):
    root = economy_sweep(tmp_path / "s", {"a30": (0.02, 30.0, None), "b40": (0.02, 40.0, "a30")})
    stand_in(root, "a30", mesh_fail=True)
    recs = {r.case_id: r for r in runner.run_sweep(root, jobs=2, ranks=1)}
    assert recs["a30"].status == "mesh-failed"
    rb = recs["b40"]
    assert rb.status == "ok" and [c for c, _ in calls(root, "b40")][0] == "mesh"
    assert rb.mesh_source["shared"] is False and "failed" in rb.mesh_source["why"]
    assert "meshed itself" in rb.mesh_source["why"]


def test_only_the_sharer_without_the_owners_mesh_meshes_itself(tmp_path):
    root = economy_sweep(tmp_path / "s", {"a30": (0.02, 30.0, None), "b40": (0.02, 40.0, "a30")})
    (rec,) = runner.run_sweep(root, only=["b40"], jobs=1, ranks=1)
    assert rec.status == "ok" and rec.mesh_source["shared"] is False
    assert "mesh stage is not done" in rec.mesh_source["why"]
    # once the owner has a mesh, a forced rerun of the sharer uses it
    runner.run_sweep(root, only=["a30"], jobs=1, ranks=1)
    (rec,) = runner.run_sweep(root, only=["b40"], jobs=1, ranks=1, force=True)
    assert rec.mesh_source["shared"] is True
    # a resumed run keeps the record of how the mesh was made
    (again,) = runner.run_sweep(root, only=["b40"], jobs=1, ranks=1)
    assert again.status == "skipped" and again.mesh_source["shared"] is True


def test_three_ride_heights_by_two_speeds_owner_first_under_two_jobs(tmp_path):
    pts = {}
    for h, tag in ((0.02, "h20"), (0.025, "h25"), (0.03, "h30")):
        pts[f"{tag}v30"] = (h, 30.0, None)
        pts[f"{tag}v40"] = (h, 40.0, f"{tag}v30")
    root = economy_sweep(tmp_path / "s", pts, sleep=0.3)
    recs = {r.case_id: r for r in runner.run_sweep(root, jobs=2, ranks=1)}
    assert all(r.status == "ok" for r in recs.values())
    for h in ("h20", "h25", "h30"):
        owner, sharer = calls(root, f"{h}v30"), calls(root, f"{h}v40")
        assert [c for c, _ in sharer][0] == "solve"
        mesh_end = owner[1][1]  # the owner's next call (solve) starts after its mesh ended
        assert sharer[0][1] >= mesh_end - 1e-3
        assert recs[f"{h}v40"].mesh_source["shared"] is True


@pytest.fixture
def grid(tmp_path):
    pts = {}
    for h, tag in ((0.02, "h20"), (0.025, "h25"), (0.03, "h30")):
        pts[f"{tag}v30"] = (h, 30.0, None)
        pts[f"{tag}v40"] = (h, 40.0, f"{tag}v30")
    return economy_sweep(tmp_path / "s", pts, warm="nearest")


@pytest.mark.parametrize("slots", [1, 2])
def test_the_plan_puts_every_source_and_owner_before_its_cases(grid, slots):
    m = read_manifest(grid)
    ids = [c.case_id for c in m.cases]
    plan = plan_run(m.cases, ids, slots=slots)
    assert sorted(plan.order) == sorted(ids)
    pos = {c: i for i, c in enumerate(plan.order)}
    for c, s in plan.source.items():
        assert pos[s] < pos[c]
    for c, o in plan.mesh_owner.items():
        assert pos[o] < pos[c]
    cold = [c for c in ids if c not in plan.source]
    assert len(cold) == slots  # the roots: the middle of the sweep, then the farthest case
    assert plan.order[0] == "h25v30"  # the medoid: middle ride height, first of its speeds in the manifest
    # the speed twin (shared mesh, distance 0.5 after similarity scaling) is the nearest source
    assert plan.source["h25v40"] == "h25v30" and plan.distance["h25v40"] == pytest.approx(0.5)
    # a ride-height step of half the span (front and rear both move): √(0.5² + 0.5²)
    assert plan.distance.get("h20v30", plan.distance.get("h30v30")) == pytest.approx(2 ** 0.5 / 2)


def test_no_source_across_variants_or_mesh_levels(tmp_path):
    root = economy_sweep(tmp_path / "s", {"a": (0.02, 30.0, None), "b": (0.021, 30.0, None)}, warm="nearest",
                         variant={"a": "flat", "b": "ramp"})
    m = read_manifest(root)
    plan = plan_run(m.cases, ["a", "b"])
    assert plan.source == {}


def _events_index(events, case, event, stage=None):
    return next(i for i, e in enumerate(events) if e.case_id == case and e.event == event
                and (stage is None or e.stage == stage))


def test_warm_starts_wait_for_their_sources_under_two_jobs(grid):
    events = []
    recs = {r.case_id: r for r in runner.run_sweep(grid, jobs=2, ranks=1, progress=events.append)}
    assert all(r.status == "ok" and not r.flags for r in recs.values())
    plan = plan_run(read_manifest(grid).cases, list(recs), slots=2)
    for case, src in plan.source.items():
        # never started before its source's solve stage ended
        assert _events_index(events, case, "case-start") > _events_index(events, src, "stage-done", "solve")
        init = recs[case].initial_field
        assert init["source"] == src and init["distance"] == pytest.approx(plan.distance[case])
        ratio = 40.0 / 30.0 if case.endswith("v40") and src.endswith("v30") else (
            30.0 / 40.0 if case.endswith("v30") and src.endswith("v40") else 1.0)
        assert init["speed_ratio"] == pytest.approx(ratio)
        shared = recs[case].mesh_source is not None and init["source"] == recs[case].mesh_source["owner"]
        if shared:  # the stand-in's three-cell solution copied
            assert init["kind"] == "copied"
        else:  # the solver's mapping utility cannot map a stand-in's fake mesh: a cold start, said so
            assert init["kind"] == "uniform" and "could not be made" in init["why"]
    roots = [c for c in recs if c not in plan.source]
    for r in roots:
        assert recs[r].initial_field["kind"] == "uniform" and "root of the run plan" in recs[r].initial_field["why"]


def test_a_copied_warm_start_scales_the_fields_by_the_speed_ratio(tmp_path):
    from caseprep.run import fields

    root = economy_sweep(tmp_path / "s", {"a30": (0.02, 30.0, None), "b40": (0.02, 40.0, "a30")}, warm="nearest")
    recs = {r.case_id: r for r in runner.run_sweep(root, jobs=1, ranks=1)}
    init = recs["b40"].initial_field
    assert init["kind"] == "copied" and init["source"] == "a30" and init["source_time"] == "5"
    b = root / "cases" / "b40"
    r = 40.0 / 30.0  # dynamic similarity: U ∝ V, p ∝ V² (module docstring of caseprep.run.fields)
    assert fields.read_internal(b / "0/U") == pytest.approx(r * __import__("numpy").array(SOLVED_U))
    assert list(fields.read_internal(b / "0/p")) == pytest.approx([r * r * v for v in SOLVED_P])
    assert "value uniform (40 0 0);" in (b / "0/U").read_text()  # its own inlet condition kept
    # a cold rerun restores the uniform field it was written with
    (rec,) = runner.run_sweep(root, only=["b40"], force=True, options=runner.RunOptions(cold=True))
    assert rec.initial_field == {"kind": "uniform", "source": None, "distance": None, "speed_ratio": None}
    assert fields.read_internal(b / "0/U") == (40.0, 0.0, 0.0)


def test_a_flagged_source_is_never_used(tmp_path):
    root = economy_sweep(tmp_path / "s", {"a30": (0.02, 30.0, None), "b40": (0.02, 40.0, "a30")}, warm="nearest")
    stand_in(root, "a30", solver="simpleFoam_endtime.log")  # used its budget, monitor missing: not-converged
    recs = {r.case_id: r for r in runner.run_sweep(root, jobs=1, ranks=1)}
    assert "not-converged" in recs["a30"].flags
    init = recs["b40"].initial_field
    assert init["kind"] == "uniform" and init["source"] == "a30"
    assert "flagged not-converged" in init["why"] and "cold start" in init["why"]


def test_a_source_without_its_mesh_gives_a_cold_start(tmp_path):
    import shutil

    root = economy_sweep(tmp_path / "s", {"a": (0.02, 30.0, None), "b": (0.025, 30.0, None)}, warm="nearest")
    runner.run_sweep(root, only=["a"], jobs=1, ranks=1)
    shutil.rmtree(root / "cases" / "a" / "constant" / "polyMesh")
    (rec,) = runner.run_sweep(root, only=["b"], jobs=1, ranks=1)
    assert rec.initial_field["kind"] == "uniform" and rec.initial_field["source"] == "a"
    assert "has no mesh" in rec.initial_field["why"]


def test_a_forced_warm_start_across_variants_is_refused(tmp_path):
    from caseprep.contract.errors import UserError

    root = economy_sweep(tmp_path / "s", {"a": (0.02, 30.0, None), "b": (0.02, 30.0, None)},
                         variant={"a": "flat", "b": "ramp"})
    with pytest.raises(UserError) as exc:
        runner.run_sweep(root, only=["b"], options=runner.RunOptions(warm_from="a"))
    msg = str(exc.value)
    assert "same variant" in msg and "variant ramp" in msg and "variant flat" in msg and "--warm-from" in msg
    assert not (root / "cases" / "b" / "logs").exists()  # refused before anything ran


def test_cli_warm_from_same_variant_and_cold_flag(tmp_path):
    from click.testing import CliRunner

    from caseprep.cli import main

    root = economy_sweep(tmp_path / "s", {"a": (0.02, 30.0, None), "b": (0.025, 30.0, None)})
    r = CliRunner().invoke(main, ["run", str(root), "--only", "a", "-j", "1", "--ranks", "1", "--skip-solver-check"])
    assert r.exit_code == 0, r.output
    assert "per converged point" in r.output
    r = CliRunner().invoke(main, ["run", str(root), "--only", "b", "--warm-from", "a", "-j", "1", "--ranks", "1",
                                  "--skip-solver-check"])
    assert r.exit_code == 0, r.output
    init = json.loads((root / "cases" / "b" / "underfloor-run.json").read_text())["initial_field"]
    # another mesh: mapped by the solver's utility, which cannot map the stand-in's fake mesh (cold, said so)
    assert init["source"] == "a" and init["kind"] == "uniform" and "could not be made" in init["why"]
    r = CliRunner().invoke(main, ["run", str(root), "--cold", "--warm-from", "a", "--skip-solver-check"])
    assert r.exit_code == 2 and "either --cold or --warm-from" in r.output


REPLAY = r'''
import pathlib, re, sys, time
log = pathlib.Path(sys.argv[1]).read_text()
head, *blocks = re.split(r"(?m)^(?=Time = )", log)
rows = pathlib.Path(sys.argv[2]).read_text().splitlines(keepends=True)
hdr = [r for r in rows if r.startswith("#")]
rows = [r for r in rows if not r.startswith("#")]
out = open("logs/simpleFoam.log", "w"); out.write(head)
mon = pathlib.Path("postProcessing/uf_forces/0"); mon.mkdir(parents=True, exist_ok=True)
f = open(mon / "force.dat", "w"); f.write("".join(hdr))
for i, b in enumerate(blocks):
    if pathlib.Path("logs/settled.stop").exists():  # as the solver's abort watch does: write and end
        out.write("End\n"); break
    out.write(b); out.flush()
    if i < len(rows):
        f.write(rows[i]); f.flush()
    time.sleep(float(sys.argv[3]))
'''


def test_the_settled_stop_rule_stops_a_settled_solve_early(tmp_path):
    """A replay of a real smoke run (tests/data/smoke_run: its whole budget of 150 iterations) as a
    growing log and force monitor; with the stop rule ``settled`` the runner asks it
    to stop as soon as the convergence rule counts it converged with the monitor settled."""
    from caseprep.contract.convergence import DEFAULT_OPTIONS

    root = economy_sweep(tmp_path / "s", {"a": (0.02, 30.0, None), "b": (0.02, 30.0, None)})
    m = json.loads((root / "manifest.json").read_text())
    m["cases"][0]["stop_rule"] = "settled"  # a: settled; b: budget
    for c in m["cases"]:  # the demo's reference values (DEMO floor at 40 m/s, frontal area about 0.1 m²)
        c["reference"].update(rho=1.204, speed=40.0, area=0.1)
    (root / "manifest.json").write_text(json.dumps(m))
    data = Path(__file__).parent / "data" / "smoke_run"
    for cid in ("a", "b"):
        case = root / "cases" / cid
        (case / "replay.py").write_text(REPLAY)
        text = (case / "run.sh").read_text().replace(
            'cp "$FIX/simpleFoam_converged.log" logs/simpleFoam.log',
            f'"{sys.executable}" replay.py "{data / "simpleFoam.log"}" "{data / "force.dat"}" 0.03')
        (case / "run.sh").write_text(text)
    recs = {r.case_id: r for r in runner.run_sweep(root, jobs=2, ranks=1,
                                                    options=runner.RunOptions(settle_check=0.1))}
    a, b = recs["a"], recs["b"]
    assert b.iterations == 150 and b.end_reason == "end-time" and b.settled_stop is None  # its whole budget
    assert a.settled_stop is not None and a.status == "ok" and not a.flags
    at = a.settled_stop["at_iteration"]
    assert DEFAULT_OPTIONS.stop_min_iterations <= at < 150 and "settled at iteration" in a.settled_stop["reason"]
    # it ended within a few iterations of the request (0.1 s checks, 0.03 s per iteration)
    assert at <= a.iterations <= at + 8 and a.end_reason == "end-time"
    assert "settled" in runner.summary_row(a)["end"]


def test_judge_stop_rule():
    import numpy as np

    from caseprep.contract.convergence import (DEFAULT_OPTIONS, judge_coefficients, judge_stop, stop_options,
                                               stop_window)

    n = 100
    w = stop_window(n)
    assert w == 50  # the last half of the run (at least 40)
    res = {"p": tuple([0.5] * 5 + [1e-4] * (n - 5))}
    strict = stop_options(DEFAULT_OPTIONS)
    assert strict.count_tol_lift == 0.0025 and strict.count_tol_drag_side == 0.001

    def verdict(cl, opts):
        return judge_coefficients({"cl": np.asarray(cl)[-w:], "cd": np.full(w, 0.21)}, opts)

    steady = np.full(n, -0.80)
    assert judge_stop(res, {"p": 1e-4}, verdict(steady, strict), n)[0] is True
    assert judge_stop(res, {"p": 1e-4}, verdict(steady, strict), DEFAULT_OPTIONS.stop_min_iterations - 1)[0] is False
    # a slow drift of C_L, 0.003 across the window: within the rule's 0.005, not within the stop's half
    slow = -0.80 + np.linspace(0.0, 0.006, n)
    assert verdict(slow, DEFAULT_OPTIONS)["verdict"] == "converged"
    ok, why = judge_stop(res, {"p": 1e-4}, verdict(slow, strict), n)
    assert ok is False and "not within half its tolerances" in why and "cl drift" in why
    # residuals below the tolerance do not stop a run without a monitor
    assert judge_stop(res, {"p": 1e-4}, None, n) == (False, "no force monitor to judge the stop by")
    # residuals above the tolerance that fell too little
    ok, why = judge_stop({"p": tuple([0.01] * n)}, {"p": 5e-3}, verdict(steady, strict), n)
    assert ok is False and "orders of magnitude" in why


def test_a_flagged_case_solved_before_is_not_planned_as_a_source(tmp_path):
    root = economy_sweep(tmp_path / "s", {"near": (0.021, 30.0, None), "far": (0.03, 30.0, None),
                                          "new": (0.02, 30.0, None)}, warm="nearest")
    stand_in(root, "near", solver="simpleFoam_endtime.log")  # ends flagged not-converged
    runner.run_sweep(root, only=["near"], jobs=1, ranks=1)
    runner.run_sweep(root, only=["far"], jobs=1, ranks=1)
    (rec,) = runner.run_sweep(root, only=["new"], jobs=1, ranks=1)
    assert rec.initial_field["source"] == "far"  # the nearer one is flagged: never a source
