"""`postproc analyse` end to end: results CSV and sweep-folder sources, the
shipped demo table, and bad input (clear message, exit code 2, nothing
half-written)."""
from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
from click.testing import CliRunner

from postproc.cli import main

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "example_cases" / "analysis_demo"
HEAD = "variant,ride_height_front,ride_height_rear,yaw_deg,speed,mesh_level,cl,cd,cs,cl_front,cl_rear,reference_area,flags"


def _grid_rows(variant="a", k=1.0, scale=1.0):
    rows = []
    for hf in (0.015, 0.020, 0.025, 0.030, 0.035):
        for rake in (0.005, 0.015, 0.025):
            clf = -k * (0.55 + 6 * (0.03 - hf))
            clr = -k * (0.65 + 4 * rake)
            rows.append(f"{variant},{hf * scale:.4g},{(hf + rake) * scale:.4g},0,40,0,{clf + clr:.5f},0.40,0,"
                        f"{clf:.5f},{clr:.5f},1.0,")
    return rows


def _run(args, cwd=None):
    return CliRunner().invoke(main, ["analyse", *map(str, args)], catch_exceptions=False)


def _files(folder: Path) -> set[str]:
    return {p.name for p in folder.iterdir()}


def test_shipped_demo_table_runs_and_is_data(tmp_path):
    out = tmp_path / "out"
    r = _run([DEMO / "results.csv", "-c", DEMO / "ANALYSIS.toml", "-o", out])
    assert r.exit_code == 0, r.output
    d = json.loads((out / "analysis.json").read_text())
    assert d["schema"] == "underfloor.analysis" and "validate by physical test" in d["caution"]
    assert {m["variant"] for m in d["maps"]} == {"flat", "venturi_a", "venturi_b"}
    # the invented venturi_b failed at its lowest ride height: incomplete, never a clean winner
    b = next(v for v in d["ranking"]["variants"] if v["variant"] == "venturi_b")
    assert b["complete"] is False and len(b["flagged_points"]) == 3
    assert d["ranking"]["decision"]["winner"] != "venturi_b"
    assert d["ranking"]["basis"] == "area"          # the demo's reference areas differ
    assert any(p["stall"] and p["peak_bracketed"] for p in d["peaks"] if p["variant"] == "venturi_a")
    assert all(p["status"] == "ok" for p in d["platform"])
    assert "DEMO" in (DEMO / "results.csv").read_text().splitlines()[0]
    # --json prints the same data; a second run refuses to overwrite without --force
    again = _run([DEMO / "results.csv", "-c", DEMO / "ANALYSIS.toml", "-o", out])
    assert again.exit_code == 2 and "--force" in again.output
    js = _run([DEMO / "results.csv", "-c", DEMO / "ANALYSIS.toml", "-o", out, "--json", "--force"])
    assert json.loads(js.output)["ranking"]["decision"] == d["ranking"]["decision"]


def _bad(tmp_path, text, *extra, name="results.csv"):
    p = tmp_path / name
    p.write_text(text)
    out = tmp_path / "out"
    r = _run([p, "-o", out, *extra])
    assert r.exit_code == 2, r.output
    assert "Traceback" not in r.output
    assert not out.exists() or not _files(out)       # nothing (half-)written
    return r.output


def test_missing_required_columns_are_listed(tmp_path):
    msg = _bad(tmp_path, "variant,ride_height_front,cl\na,0.02,-1\n")
    for col in ("ride_height_rear", "yaw_deg", "speed", "mesh_level", "cd", "cs", "cl_front", "cl_rear"):
        assert col in msg
    assert "Fix:" in msg


def test_non_numeric_cell_names_row_and_column(tmp_path):
    rows = _grid_rows()
    rows[3] = rows[3].replace(",0.40,", ",abc,")
    msg = _bad(tmp_path, "\n".join([HEAD, *rows]) + "\n")
    assert "line 5" in msg and "at cd" in msg and "'abc'" in msg


def test_ride_heights_in_mm_are_detected(tmp_path):
    msg = _bad(tmp_path, "\n".join([HEAD, *_grid_rows(scale=1000.0)]) + "\n")
    assert "millimetres" in msg and "divide" in msg and "1000" in msg


@pytest.mark.parametrize("rate", ["0.0", "-5000.0"])
def test_platform_rates_must_be_positive(tmp_path, rate):
    cfg = tmp_path / "ANALYSIS.toml"
    cfg.write_text(f"[platform]\nstatic_front = 0.03\nstatic_rear = 0.045\nrate_front = {rate}\n"
                   "rate_rear = 80000.0\nspeeds = [20.0]\n")
    msg = _bad(tmp_path, "\n".join([HEAD, *_grid_rows()]) + "\n", "-c", cfg)
    assert "platform.rate_front" in msg and "positive" in msg and rate in msg


def test_equilibrium_that_does_not_exist(tmp_path):
    # springs so soft that the floor is on the ground at every requested speed
    cfg = tmp_path / "ANALYSIS.toml"
    cfg.write_text("[platform]\nstatic_front = 0.03\nstatic_rear = 0.045\nrate_front = 100.0\n"
                   "rate_rear = 100.0\nspeeds = [40.0, 60.0]\n")
    msg = _bad(tmp_path, "\n".join([HEAD, *_grid_rows()]) + "\n", "-c", cfg)
    assert "on the ground" in msg and "rates" in msg


def test_unknown_metric_via_the_cli(tmp_path):
    cfg = tmp_path / "ANALYSIS.toml"
    cfg.write_text("[ranking.weights]\nefficency = 1.0\n")
    msg = _bad(tmp_path, "\n".join([HEAD, *_grid_rows()]) + "\n", "-c", cfg)
    assert "Did you mean 'efficiency'" in msg and "balance_range" in msg


def test_single_point_per_variant_refuses_maps_but_ranks(tmp_path):
    p = tmp_path / "one.csv"
    p.write_text("\n".join([HEAD, "a,0.02,0.03,0,40,0,-1.20,0.40,0,-0.5,-0.7,1.0,",
                            "b,0.02,0.03,0,40,0,-1.25,0.42,0,-0.5,-0.75,1.0,"]) + "\n")
    r = _run([p, "-o", tmp_path / "out"])
    assert r.exit_code == 0, r.output
    d = json.loads((tmp_path / "out" / "analysis.json").read_text())
    assert all(m["coefficients"]["cl"]["status"] == "refused" for m in d["maps"])
    assert "single operating point" in d["maps"][0]["coefficients"]["cl"]["reason"]
    assert [v["rank"] for v in d["ranking"]["variants"]] == [1, 2]


def test_sweep_folder_source(tmp_path):
    # a folder as `postproc sweep` leaves it: results.json rows (flags as a
    # space-separated string, no spreads of their own) and results/<case>.json
    # whose forces report holds the reference values and the monitor's verdict
    # in coefficient counts with its spreads over the settling window
    sweep = tmp_path / "sweep"
    (sweep / "results").mkdir(parents=True)
    cases = []
    for i, line in enumerate(_grid_rows("a") + _grid_rows("b", 1.02)):
        v, hf, hr, yaw, spd, lvl, cl, cd, cs, clf, clr, area, _ = line.split(",")
        cid = f"{v}-{i}"
        cases.append({"case_id": cid, "variant": v, "ride_height_front": float(hf), "ride_height_rear": float(hr),
                      "pitch_deg": -0.5, "yaw_deg": 0.0, "speed": 40.0, "mesh_level": 0, "cl": float(cl),
                      "cd": float(cd), "cs": 0.0, "cl_front": float(clf), "cl_rear": float(clr), "balance": None,
                      "flags": "not-converged" if cid == "b-15" else "", "status": "ok"})
        (sweep / "results" / f"{cid}.json").write_text(json.dumps({"forces": {
            "reference": {"area": 0.9, "q": 980.0, "rho": 1.2},
            "convergence": {"verdict": "converged", "stds": {"cl": 5e-4, "cd": 1.5e-4, "cs": 1e-4}}}}))
    (sweep / "results.json").write_text(json.dumps({"cases": cases}))
    r = _run([sweep])
    assert r.exit_code == 0, r.output
    d = json.loads((sweep / "analysis.json").read_text())
    pt = next(p for p in d["points"] if p["cases"] == ["a-0"])
    assert pt["reference_area"] == pytest.approx(0.9)
    # the iterative u of C_L is the window std of C_L in the case's stored result
    assert pt["uncertainty"]["cl"]["iterative"] == pytest.approx(5e-4, rel=1e-9)
    b = next(v for v in d["ranking"]["variants"] if v["variant"] == "b")
    assert b["complete"] is False and b["flagged_points"][0]["flags"] == ["not-converged"]


def test_output_folder_gets_nothing_but_analysis_json(tmp_path):
    src = tmp_path / "src"
    src.mkdir()
    shutil.copy(DEMO / "results.csv", src / "results.csv")
    r = _run([src / "results.csv"])
    assert r.exit_code == 0, r.output
    assert _files(src) == {"results.csv", "analysis.json"}    # no temp files left behind


def test_analysis_table_inside_a_sweep_config(tmp_path):
    # caseprep accepts (and ignores) an [analysis] table; postproc reads it
    from caseprep.config.load import load_config
    from postproc.io.analysis_config import read_analysis_config

    src = REPO / "example_cases" / "floor_study"
    shutil.copytree(src, tmp_path / "fs")
    cfg = tmp_path / "fs" / "sweep.toml"
    cfg.write_text(cfg.read_text() + "\n[analysis.ranking.weights]\ndownforce = 1.0\n"
                   "[analysis.design]\nride_height_front = 0.025\n")
    load_config(cfg)
    a = read_analysis_config(cfg)
    assert dict(a.weights) == {"downforce": 1.0} and a.design_front == 0.025


def test_settings_errors_name_the_key(tmp_path):
    from caseprep.contract.errors import UserError
    from postproc.io.analysis_config import read_analysis_config

    cases = {"[platfrom]\nspeeds = [1.0]\n": "Did you mean 'platform'",
             "[design]\nride_height_front = 25\n": "design.ride_height_front",
             "[maps]\nconfidence = 1.5\n": "maps.confidence",
             "[maps]\nmesh_level = 'each'\n": "Did you mean 'mesh_levels'"}
    for text, expected in cases.items():
        p = tmp_path / "ANALYSIS.toml"
        p.write_text(text)
        with pytest.raises(UserError, match=expected.replace("(", r"\(")):
            read_analysis_config(p)


def test_postproc_sweep_writes_the_same_analysis(tmp_path):
    # the example floor study written but not run: every point flagged `not-run`, so no
    # variant can be compared — and the analysis says so as data
    from caseprep.cli import main as caseprep_main

    root = tmp_path / "sw"
    w = CliRunner().invoke(caseprep_main, ["write", str(REPO / "example_cases" / "floor_study" / "sweep.toml"),
                                           "-o", str(root)], catch_exceptions=False)
    assert w.exit_code == 0, w.output
    r = CliRunner().invoke(main, ["sweep", str(root), "-q"], catch_exceptions=False)
    assert r.exit_code == 0, r.output
    d = json.loads((root / "analysis.json").read_text())
    assert d["source"]["kind"] == "sweep" and d["ranking"]["decision"]["status"] == "no-common-points"
    assert len(d["ranking"]["envelope"]) == 4 and all(not v["compared"] for v in d["ranking"]["variants"])
    # `postproc analyse` on the folder computes the same decision
    again = _run([root, "-o", tmp_path / "again"])
    assert again.exit_code == 0, again.output
    assert json.loads((tmp_path / "again" / "analysis.json").read_text())["ranking"] == d["ranking"]
    # bad settings stop the sweep before anything is written
    (root / "ANALYSIS.toml").write_text("[ranking.weights]\ndownforse = 1.0\n")
    bad = CliRunner().invoke(main, ["sweep", str(root), "-q", "-o", str(tmp_path / "o2")], catch_exceptions=False)
    assert bad.exit_code == 2 and "Did you mean 'downforce'" in bad.output
    assert not (tmp_path / "o2").exists()
