"""The SLURM job chain written beside the cases: the solver array, the
post-processing array, the merge and report job and submit.sh; their
#SBATCH settings from the config's [cluster] table (defaults declared once
in caseprep.config.keys), bad settings refused, and submit.sh's dependency
wiring (checked here with a stand-in `sbatch` that records its arguments;
tests/test_slurm.py submits to a real SLURM).
"""
from __future__ import annotations

import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest
from click.testing import CliRunner

from caseprep.cli import main
from caseprep.config.keys import KEYS
from caseprep.config.load import load_config
from caseprep.contract.errors import UserError

DEMO = Path(__file__).resolve().parent.parent / "example_cases" / "floor_study"


def _study(tmp_path, cluster: str = "") -> Path:
    src = tmp_path / "study"
    shutil.copytree(DEMO, src)
    if cluster:
        (src / "sweep.toml").write_text((src / "sweep.toml").read_text() + "\n[cluster]\n" + cluster)
    return src / "sweep.toml"


def _write(tmp_path, cluster: str = "") -> Path:
    out = tmp_path / "out"
    r = CliRunner().invoke(main, ["write", str(_study(tmp_path, cluster)), "-o", str(out), "--fidelity", "smoke"])
    assert r.exit_code == 0, r.output
    return out


def _sbatch(text: str) -> dict[str, str]:
    return dict(m.groups() for m in re.finditer(r"^#SBATCH --([a-z-]+)=(\S+)$", text, re.M))


def test_default_chain(tmp_path):
    out = _write(tmp_path)
    for name in ("slurm_array.sh", "slurm_post.sh", "slurm_merge.sh", "submit.sh"):
        p = out / name
        assert os.access(p, os.X_OK)
        assert subprocess.run(["bash", "-n", str(p)]).returncode == 0
    solve = _sbatch((out / "slurm_array.sh").read_text())
    assert solve["array"] == "1-12" and solve["ntasks"] == "2"  # the demo plans 2 ranks per case
    assert solve["mem-per-cpu"] == KEYS["cluster.memory_per_core"].value
    assert solve["time"] == KEYS["cluster.case_time"].value and "partition" not in solve
    post = _sbatch((out / "slurm_post.sh").read_text())
    assert post["array"] == "1-8" and post["time"] == KEYS["cluster.postproc_time"].value
    assert "--shard \"$TASK/$SHARDS\"" in (out / "slurm_post.sh").read_text()
    merge = _sbatch((out / "slurm_merge.sh").read_text())
    assert merge["time"] == KEYS["cluster.report_time"].value
    for text in ((out / n).read_text() for n in ("slurm_array.sh", "slurm_post.sh", "slurm_merge.sh")):
        assert "#SBATCH --requeue" in text


def test_cluster_keys(tmp_path):
    out = _write(tmp_path, 'partition = "short"\naccount = "aero-team"\ncores_per_case = 4\n'
                           'case_time = "1-00:00:00"\nmax_running = 3\npostproc_shards = 20\npostproc_cores = 2\n'
                           'postproc_memory = "8G"\n')
    solve = _sbatch((out / "slurm_array.sh").read_text())
    assert solve["partition"] == "short" and solve["account"] == "aero-team"
    assert solve["ntasks"] == "4" and solve["time"] == "1-00:00:00" and solve["array"] == "1-12%3"
    post = _sbatch((out / "slurm_post.sh").read_text())
    assert post["array"] == "1-12" and post["cpus-per-task"] == "2" and post["mem"] == "8G"  # ≤ one per case
    assert post["partition"] == "short"


@pytest.mark.parametrize("line, key, expected", [
    ('case_time = "4h"', "cluster.case_time", "a time limit"),
    ('partition = "long queue"', "cluster.partition", "no spaces"),
    ('memory_per_core = "2GB"', "cluster.memory_per_core", "an amount of memory"),
    ("postproc_shards = 0", "cluster.postproc_shards", "at least 1 shard"),
    ("cores_per_case = 0", "cluster.cores_per_case", "at least 1 core"),
    ('max_running = -1', "cluster.max_running", "≥ 0"),
    ('queue = "x"', "cluster.queue", "one of the keys"),
])
def test_bad_cluster_settings(tmp_path, line, key, expected):
    with pytest.raises(UserError) as ei:
        load_config(_study(tmp_path, line))
    msg = str(ei.value)
    assert key in msg and expected in msg and "sweep.toml" in msg


def _fake_sbatch(tmp_path) -> dict[str, str]:
    """A stand-in sbatch: records each call's arguments, prints a job id."""
    bin_dir = tmp_path / "bin"
    bin_dir.mkdir()
    log = tmp_path / "sbatch.log"
    (bin_dir / "sbatch").write_text(f"""#!/bin/bash
n=$(( $(wc -l < "{log}" 2>/dev/null || echo 0) + 101 ))
echo "$*" >> "{log}"
echo "$n;testcluster"
""")
    (bin_dir / "sbatch").chmod(0o755)
    return dict(os.environ, PATH=f"{bin_dir}:{os.environ['PATH']}")


def test_submit_wires_the_chain_and_skips_exported_cases(tmp_path):
    out = _write(tmp_path)
    ids = (out / "cases.txt").read_text().split()
    for k in (0, 4):  # cases 1 and 5 exported
        (out / "cases" / ids[k] / "logs").mkdir()
        (out / "cases" / ids[k] / "logs" / "export.done").write_text("")
    env = _fake_sbatch(tmp_path)
    r = subprocess.run(["./submit.sh", "--", "--qos=debug"], cwd=out, env=env, capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    calls = (tmp_path / "sbatch.log").read_text().splitlines()
    assert calls[0] == "--parsable --array=2,3,4,6,7,8,9,10,11,12 --qos=debug slurm_array.sh"
    assert calls[1] == "--parsable --dependency=afterany:101 --qos=debug slurm_post.sh"
    assert calls[2] == "--parsable --dependency=afterany:102 --qos=debug slurm_merge.sh"
    assert "solve=101 post=102 merge=103" in (out / "submitted-jobs.txt").read_text()
    # every case exported: no solver array, the post-processing depends on nothing
    for cid in ids:
        (out / "cases" / cid / "logs").mkdir(exist_ok=True)
        (out / "cases" / cid / "logs" / "export.done").write_text("")
    (tmp_path / "sbatch.log").unlink()
    r = subprocess.run(["./submit.sh"], cwd=out, env=env, capture_output=True, text=True)
    assert r.returncode == 0 and "nothing to run" in r.stderr
    calls = (tmp_path / "sbatch.log").read_text().splitlines()
    assert calls == ["--parsable slurm_post.sh", "--parsable --dependency=afterany:101 slurm_merge.sh"]


def test_submit_without_sbatch_says_so(tmp_path):
    out = _write(tmp_path)
    bin_dir = tmp_path / "nobatch"  # the tools submit.sh uses, and no sbatch
    bin_dir.mkdir()
    for tool in ("bash", "dirname", "date", "sed"):
        (bin_dir / tool).symlink_to(shutil.which(tool))
    env = dict(os.environ, PATH=str(bin_dir))
    r = subprocess.run(["./submit.sh"], cwd=out, env=env, capture_output=True, text=True)
    assert r.returncode == 2 and "sbatch not found" in r.stderr
    r = subprocess.run(["./submit.sh", "-x"], cwd=out, env=env, capture_output=True, text=True)
    assert r.returncode == 2 and "got '-x'" in r.stderr
