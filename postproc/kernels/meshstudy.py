"""Mesh dependence: Richardson extrapolation and the grid convergence index.

For one operating point solved on three meshes (the sweep's ``mesh_level``
axis: each level divides the base cell by √2), this module estimates the
observed order of convergence, the extrapolated (mesh-independent) value and
the discretisation uncertainty of the finest mesh, following the procedure
of

    I. B. Celik, U. Ghia, P. J. Roache, C. J. Freitas, H. Coleman and
    P. E. Raad (2008), "Procedure for Estimation and Reporting of
    Uncertainty Due to Discretization in CFD Applications", Journal of
    Fluids Engineering 130(7), 078001.

Notation (Celik et al. 2008, §"the procedure"): h1 < h2 < h3 representative
cell sizes (m) of the fine, medium and coarse meshes, φ1, φ2, φ3 the
solutions (any unit), r21 = h2/h1, r32 = h3/h2, ε21 = φ2 − φ1,
ε32 = φ3 − φ2, s = sign(ε32/ε21). The apparent order p solves

    p = |ln|ε32/ε21| + q(p)| / ln r21,   q(p) = ln((r21^p − s)/(r32^p − s))

(fixed-point iteration; q = 0 when r21 = r32). Then

    φ_ext = (r21^p φ1 − φ2)/(r21^p − 1)          extrapolated value
    e_a   = |(φ1 − φ2)/φ1|                        approximate relative error
    e_ext = |(φ_ext − φ1)/φ_ext|                  extrapolated relative error
    GCI_fine = 1.25 e_a / (r21^p − 1)             fine-mesh convergence index

Validity: all three solutions in the asymptotic range; s < 0 (oscillatory
convergence) is reported as such and then p, φ_ext and the GCI are only
indicative. Representative cell size (Celik et al. 2008, eq. 1):
h = (V/N)^(1/3) with V the flow domain's volume and N the mesh's cell count
(:func:`representative_cell_size`); on geometrically similar meshes it
follows the common refinement factor.
"""
from __future__ import annotations

import math
from dataclasses import dataclass


def representative_cell_size(volume: float, cells: int) -> float:
    """h = (V/N)^(1/3) (m): ``volume`` V of the flow domain (m³), ``cells``
    N the mesh's cell count (Celik et al. 2008, eq. 1). Valid for any
    three-dimensional mesh; it is a mean cell size, so it compares meshes of
    one family (similar refinement) and not meshes built differently."""
    if not volume > 0 or not cells > 0:
        raise ValueError(f"expected a positive volume and cell count, got {volume}, {cells}")
    return float((float(volume) / float(cells)) ** (1.0 / 3.0))


@dataclass(frozen=True)
class GridConvergence:
    """Result of :func:`grid_convergence` (units of φ as given; h in m).

    ``order`` the apparent order p; ``extrapolated`` φ_ext; ``e_a`` and
    ``e_ext`` relative errors (fractions); ``gci_fine`` the fine-mesh GCI
    (fraction of φ1); ``oscillatory`` True when ε32/ε21 < 0; ``converged``
    False when the three values are not monotonic or p could not be found
    (then the numbers are not to be trusted); ``note`` says why.
    """

    phi: tuple[float, float, float]
    h: tuple[float, float, float]
    order: float
    extrapolated: float
    e_a: float
    e_ext: float
    gci_fine: float
    oscillatory: bool
    converged: bool
    note: str = ""

    def to_dict(self) -> dict:
        return dict(self.__dict__, phi=list(self.phi), h=list(self.h))


def grid_convergence(phi_fine: float, phi_medium: float, phi_coarse: float,
                     h_fine: float, h_medium: float, h_coarse: float,
                     max_iter: int = 200, tol: float = 1e-12) -> GridConvergence:
    """Celik et al. (2008) three-mesh procedure; see the module docstring.

    Parameters: the solution φ on the fine, medium and coarse meshes (any
    unit) and their representative cell sizes h (m), h_fine < h_medium <
    h_coarse. Returns a :class:`GridConvergence`; never raises for a
    non-converging set (it says so in ``converged``/``note``), raises
    ValueError for cell sizes out of order.
    """
    f1, f2, f3 = float(phi_fine), float(phi_medium), float(phi_coarse)
    h1, h2, h3 = float(h_fine), float(h_medium), float(h_coarse)
    if not (0 < h1 < h2 < h3):
        raise ValueError(f"expected cell sizes 0 < h_fine < h_medium < h_coarse, got {h1}, {h2}, {h3}")
    r21, r32 = h2 / h1, h3 / h2
    e21, e32 = f2 - f1, f3 - f2
    nan = float("nan")
    if e21 == 0.0 or e32 == 0.0:
        same = e21 == 0.0 and e32 == 0.0
        return GridConvergence((f1, f2, f3), (h1, h2, h3), nan, f1 if same else nan, 0.0 if e21 == 0 else nan,
                               nan, 0.0 if same else nan, False, same,
                               "identical values: mesh-independent at this precision" if same
                               else "one difference is zero: the order is undefined")
    ratio = e32 / e21
    s = 1.0 if ratio > 0 else -1.0
    p = abs(math.log(abs(ratio))) / math.log(r21)
    ok = True
    for _ in range(max_iter):
        a, b = r21**p - s, r32**p - s
        if a <= 0 or b <= 0:
            ok = False
            break
        q = math.log(a / b)
        p_new = abs(math.log(abs(ratio)) + q) / math.log(r21)
        if abs(p_new - p) < tol * max(1.0, p):
            p = p_new
            break
        p = p_new
    else:
        ok = False
    note = ""
    if s < 0:
        note = "oscillatory convergence (ε32/ε21 < 0): order and GCI only indicative"
    if not ok or p <= 0 or not math.isfinite(p):
        return GridConvergence((f1, f2, f3), (h1, h2, h3), nan, nan, abs(e21 / f1) if f1 else nan, nan, nan,
                               s < 0, False, note or "the apparent order did not converge")
    rp = r21**p
    ext = (rp * f1 - f2) / (rp - 1.0)
    e_a = abs((f1 - f2) / f1) if f1 != 0 else nan
    e_ext = abs((ext - f1) / ext) if ext != 0 else nan
    gci = 1.25 * e_a / (rp - 1.0)
    return GridConvergence((f1, f2, f3), (h1, h2, h3), float(p), float(ext), float(e_a), float(e_ext), float(gci),
                           s < 0, s > 0, note)
