"""Limits: sizes a user or a file chooses are bounded before anything is
expanded or allocated, and every loop whose length follows a user number is
bounded. Each test reproduces a hang or a silent absurd value and asserts a
quick refusal naming the key. The bounds themselves are our choice (common
practice, no source); the README lists them and a test keeps it in step.
"""
from __future__ import annotations

import re
import time
from pathlib import Path

import pytest
from click.testing import CliRunner

from caseprep.casefiles.render import effective_write_interval
from caseprep.cli import main as caseprep_main
from caseprep.contract.limits import LIMITS, MAX_CASES, MAX_RANKS
from caseprep.planning.domain import decomposition_split
from planning_helpers import BASE_TOML, write_config

ROOT = Path(__file__).resolve().parent.parent


def _cfg(tmp_path: Path, text: str) -> Path:
    return write_config(tmp_path, text)


def _sub(section: str, line: str, text: str = BASE_TOML) -> str:
    """``text`` with ``line`` added at the top of ``[section]`` (replacing a key of the same name)."""
    key = line.split("=")[0].strip()
    out, sec = [], None
    for ln in text.splitlines():
        m = re.match(r"^\[([^\]]+)\]", ln)
        if m:
            sec = m.group(1)
            out.append(ln)
            if sec == section:
                out.append(line)
            continue
        if sec == section and ln.split("=")[0].strip() == key:
            continue
        out.append(ln)
    if f"[{section}]" not in text:
        out += [f"[{section}]", line]
    return "\n".join(out) + "\n"


def _check(path, cmd="check"):
    t0 = time.perf_counter()
    args = [cmd, str(path)] + (["-o", str(Path(path).parent / "out")] if cmd == "write" else [])
    r = CliRunner().invoke(caseprep_main, args)
    dt = time.perf_counter() - t0
    assert "Traceback" not in r.output and (r.exception is None or isinstance(r.exception, SystemExit)), r.output
    return r, dt


def _axis(n: int, start: float, step: float) -> str:
    return "[" + ", ".join(f"{start + i * step:.6g}" for i in range(n)) + "]"


def test_ten_million_cases_refused_in_under_a_second_naming_the_key(tmp_path):
    text = _sub("sweep", "ride_height = " + _axis(100, 0.02, 1e-4))
    text = _sub("sweep", "pitch_deg = " + _axis(100, -1.0, 0.01), text)
    text = _sub("sweep", "yaw_deg = " + _axis(100, 0.0, 0.01), text)
    text = _sub("sweep", "speed = " + _axis(10, 20.0, 0.5), text)
    cfg = _cfg(tmp_path, text)
    for cmd in ("check", "plan", "write"):
        r, dt = _check(cfg, cmd)
        assert r.exit_code == 2 and "10,000,000 cases" in r.output, r.output
        assert "at sweep.ride_height" in r.output and f"at most {int(MAX_CASES.value):,} cases" in r.output
        assert dt < 1.0, dt  # measured about 0.05 s
    assert not (tmp_path / "out").exists()


def test_points_times_variants_counted(tmp_path):
    """1000 points without a variant run for each of 11 variants: 11 000 cases."""
    pts = "".join(f"[[sweep.points]]\nride_height = {0.02 + i * 1e-5:.5f}\n" for i in range(1000))
    variants = "".join(f'[variants.v{i}]\ngeometry = "car.stl"\n' for i in range(11))
    text = BASE_TOML.replace("[sweep]\nride_height = [0.05]\npitch_deg = [0.0]\n", "")
    text = text.replace('[variants.base]\ngeometry = "car.stl"\n', variants) + pts
    r, dt = _check(_cfg(tmp_path, text))
    assert r.exit_code == 2 and "11,000 cases" in r.output and "at sweep.points" in r.output, r.output
    assert dt < 5.0  # the 1000 points are validated first (0.3 s on a quiet machine)


def test_axis_longer_than_the_limit_is_refused_before_validation(tmp_path):
    cfg = _cfg(tmp_path, _sub("sweep", "yaw_deg = " + _axis(1001, 0.0, 0.001)))
    r, dt = _check(cfg)
    assert r.exit_code == 2 and "sweep.yaw_deg" in r.output and "at most 1000 values" in r.output, r.output


@pytest.mark.parametrize("line,key", [
    ("ranks = 2305843009213693951", "solver.ranks"),
    ("ranks = 1000000", "solver.ranks"),
    ("iterations = 9999999967", "solver.iterations"),
    ("write_interval = 9999999966", "solver.write_interval"),
])
def test_solver_counts_refused_in_all_three_commands(tmp_path, line, key):
    cfg = _cfg(tmp_path, _sub("solver", line))
    for cmd in ("check", "plan", "write"):
        r, dt = _check(cfg, cmd)
        assert r.exit_code == 2 and f"at {key}" in r.output, r.output
        assert dt < 5.0


@pytest.mark.parametrize("section,line,key", [
    ("mesh", "base_cell = 1e-9", "mesh.base_cell"),
    ("domain", "upstream = 1e300", "domain.upstream"),
    ("domain", "downstream = 1e6", "domain.downstream"),
    ("air", "speed = 1e-300", "air.speed"),
    ("air", "speed = 1e300", "air.speed"),
    ("body", "reference_length = 1e9", "body.reference_length"),
    ("solver", "turbulence_length_scale = 1e-12", "solver.turbulence_length_scale"),
    ("body", "front_axle = [1e300, 0.0, 0.05]", "body.front_axle[0]"),
])
def test_absurd_finite_values_are_refused_at_their_key(tmp_path, section, line, key):
    cfg = _cfg(tmp_path, _sub(section, line))
    r, _ = _check(cfg)
    assert r.exit_code == 2 and f"at {key}" in r.output, r.output


def test_estimated_cells_above_the_limit_are_refused(tmp_path):
    cfg = _cfg(tmp_path, _sub("mesh", "base_cell = 1e-4"))
    r, _ = _check(cfg)
    assert r.exit_code == 2 and "estimated" in r.output and "cells per case" in r.output, r.output


def test_ride_height_above_five_body_lengths_is_refused(tmp_path):
    cfg = _cfg(tmp_path, _sub("sweep", "ride_height = [30.0]"))
    r, _ = _check(cfg)
    assert r.exit_code == 2 and "sweep.ride_height[0]" in r.output and "body length" in r.output, r.output


@pytest.mark.parametrize("line,key", [
    ("ride_height = []", "sweep.ride_height"), ("yaw_deg = []", "sweep.yaw_deg"), ("variants = []", "sweep.variants"),
    ("speed = []", "sweep.speed"), ("mesh_level = []", "sweep.mesh_level"),
])
def test_empty_axes_are_refused_at_check(tmp_path, line, key):
    cfg = _cfg(tmp_path, _sub("sweep", line))
    r, _ = _check(cfg)
    assert r.exit_code == 2 and f"at {key}" in r.output and "at least one value" in r.output, r.output


def test_long_names_and_texts_are_refused(tmp_path):
    cfg = _cfg(tmp_path, BASE_TOML.replace("[variants.base]", "[variants." + "v" * 250 + "]"))
    r, _ = _check(cfg)
    assert r.exit_code == 2 and "at most 64 characters" in r.output, r.output
    cfg = _cfg(tmp_path, _sub("study", 'description = "' + "x" * 5000 + '"'))
    r, _ = _check(cfg)
    assert r.exit_code == 2 and "study.description" in r.output and "4096 characters" in r.output, r.output


def test_huge_and_deeply_nested_configs_are_refused(tmp_path):
    big = tmp_path / "big.toml"
    big.write_text(BASE_TOML + "\n# " + "x" * 1_000_001 + "\n")
    r, _ = _check(big)
    assert r.exit_code == 2 and "1,000,000 bytes" in r.output, r.output
    deep = tmp_path / "deep.toml"
    deep.write_text(BASE_TOML.replace("pitch_deg = [0.0]", "pitch_deg = " + "[" * 100_000 + "]" * 100_000))
    r, _ = _check(deep)
    assert r.exit_code == 2 and "deep.toml" in r.output, r.output


def test_name_with_a_trailing_newline_is_refused(tmp_path):
    cfg = _cfg(tmp_path, BASE_TOML.replace('name = "t1"', 'name = "t1\\n"'))
    r, _ = _check(cfg)
    assert r.exit_code == 2 and "study.name" in r.output, r.output


def test_divisor_search_and_rank_split_are_bounded():
    t0 = time.perf_counter()
    # a prime number of iterations with an interval one less: only the end is written
    assert effective_write_interval(9_999_999_967, 9_999_999_966) == 9_999_999_967
    assert effective_write_interval(1_000_000, 999_999) == 500_000
    assert effective_write_interval(360, 100) == 90
    assert decomposition_split(int(MAX_RANKS.value), [10.0, 1.0, 1.0])[0] >= 64
    assert time.perf_counter() - t0 < 0.5
    with pytest.raises(ValueError):
        decomposition_split(2**61 - 1, [1.0, 1.0, 1.0])


def _num(v: float) -> str:
    return f"{int(v):,}" if float(v).is_integer() else f"{v:g}"


def test_readme_lists_every_limit():
    """The ranges of the config's numbers are in the README's config table (tests/test_config.py)."""
    text = (ROOT / "README.md").read_text()
    sec = text[text.index("## What the tool refuses"):]
    sec = sec[:sec.index("\n## ", 5)]
    for lim in LIMITS:
        assert f"| {lim.what} | {_num(lim.value)} {lim.unit} | {lim.why} |" in sec, lim


# ------------------------------------------------------------------ results tables (postproc analyse)

def _floor_table(path: Path, rows: int, variants: int) -> Path:
    """A results CSV of an invented floor (DEMO numbers): ``variants``
    variants sharing a grid of front ride height × rake, −C_L peaking at
    20 mm front ride height."""
    import math

    lines = ["# DEMO — invented results table",
             "case_id,variant,ride_height_front,ride_height_rear,yaw_deg,speed,mesh_level,cl,cd,cs,cl_front,cl_rear,flags"]
    for i in range(rows):
        k = i // variants
        hf, rake = 0.010 + 0.0005 * (k % 80), 0.002 * ((k // 80) % 20)
        x = hf / 0.02
        df = 1.2 * x * math.exp(1 - x) * (1 + 2 * rake) + 0.003 * math.sin(7.0 * i)
        lines.append(f"r{i},v{i % variants},{hf:.5f},{hf + rake:.5f},0,40,0,{-df:.5f},{0.3 + 0.05 * df:.5f},0,"
                     f"{-0.45 * df:.5f},{-0.55 * df:.5f},")
    path.write_text("\n".join(lines) + "\n")
    return path


def test_results_table_over_the_row_limit_is_refused_at_once(tmp_path):
    # 207,000 rows used to run for minutes (a duplicate check quadratic in the rows, then the analysis)
    from postproc.cli import main as postproc_main

    from caseprep.contract.limits import MAX_TABLE_ROWS

    src = _floor_table(tmp_path / "results.csv", 207_000, 3)
    t0 = time.perf_counter()
    r = CliRunner().invoke(postproc_main, ["analyse", str(src), "-o", str(tmp_path / "out")])
    took = time.perf_counter() - t0
    assert r.exit_code == 2 and r.exception is None or isinstance(r.exception, SystemExit), r.output
    assert f"expected at most {int(MAX_TABLE_ROWS):,} data rows, got '207,000 rows' in {src} at line 207002" in r.output
    assert "Fix: split the table" in r.output
    assert not (tmp_path / "out").exists()
    assert took < 20, took          # reading 12 MB of text and counting lines; seconds even on a busy machine


@pytest.mark.slow
def test_results_table_at_the_row_limit_is_analysed(tmp_path):
    # 10,000 rows (4 variants at 2,500 points each, the spline's leave-one-out capped at 200 points per map):
    # measured 5–8 s on the shared two-core machine; 120 s is the bound of a hang, not a benchmark
    from postproc.cli import main as postproc_main

    from caseprep.contract.limits import MAX_TABLE_ROWS

    src = _floor_table(tmp_path / "results.csv", int(MAX_TABLE_ROWS), 4)
    t0 = time.perf_counter()
    r = CliRunner().invoke(postproc_main, ["analyse", str(src), "-o", str(tmp_path / "out")])
    took = time.perf_counter() - t0
    assert r.exit_code == 0, r.output
    assert (tmp_path / "out" / "analysis.json").is_file()
    assert took < 120, took
