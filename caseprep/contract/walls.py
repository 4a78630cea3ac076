"""Wall treatments: the y+ band each treatment is meant for, declared once.

The planner sizes the first prism layer for a target y+ inside the band of
the case's wall treatment, writes the treatment into the manifest record
(``wall_treatment``), and the post-processing (``postproc sweep``, ``postproc
walls``) judges the solver's y+ against the same band. y+ is evaluated at the
**centre** of the wall-adjacent cell, as the solver does: y+ = y u_τ/ν with y
half the first-cell height on a prism layer.

Treatments
----------
``wall-function``
    High-Reynolds wall functions for k-ω SST: the eddy viscosity at the wall
    from Spalding's law of the wall (one formula through the viscous
    sublayer, the buffer region and the log layer: Spalding, D. B. (1961),
    "A single formula for the law of the wall", J. Appl. Mech. 28(3),
    455–458; the solver's ``nutUSpaldingWallFunction``), ω from the
    solver's ``omegaWallFunction``, k zero-gradient (``kqRWallFunction``).
    Band 30 ≤ y+ ≤ 150: the lower end keeps the cell centre out of the buffer
    region where the k and ω wall expressions are least certain (log law from
    y+ ≈ 30: Pope, *Turbulent Flows*, 2000, §7.1, from memory); the upper end
    keeps it well inside the inner layer of a model-scale floor's boundary
    layer (the log law holds to about 0.1–0.2 δ+, δ+ ≈ 2000 for a 1:4 car
    at 40 m/s: common practice, no source).
``low-re``
    The viscous sublayer resolved (k-ω SST integrated to the wall: k = 0,
    ω from ``omegaWallFunction``'s viscous branch, ν_t = 0 through
    ``nutLowReWallFunction``). Band 0 < y+ ≤ 5, the viscous sublayer
    (Pope 2000, §7.1, from memory); the planner aims at y+ ≈ 1.
``laminar``
    No turbulence model: the wall is resolved, band 0 < y+ ≤ 5 (common
    practice, no source).
"""
from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class WallTreatment:
    """One wall treatment: ``name``, the intended y+ band at the first cell
    centre (``low``, ``high``, dimensionless) and the solver's boundary
    conditions for ν_t, k and ω on walls (None: not a turbulent treatment)."""

    name: str
    low: float
    high: float
    nut: str | None
    k: str | None
    omega: str | None
    meaning: str

    @property
    def band(self) -> tuple[float, float]:
        return (self.low, self.high)


WALL_TREATMENTS: dict[str, WallTreatment] = {
    "wall-function": WallTreatment("wall-function", 30.0, 150.0, "nutUSpaldingWallFunction", "kqRWallFunction",
                                   "omegaWallFunction", "wall functions (Spalding's law), first cell centre in the log layer"),
    "low-re": WallTreatment("low-re", 0.0, 5.0, "nutLowReWallFunction", "fixedValue", "omegaWallFunction",
                            "viscous sublayer resolved (y+ ≈ 1)"),
    "laminar": WallTreatment("laminar", 0.0, 5.0, None, None, None, "laminar flow, wall resolved"),
}

#: The centre y+ the ``low-re`` treatment aims at (common practice, no source).
LOW_RE_TARGET_YPLUS = 1.0


def wall_treatment(name: str | None, turbulence_model: str | None = None) -> WallTreatment:
    """The treatment called ``name``; without a name, the default of the
    turbulence model (``laminar`` for laminar, ``wall-function`` otherwise:
    manifests written before treatments were recorded)."""
    if name is not None and name in WALL_TREATMENTS:
        return WALL_TREATMENTS[name]
    if name is not None:
        raise ValueError(f"expected a wall treatment of {tuple(WALL_TREATMENTS)}, got {name!r}")
    return WALL_TREATMENTS["laminar" if turbulence_model == "laminar" else "wall-function"]
