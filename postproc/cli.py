"""Command line of postproc (the only postproc module that touches click,
prints, or chooses exit codes).

Exit codes: 0 success, 2 user error (the message says what to fix), 1 a bug.
"""
from __future__ import annotations

import sys

import click

from caseprep.cli import FriendlyGroup

from . import __version__


@click.group(cls=FriendlyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="postproc")
def main() -> None:
    """Post-process ground-effect vehicle cases: forces, coefficients, aero
    balance, centre of pressure, vortices, diffuser recovery, aero maps and
    reports — headless.

    Axes: x rearward, y right, z up (body frame); see the README.
    """


# ---------------------------------------------------------------------------
# flow structures: vortices, diffuser, underbody, walls (postproc.flowreport)
# ---------------------------------------------------------------------------

def _floats(text: str | None, option: str, n: int | None = None) -> list[float] | None:
    from caseprep.errors import UserError

    if text is None:
        return None
    try:
        vals = [float(v) for v in text.replace(";", ",").split(",") if v.strip()]
    except ValueError:
        raise UserError(expected="comma-separated numbers (m)", got=text, key=option,
                        fix=f"e.g. {option} 0.5,1.0,1.5") from None
    if not vals or (n is not None and len(vals) != n):
        raise UserError(expected=f"{n or 'one or more'} comma-separated numbers", got=text, key=option,
                        fix=f"e.g. {option} " + ",".join(["0.1"] * (n or 2)))
    return vals


def _jsonable(obj):
    import math

    import numpy as np

    if isinstance(obj, dict):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _jsonable(obj.tolist())
    if isinstance(obj, (np.floating, float)):
        f = float(obj)
        return f if math.isfinite(f) else None
    if isinstance(obj, np.integer):
        return int(obj)
    return obj


def _emit(payload: dict, as_json: bool, output: str | None, force: bool, summary) -> None:
    import json
    from pathlib import Path

    from caseprep.errors import UserError
    from caseprep.safeio import write_json_atomic

    data = _jsonable(payload)
    if output:
        out = Path(output)
        if out.exists() and not force:
            raise UserError(expected="a new output file", got=str(out), key="--output",
                            fix="pass --force to overwrite it, or choose another name")
        write_json_atomic(out, data)
    if as_json:
        click.echo(json.dumps(data, indent=2))
    else:
        summary(data)
        if output:
            click.echo(f"written: {output}")


def _load(path: str):
    from .flowio import read_flow

    return read_flow(path)


_common = [
    click.option("--json", "as_json", is_flag=True, help="Print the result as JSON."),
    click.option("-o", "--output", type=click.Path(dir_okay=False), help="Also write the JSON to this file."),
    click.option("--force", is_flag=True, help="Overwrite --output if it exists."),
]


def _with_common(f):
    for opt in reversed(_common):
        f = opt(f)
    return f


def _print_vortices(d: dict) -> None:
    click.echo(f"Q* threshold {d.get('q_star_threshold')}, Q threshold {d['q_threshold']:.4g} 1/s^2")
    for st in d["stations"]:
        click.echo(f"x = {st['x']:.4f} m: {len(st['cores'])} core(s)")
        for c in st["cores"]:
            y, z = c["centre"][1], c["centre"][2]
            click.echo(f"  y {y:+.4f} z {z:+.4f} m  sense {c['sense']:+d}  circulation {c['circulation']:+.4g} m^2/s"
                       f"  radius {c['radius']:.4f} m  peak Q {c['peak_q']:.4g} 1/s^2")
    for t in d["tracks"]:
        click.echo(f"track {t['track_id']}: sense {t['sense']:+d}, x {t['birth_x']:.4f} -> {t['end_x']:.4f} m ({t['end']})")


@main.command("vortices")
@click.argument("source", type=click.Path())
@click.option("--stations", help="Comma-separated x stations (m, body frame, x rearward). Default: every 5 % of the reference length from the nose to half a length behind the tail.")
@click.option("--threshold", "q_star", type=float, default=100.0, show_default=True,
              help="Core threshold on Q* = Q/(V/L)^2.")
@click.option("--speed", type=float, help="Reference speed V (m/s) when there is no sweep manifest.")
@click.option("--length", type=float, help="Reference length L (m) when there is no sweep manifest.")
@click.option("--max-jump", type=float, help="Largest core displacement (m) between stations when linking tracks (default: two station spacings).")
@click.option("--velocity", default="U", show_default=True, help="Name of the cell velocity array.")
@click.option("--no-regions", is_flag=True, help="Skip the connected 3D Q-regions.")
@_with_common
def vortices_cmd(source, stations, q_star, speed, length, max_jump, velocity, no_regions, as_json, output, force):
    """Vortex cores on cross-stream stations (Q-criterion), tracks and 3D Q-regions.

    SOURCE: a case folder, VTK/<case>_<time>.vtm or an internal .vtu. Per core:
    centre [x, y, z] (m), sense (+1/-1 about +x), circulation (m^2/s),
    radius (m), peak_q (1/s^2), axial velocity excess.
    """
    from .flowreport import analyse_vortices

    case = _load(source)
    res = analyse_vortices(case, stations=_floats(stations, "--stations"), q_star=q_star, speed=speed,
                           length=length, max_jump=max_jump, regions=not no_regions, velocity=velocity)
    payload = {"source": str(case.source), "case_id": case.record.case_id if case.record else None, **res.to_dict()}
    _emit(payload, as_json, output, force, _print_vortices)


def _print_diffuser(d: dict) -> None:
    click.echo(f"throat x = {d['throat_x']:.4f} m, exit x = {d['exit_x']:.4f} m, area ratio {d['area_ratio']:.4f}")
    click.echo(f"Cpr {d['cpr']:.4f} (mass-weighted {d['cpr_mass']:.4f}), ideal {d['cpr_ideal']:.4f}, "
               f"effectiveness {d['effectiveness']:.4f}")
    click.echo(f"mass flow throat {d['mass_flow'][0]:.5g} kg/s, exit {d['mass_flow'][1]:.5g} kg/s")


@main.command("diffuser")
@click.argument("source", type=click.Path())
@click.option("--throat", type=float, help="Throat station x (m, body frame). Default: found from the floor profile.")
@click.option("--exit", "exit_", type=float, help="Exit station x (m, body frame). Default: found from the floor profile.")
@click.option("--y-range", help="Spanwise limits ymin,ymax (m, body y), e.g. between the diffuser fences.")
@click.option("--rho", type=float, help="Density (kg/m^3) when there is no sweep manifest (default 1.225).")
@click.option("--whole-section", is_flag=True, help="Use the whole cross-section (no floor above): channel meshes.")
@click.option("--pressure", default="p", show_default=True, help="Name of the (kinematic) pressure array.")
@click.option("--velocity", default="U", show_default=True, help="Name of the cell velocity array.")
@_with_common
def diffuser_cmd(source, throat, exit_, y_range, rho, whole_section, pressure, velocity, as_json, output, force):
    """Diffuser pressure recovery Cpr, its ideal 1 - (A_throat/A_exit)^2, effectiveness and mass flow.

    Cross-sections between the ground and the floor (and --y-range) at the
    throat and exit stations (planes normal to body x).
    """
    from .flowreport import analyse_diffuser

    case = _load(source)
    yr = _floats(y_range, "--y-range", 2)
    res = analyse_diffuser(case, throat=throat, exit=exit_, y_range=tuple(yr) if yr else None, rho=rho,
                           pressure=pressure, velocity=velocity, use_floor=not whole_section)
    payload = {"source": str(case.source), "case_id": case.record.case_id if case.record else None, **res.to_dict()}
    _emit(payload, as_json, output, force, _print_diffuser)


def _print_underbody(d: dict) -> None:
    for ln in d["lines"]:
        if ln.get("missing"):
            click.echo(f"y = {ln['y']:+.4f} m: no body surface")
            continue
        click.echo(f"y = {ln['y']:+.4f} m: Cp min {ln['cp_min']:.4f} at x = {ln['x_cp_min']:.4f} m, "
                   f"suction integral {ln['suction_integral']:.4g} m")
    g = d.get("ground")
    if g:
        click.echo(f"ground: Cp min {g['cp_min']:.4f} at x = {g['at'][0]:.4f} m, integral {g['cp_area_integral']:.4g} m^2")


@main.command("underbody")
@click.argument("source", type=click.Path())
@click.option("--lines", default="0", show_default=True, help="Spanwise positions y (m, body frame) of the Cp lines.")
@click.option("--speed", type=float, help="Reference speed V (m/s) when there is no sweep manifest.")
@click.option("--pressure", default="p", show_default=True, help="Name of the (kinematic) pressure array.")
@_with_common
def underbody_cmd(source, lines, speed, pressure, as_json, output, force):
    """Cp along the floor (centreline and chosen lines), minimum and suction integral; ground Cp footprint."""
    from .flowreport import analyse_underbody

    case = _load(source)
    res = analyse_underbody(case, lines=_floats(lines, "--lines"), speed=speed, pressure=pressure)
    payload = {"source": str(case.source), "case_id": case.record.case_id if case.record else None, **res}
    _emit(payload, as_json, output, force, _print_underbody)


def _yplus_target(treatment: str, yplus_range: str | None) -> tuple[float, float]:
    from .wallchecks import YPLUS_RANGES

    if yplus_range:
        lo, hi = _floats(yplus_range, "--yplus-range", 2)
        return (lo, hi)
    return YPLUS_RANGES[treatment]


def _print_walls(d: dict) -> None:
    for name, s in d["yplus"].items():
        click.echo(f"{name}: y+ min {s['min']:.3g} median {s['median']:.3g} p95 {s['p95']:.3g} max {s['max']:.3g}; "
                   f"{100 * (s['share_in_target'] or 0):.1f} % of area in {s['target']}")
    for r in d["shear_reversals"]:
        for e in r["reversals"]:
            click.echo(f"{r['patch']} y = {r['y']:+.3f} m: {e['kind']} at x = {e['x']:.4f} m")
    for f in d["field_flags"]:
        if f["n_nonfinite"] or f["n_below"] or f["n_above"]:
            click.echo(f"{f['name']}: {f['n_nonfinite']} non-finite, {f['n_below']} below {f['lower']}, "
                       f"{f['n_above']} above {f['upper']} (worst at {f['worst_at']})")


@main.command("walls")
@click.argument("source", type=click.Path())
@click.option("--treatment", type=click.Choice(["wall-functions", "resolved", "resolved-relaxed"]),
              default="wall-functions", show_default=True, help="Intended wall treatment (its y+ range).")
@click.option("--yplus-range", help="Explicit intended y+ range lo,hi (overrides --treatment).")
@click.option("--nu", type=float, help="Kinematic viscosity (m^2/s) when there is no sweep manifest.")
@click.option("--speed", type=float, help="Reference speed V (m/s) when there is no sweep manifest.")
@click.option("--lines", default="0", show_default=True, help="Spanwise positions y (m) of the floor shear lines.")
@_with_common
def walls_cmd(source, treatment, yplus_range, nu, speed, lines, as_json, output, force):
    """Wall checks: y+ per patch, floor wall-shear reversals (separation lines), suspicious cell values."""
    from .flowreport import analyse_walls

    case = _load(source)
    res = analyse_walls(case, target=_yplus_target(treatment, yplus_range), nu=nu, speed=speed,
                        floor_lines=_floats(lines, "--lines"))
    payload = {"source": str(case.source), "case_id": case.record.case_id if case.record else None, **res}
    _emit(payload, as_json, output, force, _print_walls)


@main.command("flow")
@click.argument("source", type=click.Path())
@click.option("--threshold", "q_star", type=float, default=100.0, show_default=True, help="Core threshold on Q*.")
@click.option("--treatment", type=click.Choice(["wall-functions", "resolved", "resolved-relaxed"]),
              default="wall-functions", show_default=True, help="Intended wall treatment (its y+ range).")
@_with_common
def flow_cmd(source, q_star, treatment, as_json, output, force):
    """All flow-structure results of one case in one JSON: vortices, diffuser
    (stations found from the floor), underbody Cp and wall checks. A part that
    cannot be computed is reported with its reason instead."""
    from caseprep.errors import UserError

    from .flowreport import analyse_diffuser, analyse_underbody, analyse_vortices, analyse_walls

    case = _load(source)
    payload = {"source": str(case.source), "case_id": case.record.case_id if case.record else None}
    parts = {
        "vortices": lambda: analyse_vortices(case, q_star=q_star).to_dict(),
        "diffuser": lambda: analyse_diffuser(case).to_dict(),
        "underbody": lambda: analyse_underbody(case),
        "walls": lambda: analyse_walls(case, target=_yplus_target(treatment, None)),
    }
    for name, fn in parts.items():
        try:
            payload[name] = fn()
        except UserError as exc:
            payload[name] = {"error": str(exc)}

    def summary(d):
        for name in parts:
            part = d[name]
            click.echo(f"{name}: " + ("error: " + part["error"].splitlines()[0] if "error" in part else "ok"))

    _emit(payload, as_json, output, force, summary)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
