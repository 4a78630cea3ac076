"""Convergence verdicts on synthetic monitor histories and parsing of monitor files."""
from __future__ import annotations

import numpy as np
import pytest

from caseprep.contract.errors import UserError
from caseprep.contract.convergence import count_stats, judge_coefficients
from caseprep.contract.monitor import read_monitor

N = np.arange(400)


def test_verdicts():
    # each series in its own units against its tolerance (coefficient counts, invented histories)
    rng = np.random.default_rng(0)
    settled = 0.85 + 0.4 * np.exp(-N / 30) + 1e-4 * rng.normal(size=N.size)
    s = count_stats("cd", settled[-200:], 0.002)
    assert s.verdict == "converged" and s.mean == pytest.approx(0.85, abs=1e-3)
    osc = 0.85 + 0.05 * np.sin(N / 5.0)
    assert count_stats("cd", osc[-200:], 0.002).verdict == "oscillating"
    runaway = 0.85 + 0.002 * N
    s = count_stats("cd", runaway[-200:], 0.002)
    assert s.verdict == "diverging" and s.drift == pytest.approx(0.002 * 199, rel=1e-9)
    bad = settled.copy()
    bad[-3] = np.nan
    assert count_stats("cd", bad[-200:], 0.002).verdict == "diverging"
    # a near-zero series (side force of a symmetric body) is judged in counts, not relative to its tiny mean
    assert count_stats("cs", 1e-6 * rng.normal(size=300), 0.002).verdict == "converged"
    a = judge_coefficients({"cd": settled[-200:], "cl": osc[-200:]})
    assert a["verdict"] == "oscillating" and a["window"] == 200
    with pytest.raises(UserError):
        count_stats("cd", [1.0, 2.0], 0.002)


def test_inputs_not_modified():
    v = np.linspace(0, 1, 50)
    v0 = v.copy()
    count_stats("x", v, 0.002)
    np.testing.assert_array_equal(v, v0)


def test_read_monitor_restart_and_formats(tmp_path):
    d0 = tmp_path / "postProcessing" / "f" / "0"
    d1 = tmp_path / "postProcessing" / "f" / "3"
    d0.mkdir(parents=True)
    d1.mkdir(parents=True)
    head = "# Force\n# CofR : (0 0 0)\n#\n# Time\t(total_x total_y total_z)\t(pressure_x pressure_y pressure_z)\t(viscous_x viscous_y viscous_z)\n"
    row = lambda t, v: f"{t}\t({v} 0 0)\t({v / 2} 0 0)\t({v / 2} 0 0)\n"  # noqa: E731
    (d0 / "force.dat").write_text(head + "".join(row(t, t * 1.0) for t in range(1, 6)))
    (d1 / "force.dat").write_text(head + "".join(row(t, t * 10.0) for t in range(4, 8)) + "8\t(1.0 2")  # restart, cut line
    m = read_monitor(tmp_path)
    assert m["Time"].tolist() == [1, 2, 3, 4, 5, 6, 7]
    assert m["force.total_x"].tolist() == [1, 2, 3, 40, 50, 60, 70]
    assert m["force.viscous_x"][-1] == 35.0
    with pytest.raises(UserError, match="postProcessing"):
        read_monitor(tmp_path / "nowhere")
