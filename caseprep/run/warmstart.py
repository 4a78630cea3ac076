"""Which initial field a case starts from, decided just before its solve
stage: the rules, and the command that prepares it
(:mod:`caseprep.run.fields`).

A warm start from the planned source (:mod:`caseprep.run.economy`) is made
only when the source

* solved: its solve stage ended with its marker (``logs/solve.done``);
* carries no flag of the mesh or solve stages (``not-converged``,
  ``solver-crashed``, ``mesh-checks-failed``, …): a flagged solution is no
  state to start from;
* still has its mesh and a solution folder.

Otherwise the case starts cold from the uniform free stream, and the record
says why. A source sharing the case's mesh (the same mesh fingerprint) is
copied cell by cell; any other is mapped by the solver's utility. Nothing
here runs a tool.

Risk, documented in the README: a steady solution need not be unique. Near
a stall of a diffuser in ground effect the flow can take one of two states
depending on where it comes from (a hysteresis region is reported for steep
diffusers by Ruhrmann & Zhang, J. Fluids Eng. 125 (2003)); a warm start
continues the source's state. The run record's ``initial_field`` names the
source so that such a point can be rerun cold (``caseprep run --only ID
--force --cold``).
"""
from __future__ import annotations

import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Sequence

from caseprep.contract.manifest import CaseRecord
from caseprep.run import fields, reuse

#: Flags of a source's mesh and solve stages that forbid starting from it.
BLOCKING_FLAGS = ("mesh-failed", "mesh-checks-failed", "mesh-illegal-faces", "layers-collapsed", "solver-crashed",
                  "not-converged")


@dataclass(frozen=True)
class InitialChoice:
    """``kind``: ``uniform``, ``copied`` or ``mapped``; ``source`` the case
    id (None for a planned cold start); ``distance`` in the sweep's
    parameters (:mod:`caseprep.run.economy`); ``speed_ratio`` V_case /
    V_source; ``why`` the reason of a cold start ("" otherwise);
    ``source_dir`` its folder."""

    kind: str
    source: str | None = None
    distance: float | None = None
    speed_ratio: float | None = None
    why: str = ""
    source_dir: Path | None = None

    def to_record(self) -> dict:
        d = {"kind": self.kind, "source": self.source, "distance": self.distance, "speed_ratio": self.speed_ratio}
        if self.why:
            d["why"] = self.why
        return d

    def command(self, case_dir: Path) -> list[str] | None:
        """The command that prepares ``0/`` (None: nothing to do — a cold
        start of a case that was never warm-started)."""
        if self.kind == "uniform" and not (case_dir / fields.UNIFORM_DIR).is_dir():
            return None
        cmd = [sys.executable, "-m", "caseprep.run.fields", str(case_dir), "--kind", self.kind]
        if self.kind != "uniform":
            cmd += ["--source", str(self.source_dir), "--speed-ratio", repr(float(self.speed_ratio or 1.0))]
        return cmd


def choose(case: CaseRecord, source: CaseRecord | None, source_dir: Path | None, distance: float | None,
           source_flags: Sequence[str], source_solved: bool, why_none: str = "") -> InitialChoice:
    """The initial field of ``case`` given its planned ``source`` (None: a
    cold start, ``why_none`` says why); ``source_flags`` the flags of the
    source's mesh and solve stages; ``source_solved`` whether its solve stage
    finished. See the module docstring."""
    if source is None or source_dir is None:
        return InitialChoice("uniform", why=why_none)
    cold = None
    blocking = [f for f in source_flags if f in BLOCKING_FLAGS]
    if not source_solved:
        cold = f"the source {source.case_id} did not solve"
    elif blocking:
        cold = f"the source {source.case_id} is flagged {', '.join(blocking)}"
    else:
        missing = reuse.mesh_ready(source_dir)
        if missing is not None:
            cold = f"the source {source.case_id} has no mesh ({missing})"
        elif fields.latest_time(source_dir) is None:
            cold = f"the source {source.case_id} has no solution folder"
    ratio = float(case.reference.speed) / float(source.reference.speed)
    if cold is not None:
        return InitialChoice("uniform", source.case_id, distance, ratio, f"{cold}: cold start", source_dir)
    same_mesh = case.mesh_key is not None and case.mesh_key == source.mesh_key
    return InitialChoice("copied" if same_mesh else "mapped", source.case_id, distance, ratio, "", source_dir)
