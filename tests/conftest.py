"""Shared test set-up.

Tests marked ``solver`` run the real finite-volume solver (Debian package
``openfoam``). They are skipped when its binaries are missing, unless the
environment sets ``UNDERFLOOR_REQUIRE_SOLVER=1`` (CI does), in which case a
missing solver is a failure.
"""
from __future__ import annotations

import os
import shutil

import pytest

SOLVER_BINARIES = ("blockMesh", "snappyHexMesh", "simpleFoam", "foamToVTK", "checkMesh")


def solver_available() -> bool:
    return all(shutil.which(b) for b in SOLVER_BINARIES)


def pytest_runtest_setup(item):
    if "solver" in item.keywords and not solver_available():
        if os.environ.get("UNDERFLOOR_REQUIRE_SOLVER") == "1":
            pytest.fail("solver required (UNDERFLOOR_REQUIRE_SOLVER=1) but its binaries are missing: "
                        "apt-get install -y --no-install-recommends openfoam")
        pytest.skip("solver binaries (Debian package openfoam) not found")
