"""One case or surface file → the forces report (loads, coefficients,
balance, convergence) as a JSON-ready dict.

Glue between the readers (I/O), the force kernel, the coefficient and balance
reductions and the runtime-monitor convergence check; used by the
``postproc forces`` command and by the sweep post-processing. Loads are in
the case's mesh frame (the body frame: x rearward, y right, z up), N and
N·m; coefficients as in :mod:`postproc.kernels.coefficients`.
"""
from __future__ import annotations

from caseprep.contract.convergence import DEFAULT_OPTIONS, ConvergenceOptions, assess_force_monitor
from caseprep.contract.errors import UserError


def _vec3(v) -> tuple[float, float, float] | None:
    return None if v is None or len(v) == 0 else tuple(float(x) for x in v)


def forces_report(target: str, patches: tuple[str, ...] = (), rho: float | None = None, kinematic: bool = True,
               normals: str = "into_body", shear_on: str = "fluid", p_ref: float | None = None,
               about: tuple[float, float, float] | None = None, pressure_field: str = "p",
               shear_field: str = "wallShearStress", no_shear: bool = False, allow_nonfinite: bool = False,
               allow_open: bool = False, area: float | None = None, length: float | None = None,
               speed: float | None = None, wheelbase: float | None = None, front_axle=None, rear_axle=None,
               cog=None, window: int | None = None, convergence: ConvergenceOptions = DEFAULT_OPTIONS,
               surface=None) -> dict:
    """Read, integrate and reduce one surface or case; returns the JSON-ready
    report (see ``postproc forces --help``). Raises UserError on bad input.

    The runtime force monitor is judged by the one convergence rule
    (:func:`caseprep.contract.convergence.assess_force_monitor` with
    ``convergence``, over ``window`` samples, default its settling window),
    as the runner and the sweep judge it. ``surface``: the body patches
    already read from ``target``'s export (a :class:`postproc.io.surfaces.Surface`
    with the pressure and shear arrays), so that a caller needing other arrays
    of the same faces reads the file once; None: read here."""
    from pathlib import Path

    from caseprep.contract.frames import axes_rotations, axle_axes
    from caseprep.contract.manifest import find_case_manifest

    from postproc.kernels import coefficients as co
    from postproc.kernels.forces import integrate_forces
    from postproc.io.exports import latest_export
    from postproc.io.surfaces import read_surface

    path = Path(target)
    record = None
    case_dir = None
    if path.is_dir():
        case_dir = path
        found = find_case_manifest(path)
        record = found[1] if found else None
        vtk_file = latest_export(path)
        if not patches and record is not None:
            names = list(record.patches.get("body", [])) + list(record.patches.get("wheels", []))
            if not names:
                raise UserError(expected="body patches listed in the manifest", got="an empty list",
                                key=f"cases[{record.case_id}].patches", fix="give --patches")
            patches = tuple(names)
    elif path.exists():
        vtk_file = path
    else:
        raise UserError(expected="a VTK file or a case folder", got=str(path), fix="check the path")
    if patches is not None and any(not p.strip() for p in patches):
        raise UserError(expected="non-empty patch names or patterns", got="an empty --patches value", key="--patches")
    wanted = [pressure_field] + ([] if no_shear else [shear_field])
    if surface is not None:
        surf = surface
    else:
        surf = read_surface(vtk_file, list(patches) or None, arrays=wanted)  # only the arrays used
    ref = record.reference if record is not None else None
    if rho is None and ref is not None:
        rho = ref.rho
    if kinematic and rho is None:
        raise UserError(expected="a density for kinematic pressure (p/ρ, m²/s²)", got="none", key="--rho",
                        fix="give --rho (kg/m³), or --static when the file holds pressure in Pa")
    if p_ref is None:
        p_ref = ref.p_ref if ref is not None else 0.0
    if about is None:
        about = tuple(ref.moment_point) if ref is not None else (0.0, 0.0, 0.0)
    p = surf.array(pressure_field)
    tau = None if no_shear else surf.array(shear_field)
    try:
        res = integrate_forces(surf.points, surf.faces, p, tau, rho=rho or 1.0, p_ref=p_ref,
                               about=about, normals=normals, shear_on=shear_on, kinematic=kinematic,
                               part_ids=surf.part_ids, part_names=surf.part_names, allow_nonfinite=allow_nonfinite)
        opening = res.open_fraction
        if p_ref != 0.0 and opening > 1e-9 and not allow_open:
            raise UserError(
                expected="a closed surface when a non-zero reference pressure is subtracted",
                got=f"an open surface (|ΣS|/Σ|S| = {opening:.3g}) with p_ref = {p_ref:g} Pa",
                key="--p-ref", fix="an open patch's force depends on p_ref; use --p-ref 0 (the solver's gauge), "
                "select the whole closed body, or accept it with --allow-open")
    except UserError as exc:
        raise UserError(f"{surf.source}: {exc}") from None
    out = {
        "source": str(vtk_file), "time": surf.time, "patches": list(surf.part_names),
        "settings": {"rho": rho, "kinematic": kinematic, "normals": normals, "shear_on": shear_on, "p_ref": p_ref,
                     "pressure_field": pressure_field, "shear_field": None if no_shear else shear_field,
                     "frame": "body (mesh frame)" if record is not None else "file frame"},
        **res.to_dict(), "closure": opening, "notes": list(surf.notes),
    }
    if record is None and len(surf.part_names) == 1:
        out.pop("parts", None)
    # reference values: manifest, overridden by options
    rv = None
    if ref is not None or (area and length and speed):
        base = co.ReferenceValues.from_reference(ref) if ref is not None else None
        kw = dict(base.__dict__) if base is not None else {"moment_point": tuple(about)}
        for k, v in (("area", area), ("length", length), ("speed", speed), ("wheelbase", wheelbase),
                     ("front_axle", _vec3(front_axle)), ("rear_axle", _vec3(rear_axle)), ("cog", _vec3(cog))):
            if v is not None:
                kw[k] = v
        if kw.get("rho") is None:
            kw["rho"] = rho
        if kw.get("rho") is None:
            raise UserError(expected="a density for the dynamic pressure", got="none", key="--rho",
                            fix="give --rho (kg/m³) with --area/--length/--speed")
        if "area" in kw and "length" in kw and "speed" in kw:
            rv = co.ReferenceValues(**kw)
    if rv is not None:
        placement = record.placement if record is not None else None
        wind = record.wind_direction_body if record is not None else None
        out["reference"] = {"area": rv.area, "length": rv.length, "rho": rv.rho, "speed": rv.speed, "q": rv.q,
                            "moment_point": list(rv.moment_point)}
        out["coefficients"] = co.coefficients(res, rv, axes_rotations(placement, wind)).to_dict()
        if record is not None and record.ground == "none":
            # far field: no ground, no axles on it (the manifest's axles are placeholders)
            out["notes"].append("no ground (far field): axle loads, aero balance and centres of pressure not computed")
        elif rv.front_axle is not None and rv.rear_axle is not None:
            out["balance"] = co.balance(res, rv, axle_axes(placement)).to_dict()
    if case_dir is not None and (case_dir / "postProcessing").is_dir():
        try:
            out["convergence"] = assess_force_monitor(case_dir, window=window, options=convergence).to_dict()
        except UserError as exc:
            out["notes"].append(f"convergence not assessed: {exc}")
    return out
