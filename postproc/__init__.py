"""postproc: VTK results of underfloor cases → forces, moments, coefficients,
balance, centre of pressure, flow structures, aero maps and reports.

Axes and sign conventions are those of :mod:`caseprep.contract.frames`.
"""
from caseprep.contract import __version__  # one version for the whole distribution

__all__ = ["__version__"]
