"""Shared test set-up.

Tests marked ``solver`` run the real finite-volume solver (Debian package
``openfoam``). They are skipped when its binaries are missing, unless the
environment sets ``UNDERFLOOR_REQUIRE_SOLVER=1`` (CI does), in which case a
missing solver is a failure.

Tests marked ``slurm`` submit jobs to a real SLURM (Debian packages
``slurm-wlm`` and ``munge``, daemons started by ``tools/slurm-up.sh``). They are
skipped when no controller answers, unless ``UNDERFLOOR_REQUIRE_SLURM=1``
(CI sets it), in which case that is a failure.
"""
from __future__ import annotations

import os
import shutil
import subprocess

import pytest

SOLVER_BINARIES = ("blockMesh", "snappyHexMesh", "simpleFoam", "foamToVTK", "checkMesh")


def solver_available() -> bool:
    return all(shutil.which(b) for b in SOLVER_BINARIES)


def slurm_available() -> bool:
    if not all(shutil.which(b) for b in ("sbatch", "squeue", "scancel", "scontrol")):
        return False
    try:
        r = subprocess.run(["scontrol", "ping"], capture_output=True, text=True, timeout=20)
    except (OSError, subprocess.TimeoutExpired):
        return False
    return "is UP" in r.stdout


def pytest_runtest_setup(item):
    if "slurm" in item.keywords and not slurm_available():
        if os.environ.get("UNDERFLOOR_REQUIRE_SLURM") == "1":
            pytest.fail("SLURM required (UNDERFLOOR_REQUIRE_SLURM=1) but no controller answers: "
                        "apt-get install -y --no-install-recommends slurm-wlm munge && tools/slurm-up.sh")
        pytest.skip("no SLURM controller answers (install slurm-wlm and munge, then run tools/slurm-up.sh as root)")
    if "solver" in item.keywords and not solver_available():
        if os.environ.get("UNDERFLOOR_REQUIRE_SOLVER") == "1":
            pytest.fail("solver required (UNDERFLOOR_REQUIRE_SOLVER=1) but its binaries are missing: "
                        "apt-get install -y --no-install-recommends openfoam")
        pytest.skip("solver binaries (Debian package openfoam) not found")
