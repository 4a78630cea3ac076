"""The one vocabulary of statuses and labels used by the analysis kernels and
written into ``analysis.json`` (string enums, so they serialise as text)."""
from __future__ import annotations

from enum import StrEnum


class FitStatus(StrEnum):
    """Outcome of one aero-map fit or one candidate model."""

    OK = "ok"
    REFUSED = "refused"


class SensitivityKind(StrEnum):
    """What a reported derivative means."""

    PARTIAL = "partial"          # ∂/∂h_f and ∂/∂h_r: the design spans both directions
    ALONG_LINE = "along-line"    # d/ds along the one tested line; no front/rear split


class PointState(StrEnum):
    """A variant at one operating point of the envelope."""

    USABLE = "usable"
    FLAGGED = "flagged"
    MISSING = "missing"


class ConstraintStatus(StrEnum):
    MET = "met"
    VIOLATED = "violated"
    NOT_ASSESSED = "not-assessed"


class DecisionStatus(StrEnum):
    """What the ranking may honestly say."""

    CLEAR = "clear-winner"            # best score, complete, meets constraints, no tie
    TIE = "tie"                       # best score within the combined uncertainty of another
    INCOMPLETE = "incomplete"         # best score belongs to a variant with flagged/missing points
    NONE_ELIGIBLE = "no-eligible-variant"   # every variant violates a constraint
    NO_COMMON_POINTS = "no-common-points"   # no operating point where all variants are usable


class PlatformState(StrEnum):
    """The car on its springs at one speed."""

    EQUILIBRIUM = "equilibrium"
    ON_GROUND = "on-ground"           # a ride height reached zero
    NO_EQUILIBRIUM = "no-equilibrium"  # the static solution folded (aero stiffness beat the springs)


class BottomingMode(StrEnum):
    CONTACT = "contact"               # the equilibrium ride height reaches the ground
    DIVERGENCE = "divergence"         # the equilibrium vanishes: the floor is pulled down
