"""One case or surface file → its forces report (loads, coefficients,
balance, convergence) as a frozen :class:`ForcesReport`.

Glue between the readers (I/O), the force kernel, the coefficient and balance
reductions and the one convergence rule; used by the ``postproc forces``
command and by the sweep post-processing. What to read and how is one
:class:`ForcesOptions`. Loads are in the case's mesh frame (the body frame:
x rearward, y right, z up), N and N·m; coefficients as in
:mod:`postproc.kernels.coefficients`.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from caseprep.contract.convergence import DEFAULT_OPTIONS, ConvergenceOptions, judge_monitor
from caseprep.contract.monitor import case_monitor
from caseprep.contract.errors import UserError
from caseprep.contract.frames import axes_rotations, axle_axes
from caseprep.contract.manifest import CaseRecord, find_case_manifest
from postproc.io.exports import latest_export
from postproc.io.surfaces import SurfaceMesh, read_surface
from postproc.kernels import coefficients as co
from postproc.kernels.forces import ForceResult, ForceSettings, integrate_forces

Vec3 = tuple[float, float, float]


@dataclass(frozen=True)
class ForcesOptions:
    """How to read and reduce a surface (the options of ``postproc forces``).

    ``patches``: names or globs of the body patches (default: the manifest's
    body and wheel patches, or every part of a file). ``rho`` kg/m³ (default
    the manifest's); ``kinematic``: pressure and shear stored as p/ρ (m²/s²);
    ``normals``: ``into_body`` or ``out_of_body``; ``shear_on``: ``fluid`` or
    ``wall``; ``p_ref`` Pa subtracted (default the manifest's, else 0);
    ``about``: moment point, m, body frame (default the manifest's, else the
    origin); field names; ``no_shear``: pressure only; ``allow_nonfinite``
    and ``allow_open`` accept what is otherwise refused. Reference values
    (m², m, m/s, m; points body frame, m) override the manifest's.
    ``window``: monitor samples judged (default the settling window);
    ``convergence``: the thresholds of the one convergence rule.
    """

    patches: tuple[str, ...] = ()
    rho: float | None = None
    kinematic: bool = True
    normals: str = "into_body"
    shear_on: str = "fluid"
    p_ref: float | None = None
    about: Vec3 | None = None
    pressure_field: str = "p"
    shear_field: str = "wallShearStress"
    no_shear: bool = False
    allow_nonfinite: bool = False
    allow_open: bool = False
    area: float | None = None
    length: float | None = None
    speed: float | None = None
    wheelbase: float | None = None
    front_axle: Vec3 | None = None
    rear_axle: Vec3 | None = None
    cog: Vec3 | None = None
    window: int | None = None
    convergence: ConvergenceOptions = DEFAULT_OPTIONS


@dataclass(frozen=True)
class ForcesReport:
    """The forces of one case or file: where they come from (``source``,
    ``time``, ``patches``, ``settings`` as used), the integrated loads
    (``result``, N and N·m about ``result.about``, body frame), the open
    fraction |ΣS|/Σ|S| (``closure``), and — when reference values are known —
    the ``reference`` values, ``coefficients`` and ``balance``; for a case
    folder with reference values, the verdict of its runtime force monitor in
    coefficient counts with the window means and spreads (``convergence``,
    :func:`caseprep.contract.convergence.judge_monitor`); ``notes``."""

    source: str
    time: float | None
    patches: tuple[str, ...]
    settings: dict[str, Any]
    result: ForceResult
    closure: float
    notes: tuple[str, ...] = ()
    show_parts: bool = True
    reference: co.ReferenceValues | None = None
    coefficients: co.Coefficients | None = None
    balance: co.Balance | None = None
    convergence: dict[str, Any] | None = None

    def to_dict(self) -> dict[str, Any]:
        """The JSON form (``postproc forces --json``, ``results/<case>.json``)."""
        out = {"source": self.source, "time": self.time, "patches": list(self.patches), "settings": dict(self.settings),
               **self.result.to_dict(), "closure": self.closure, "notes": list(self.notes)}
        if not self.show_parts:
            out.pop("parts", None)
        if self.reference is not None:
            rv = self.reference
            out["reference"] = {"area": rv.area, "length": rv.length, "rho": rv.rho, "speed": rv.speed, "q": rv.q,
                                "moment_point": list(rv.moment_point)}
            out["coefficients"] = self.coefficients.to_dict()
        if self.balance is not None:
            out["balance"] = self.balance.to_dict()
        if self.convergence is not None:
            out["convergence"] = self.convergence
        return out


@dataclass(frozen=True)
class _Source:
    """What a target resolves to: the VTK file, the case folder and its manifest record."""

    vtk_file: Path
    case_dir: Path | None = None
    record: CaseRecord | None = None
    patches: tuple[str, ...] = field(default=())


def _locate(target: str, patches: tuple[str, ...]) -> _Source:
    """A case folder (its newest export; the manifest's body and wheel
    patches unless ``patches`` are given) or a VTK file."""
    path = Path(target)
    if path.is_dir():
        found = find_case_manifest(path)
        record = found[1] if found else None
        vtk_file = latest_export(path)
        if not patches and record is not None:
            names = list(record.patches.get("body", [])) + list(record.patches.get("wheels", []))
            if not names:
                raise UserError(expected="body patches listed in the manifest", got="an empty list",
                                key=f"cases[{record.case_id}].patches", fix="give --patches")
            patches = tuple(names)
        src = _Source(vtk_file, path, record, patches)
    elif path.exists():
        src = _Source(path, patches=patches)
    else:
        raise UserError(expected="a VTK file or a case folder", got=str(path), fix="check the path")
    if any(not p.strip() for p in src.patches):
        raise UserError(expected="non-empty patch names or patterns", got="an empty --patches value", key="--patches")
    return src


def _integrate(surf: SurfaceMesh, opt: ForcesOptions) -> ForceResult:
    """The loads on ``surf``; refuses an open surface with a non-zero p_ref
    unless ``allow_open`` (its force would depend on p_ref)."""
    p = surf.array(opt.pressure_field)
    tau = None if opt.no_shear else surf.array(opt.shear_field)
    try:
        settings = ForceSettings(rho=opt.rho or 1.0, p_ref=opt.p_ref, about=opt.about, normals=opt.normals,
                                 shear_on=opt.shear_on, kinematic=opt.kinematic, allow_nonfinite=opt.allow_nonfinite)
        res = integrate_forces(surf.points, surf.faces, p, tau, settings, part_ids=surf.part_ids,
                               part_names=surf.part_names)
        opening = res.open_fraction
        if opt.p_ref != 0.0 and opening > 1e-9 and not opt.allow_open:
            raise UserError(
                expected="a closed surface when a non-zero reference pressure is subtracted",
                got=f"an open surface (|ΣS|/Σ|S| = {opening:.3g}) with p_ref = {opt.p_ref:g} Pa",
                key="--p-ref", fix="an open patch's force depends on p_ref; use --p-ref 0 (the solver's gauge), "
                "select the whole closed body, or accept it with --allow-open")
    except UserError as exc:
        raise UserError(f"{surf.source}: {exc}") from None
    return res


def _reference_values(ref, opt: ForcesOptions) -> co.ReferenceValues | None:
    """The manifest's reference values overridden by the options; None
    without an area, length and speed."""
    if ref is None and not (opt.area and opt.length and opt.speed):
        return None
    base = co.ReferenceValues.from_reference(ref) if ref is not None else None
    kw = dict(base.__dict__) if base is not None else {"moment_point": tuple(opt.about)}
    for k in ("area", "length", "speed", "wheelbase"):
        if getattr(opt, k) is not None:
            kw[k] = getattr(opt, k)
    for k in ("front_axle", "rear_axle", "cog"):
        if getattr(opt, k):
            kw[k] = tuple(float(x) for x in getattr(opt, k))
    if kw.get("rho") is None:
        kw["rho"] = opt.rho
    if kw.get("rho") is None:
        raise UserError(expected="a density for the dynamic pressure", got="none", key="--rho",
                        fix="give --rho (kg/m³) with --area/--length/--speed")
    return co.ReferenceValues(**kw) if "area" in kw and "length" in kw and "speed" in kw else None


def forces_report(target: str, options: ForcesOptions = ForcesOptions(),
                  surface: SurfaceMesh | None = None) -> ForcesReport:
    """Read, integrate and reduce one surface file or case folder
    (``target``) as ``options`` say; returns the :class:`ForcesReport`.
    Raises UserError on bad input.

    The runtime force monitor of a case folder is judged by the one
    convergence rule in coefficient counts
    (:func:`caseprep.contract.convergence.judge_monitor` with
    ``options.convergence`` over ``options.window`` samples, default its
    settling window), as the runner and the sweep judge it.

    ``surface``: the patches already read from ``target``'s export (with the
    pressure and shear arrays), so that a caller needing other arrays of the
    same faces reads the file once; None: read here."""
    src = _locate(target, tuple(options.patches))
    record = src.record
    ref = record.reference if record is not None else None
    opt = options
    wanted = [opt.pressure_field] + ([] if opt.no_shear else [opt.shear_field])
    if surface is not None:
        surf = surface
    else:
        surf = read_surface(src.vtk_file, list(src.patches) or None, arrays=wanted)  # only the arrays used
    rho = opt.rho if opt.rho is not None or ref is None else ref.rho
    if opt.kinematic and rho is None:
        raise UserError(expected="a density for kinematic pressure (p/ρ, m²/s²)", got="none", key="--rho",
                        fix="give --rho (kg/m³), or --static when the file holds pressure in Pa")
    p_ref = opt.p_ref if opt.p_ref is not None else (ref.p_ref if ref is not None else 0.0)
    about = opt.about if opt.about is not None else (tuple(ref.moment_point) if ref is not None else (0.0, 0.0, 0.0))
    opt = replace(opt, rho=rho, p_ref=p_ref, about=tuple(about))
    res = _integrate(surf, opt)
    notes = list(surf.notes)
    settings = {"rho": rho, "kinematic": opt.kinematic, "normals": opt.normals, "shear_on": opt.shear_on,
                "p_ref": p_ref, "pressure_field": opt.pressure_field,
                "shear_field": None if opt.no_shear else opt.shear_field,
                "frame": "body (mesh frame)" if record is not None else "file frame"}
    rv = _reference_values(ref, opt)
    coefficients = balance = None
    if rv is not None:
        placement = record.placement if record is not None else None
        wind = record.wind_direction_body if record is not None else None
        coefficients = co.coefficients(res, rv, axes_rotations(placement, wind))
        if record is not None and record.ground == "none":
            # far field: no ground, no axles on it (the manifest's axles are placeholders)
            notes.append("no ground (far field): axle loads, aero balance and centres of pressure not computed")
        elif rv.front_axle is not None and rv.rear_axle is not None:
            balance = co.balance(res, rv, axle_axes(placement))
    verdict = None
    if src.case_dir is not None and (src.case_dir / "postProcessing").is_dir():
        if rv is None:
            notes.append("convergence not assessed: the rule in coefficient counts needs reference values "
                         "(a case of a sweep, or --area, --length, --speed)")
        else:
            axle = None if (record is not None and record.ground == "none") else axle_axes(placement)
            verdict = _monitor_verdict(src.case_dir, rv, axes_rotations(placement, wind), axle, opt, notes)
    return ForcesReport(source=str(src.vtk_file), time=surf.time, patches=tuple(surf.part_names), settings=settings,
                        result=res, closure=res.open_fraction, notes=tuple(notes),
                        show_parts=record is not None or len(surf.part_names) != 1, reference=rv,
                        coefficients=coefficients, balance=balance, convergence=verdict)


def _monitor_verdict(case_dir: Path, rv: co.ReferenceValues, rotations, axle, opt: ForcesOptions,
                     notes: list[str]) -> dict[str, Any] | None:
    """The monitor's verdict in coefficient counts over the settling window
    (:func:`caseprep.contract.convergence.judge_monitor`), with its window
    means and spreads; None (and a note) when the monitor cannot be read."""
    try:
        return judge_monitor(case_monitor(case_dir), rv, rotations, axle, opt.window, opt.convergence)
    except (UserError, KeyError) as exc:
        notes.append(f"convergence not assessed: {exc}")
        return None
