"""Command line of postproc (the only postproc module that touches click,
prints, or chooses exit codes).

Exit codes: 0 success, 2 user error (the message says what to fix), 1 a bug.
"""
from __future__ import annotations

import sys

import click

from caseprep.cli import FriendlyGroup

from . import __version__
from .caseforces import forces_report


@click.group(cls=FriendlyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="postproc")
def main() -> None:
    """Post-process ground-effect vehicle cases: forces, coefficients, aero
    balance, centre of pressure, vortices, diffuser recovery, aero maps and
    reports — headless.

    Axes: x rearward, y right, z up (body frame); see the README.
    """




# --------------------------------------------------------------------------- forces

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

    r = forces_report(target, tuple(patches), rho, kinematic, normals.replace("-", "_"), shear_on, p_ref,
                   tuple(about) if about else None, pressure_field, shear_field, no_shear, allow_nonfinite,
                   allow_open, area, length, speed, None, front_axle or None, rear_axle or None, cog or None, window)
    click.echo(json.dumps(r, indent=2) if as_json else _table(r))


# --------------------------------------------------------------------------- sweep

@main.command("sweep")
@click.argument("sweep_dir", type=click.Path(file_okay=False))
@click.option("-o", "--out", "out_dir", type=click.Path(file_okay=False),
              help="Where to write results.csv, results.json, report.html and results/ (default: the sweep folder).")
@click.option("--title", help="Report title (default from the study name).")
@click.option("--force", is_flag=True, help="Replace earlier results in the output folder.")
@click.option("-q", "--quiet", is_flag=True, help="No per-case progress lines.")
def sweep_cmd(sweep_dir: str, out_dir: str | None, title: str | None, force: bool, quiet: bool) -> None:
    """Post-process every case of SWEEP_DIR (written by `caseprep write`, run
    by `caseprep run`): forces, coefficients, aero balance, convergence and
    the runner's flags → results table, variant ranking and an HTML report.

    Flagged cases (mesh failed, layers collapsed, not converged, not run…)
    are listed and never ranked.
    """
    from .sweep import postprocess_sweep

    def progress(i, n, o):
        if quiet:
            return
        r = o.result
        what = (f"C_L {r.cl:+.4f}  C_D {r.cd:.4f}" if r.cl == r.cl else "no coefficients")
        click.echo(f"[{i}/{n}] {r.case_id}: {o.status}; {what}" + (f"; flags: {', '.join(r.flags)}" if r.flags else ""))

    outcomes, paths = postprocess_sweep(sweep_dir, out_dir, title=title, progress=progress, force=force)
    n_flag = sum(bool(o.result.flags) for o in outcomes)
    click.echo(f"{len(outcomes)} case(s), {n_flag} flagged (not ranked).")
    click.echo(f"results: {paths['csv']}, {paths['json']}; report: {paths['report']}")
    click.echo("Caution: CFD is an approximation — validate by physical test; run vehicles only where permitted "
               "and safe; defer to local rules and qualified engineers.")


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
