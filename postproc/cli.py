"""Command line of postproc (the only postproc module that touches click,
prints, or chooses exit codes).

Exit codes: 0 success, 2 user error (the message says what to fix), 1 a bug.
"""
from __future__ import annotations

import sys

import click

from caseprep.cli import FriendlyGroup
from caseprep.errors import UserError

from . import __version__


@click.group(cls=FriendlyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="postproc")
def main() -> None:
    """Post-process ground-effect vehicle cases: forces, coefficients, aero
    balance, centre of pressure, vortices, diffuser recovery, aero maps and
    reports — headless.

    Axes: x rearward, y right, z up (body frame); see the README.
    """




# --------------------------------------------------------------------------- forces

def _vec3(v) -> tuple[float, float, float] | None:
    return None if v is None or len(v) == 0 else tuple(float(x) for x in v)


def run_forces(target: str, patches: tuple[str, ...] = (), rho: float | None = None, kinematic: bool = True,
               normals: str = "into_body", shear_on: str = "fluid", p_ref: float | None = None,
               about: tuple[float, float, float] | None = None, pressure_field: str = "p",
               shear_field: str = "wallShearStress", no_shear: bool = False, allow_nonfinite: bool = False,
               allow_open: bool = False, area: float | None = None, length: float | None = None,
               speed: float | None = None, wheelbase: float | None = None, front_axle=None, rear_axle=None,
               cog=None, window: int = 200) -> dict:
    """Read, integrate and reduce one surface or case; returns the JSON-ready
    report (see ``postproc forces --help``). Raises UserError on bad input."""
    from pathlib import Path

    import numpy as np

    from caseprep.manifest import find_case_manifest

    from . import coefficients as co
    from . import convergence as cv
    from .forces import integrate_forces
    from .readers import latest_export, read_surface

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
        out["coefficients"] = co.coefficients(res, rv, placement, wind).to_dict()
        if rv.front_axle is not None and rv.rear_axle is not None:
            out["balance"] = co.balance(res, rv, placement).to_dict()
    if case_dir is not None and (case_dir / "postProcessing").is_dir():
        try:
            mon = cv.read_monitor(case_dir)
            series = {k: v for k, v in mon.items() if k.startswith("force.total_")}
            if series:
                scale = max(float(np.linalg.norm([v[-1] for v in series.values()])), 1e-300)
                out["convergence"] = cv.assess(series, window=window, floor=0.01 * scale).to_dict()
        except UserError as exc:
            out["notes"].append(f"convergence not assessed: {exc}")
    return out


def _fmt_vec(v) -> str:
    return "  ".join(f"{x:>13.6g}" for x in v)


def _table(r: dict) -> str:
    lines = [f"source : {r['source']}" + (f"  (time {r['time']:g})" if r.get("time") is not None else ""),
             f"patches: {', '.join(r['patches'])}",
             f"axes   : {r['settings']['frame']}: x rearward, y right, z up; moments about "
             f"({', '.join(f'{x:g}' for x in r['about'])}) m",
             f"area   : {r['area']:.6g} m²   faces: {r['n_faces']}   open fraction |ΣS|/Σ|S|: {r['closure']:.3g}",
             "", f"{'':18}{'x':>13}  {'y':>13}  {'z':>13}"]
    for k, label in (("force", "force N"), ("force_pressure", "  pressure N"), ("force_viscous", "  viscous N"),
                     ("moment", "moment N·m"), ("moment_pressure", "  pressure N·m"), ("moment_viscous", "  viscous N·m")):
        lines.append(f"{label:18}{_fmt_vec(r[k])}")
    for name, pr in (r.get("parts") or {}).items():
        lines.append(f"{'part ' + name:18}{_fmt_vec(pr['force'])}   (force N)")
    c = r.get("coefficients")
    if c:
        lines += ["", f"coefficients (q = {c['q']:.6g} Pa, A = {c['area']:g} m², L = {c['length']:g} m), wind axes:",
                  f"  drag {c['drag']:.5f}  side {c['side']:.5f}  lift {c['lift']:.5f}  downforce {c['downforce']:.5f}",
                  f"  rolling {c['rolling']:.5f}  pitching {c['pitching']:.5f}  yawing {c['yawing']:.5f}"]
    b = r.get("balance")
    if b:
        def f(v, fmt):
            return "undefined" if v is None else format(v, fmt)
        lines += [f"axle loads: front lift {b['lift_front']:.6g} N (C_LF {b['c_lift_front']:.5f}), "
                  f"rear lift {b['lift_rear']:.6g} N (C_LR {b['c_lift_rear']:.5f})",
                  f"aero balance (front share of downforce): {f(b['balance_front'], '.4f')}; centre of pressure "
                  f"{f(b['cp_x'], '.4g')} m behind the front axle",
                  f"side-force centre of pressure: {f(b['side_cp_x'], '.4g')} m behind the front axle; "
                  f"stability margin {f(b['stability_margin'], '.4f')} (positive = stabilising)"]
    cv = r.get("convergence")
    if cv:
        lines.append(f"convergence of the runtime monitor (last {cv['window']} samples): {cv['verdict']}")
    for n in r.get("notes", []) + ((b or {}).get("notes", []) if b else []):
        lines.append(f"note: {n}")
    return "\n".join(lines)


@main.command("forces")
@click.argument("target", metavar="FILE_OR_CASE")
@click.option("--patches", multiple=True, help="Body patches: names or globs ('body*', 'wheel_*'); repeat or comma-separate.")
@click.option("--rho", type=float, help="Density ρ, kg/m³ (default: the manifest's).")
@click.option("--kinematic/--static", default=True, show_default=True,
              help="Pressure and shear in the file are p/ρ (m²/s², the solver's) or static (Pa).")
@click.option("--normals", type=click.Choice(["into-body", "out-of-body"]), default="into-body", show_default=True,
              help="Where the faces' normals point (the solver's: into the body).")
@click.option("--shear-on", type=click.Choice(["fluid", "wall"]), default="fluid", show_default=True,
              help="The stored shear acts on the fluid (the solver's wallShearStress) or on the wall.")
@click.option("--p-ref", type=float, help="Reference pressure subtracted, Pa (default: the manifest's, else 0).")
@click.option("--about", nargs=3, type=float, help="Moment point X Y Z, m, body frame (default: the manifest's, else origin).")
@click.option("--pressure-field", default="p", show_default=True)
@click.option("--shear-field", default="wallShearStress", show_default=True)
@click.option("--no-shear", is_flag=True, help="Pressure only (inviscid).")
@click.option("--allow-nonfinite", is_flag=True, help="Skip faces with NaN/inf values instead of refusing.")
@click.option("--allow-open", is_flag=True, help="Accept an open surface with a non-zero reference pressure.")
@click.option("--area", type=float, help="Reference area, m².")
@click.option("--length", type=float, help="Reference length, m.")
@click.option("--speed", type=float, help="Air speed for q, m/s.")
@click.option("--front-axle", nargs=3, type=float, help="Front axle X Y Z, m, body frame (wheelbase = distance to the rear axle).")
@click.option("--rear-axle", nargs=3, type=float, help="Rear axle X Y Z, m, body frame.")
@click.option("--cog", nargs=3, type=float, help="Centre of gravity X Y Z, m, body frame.")
@click.option("--window", type=int, default=200, show_default=True, help="Monitor samples for the convergence verdict.")
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object instead of the table.")
def forces_cmd(target, patches, rho, kinematic, normals, shear_on, p_ref, about, pressure_field, shear_field,
               no_shear, allow_nonfinite, allow_open, area, length, speed, front_axle, rear_axle, cog,
               window, as_json) -> None:
    """Forces, moments, coefficients, axle loads and aero balance of the body
    patches of FILE_OR_CASE (a .vtm/.vtp/.vtu/.vtk surface or a case folder
    with a VTK/ export; a case of a sweep takes its reference values and
    patches from the manifest). Body-frame axes: x rearward, y right, z up.
    """
    import json

    r = run_forces(target, tuple(patches), rho, kinematic, normals.replace("-", "_"), shear_on, p_ref,
                   tuple(about) if about else None, pressure_field, shear_field, no_shear, allow_nonfinite,
                   allow_open, area, length, speed, None, front_axle or None, rear_axle or None, cog or None, window)
    click.echo(json.dumps(r, indent=2) if as_json else _table(r))


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
