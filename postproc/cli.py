"""Command line of postproc (the only postproc module that touches click,
prints, or chooses exit codes).

Exit codes: 0 success, 2 user error (the message says what to fix), 1 a bug.
"""
from __future__ import annotations

import sys

import click

from caseprep.contract.cli_common import FriendlyGroup
from caseprep.contract.cli_progress import ProgressDisplay

from caseprep.contract import __version__
from postproc.pipelines.case_forces import ForcesOptions, forces_report


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
    cc = r.get("convergence")
    if cc:
        worst = ", ".join(f"{k} {s['mean']:.4f} ± {s['std']:.4f} (drift {s['drift']:+.4f}, tol {s['tolerance']:g})"
                          for k, s in cc["series"].items() if s["verdict"] != "converged")
        lines.append(f"convergence of the runtime monitor in coefficient counts (last {cc['window']} samples, "
                     f"window means ± std): {cc['verdict']}" + (f": {worst}" if worst else ""))
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
@click.option("--window", type=int, default=None,
              help="Monitor samples for the convergence verdict (default: the last 30 % of the run, at least 20, "
                   "as the runner judges it).")
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

    opts = ForcesOptions(patches=tuple(patches), rho=rho, kinematic=kinematic, normals=normals.replace("-", "_"),
                         shear_on=shear_on, p_ref=p_ref, about=tuple(about) if about else None,
                         pressure_field=pressure_field, shear_field=shear_field, no_shear=no_shear,
                         allow_nonfinite=allow_nonfinite, allow_open=allow_open, area=area, length=length, speed=speed,
                         front_axle=front_axle or None, rear_axle=rear_axle or None, cog=cog or None, window=window)
    r = forces_report(target, opts).to_dict()
    click.echo(json.dumps(r, indent=2) if as_json else _table(r))


# --------------------------------------------------------------------------- sweep

CAUTION = ("Caution: CFD is an approximation — validate by physical test; run vehicles only where permitted "
           "and safe; defer to local rules and qualified engineers.")


def _case_line(ev) -> str:
    """One line for a case done (``postproc.pipelines.sweep.CaseProgress``)."""
    o = ev.outcome
    r = o.result
    what = f"C_L {r.cl:+.4f}  C_D {r.cd:.4f}" if r.cl == r.cl else "no coefficients"
    return (f"{r.case_id}: {o.status}; {what}" + (f"; flags: {', '.join(r.flags)}" if r.flags else "")
            + ("  (reused: inputs unchanged)" if ev.reused else ""))


@main.command("sweep")
@click.argument("sweep_dir", type=click.Path(file_okay=False))
@click.option("-o", "--out", "out_dir", type=click.Path(file_okay=False),
              help="Where to write results.csv, results.json, report.html, results/ and shards/ "
                   "(default: the sweep folder).")
@click.option("-j", "--jobs", type=click.IntRange(min=1), default=1, show_default=True,
              help="Worker processes: cases post-processed at the same time.")
@click.option("--shard", "shard", metavar="I/N",
              help="Process only shard I of N (cases at manifest positions k with k mod N = I-1) and write their "
                   "per-case results, no tables; then `postproc merge`.")
@click.option("--recompute", is_flag=True, help="Recompute every case even when its stored result is reusable.")
@click.option("--title", help="Report title (default from the study name).")
@click.option("--baseline", help="Variant the pressure-difference pictures compare against (default: the first).")
@click.option("--picture-ride-height", type=float,
              help="Front ride height (m) of the pictured point (default: the sweep's median).")
@click.option("--picture-yaw", type=float, help="Yaw (deg) of the pictured point (default: the smallest |yaw|).")
@click.option("--no-pictures", is_flag=True, help="No flow pictures (very large sweeps; flow numbers still computed).")
@click.option("--force", is_flag=True, help="Replace earlier tables (results.csv/json, report) in the output folder.")
@click.option("-q", "--quiet", is_flag=True, help="No per-case progress lines.")
@click.option("-c", "--config", "config", type=click.Path(dir_okay=False),
              help="Analysis settings for analysis.json (default: ANALYSIS.toml in the sweep folder, else the "
                   "sweep config's [analysis] table, else built-in defaults).")
def sweep_cmd(sweep_dir: str, out_dir: str | None, jobs: int, shard: str | None, recompute: bool,
              title: str | None, baseline: str | None, picture_ride_height: float | None,
              picture_yaw: float | None, no_pictures: bool, force: bool, quiet: bool,
              config: str | None) -> None:
    """Post-process every case of SWEEP_DIR (written by `caseprep write`, run
    by `caseprep run`): forces, coefficients, aero balance, convergence, the
    runner's flags and each case's flow numbers → results table, variant
    ranking, analysis.json (as `postproc analyse`) and a self-contained HTML
    report with flow pictures and plots.

    Each case's result is stored in results/<case>.json and reused while the
    case's inputs are unchanged (manifest entry; size and modification time
    of its run record, VTK export and monitor files), so a rerun after a
    crash, a stop or new cases only does the new work. Flagged cases (mesh
    failed, layers collapsed, not converged, not run…) are listed and never
    ranked. Exit code 0, 2 for a usage error, 143/130 when stopped by
    SIGTERM/SIGINT (run again to resume).
    """
    import time

    from caseprep.contract.signals import StopRequested
    from postproc.pipelines.report_data import ReportOptions
    from postproc.pipelines.shards import ALL, parse_shard
    from postproc.pipelines.sweep import SweepOptions, postprocess_shard, postprocess_sweep

    sh = parse_shard(shard)
    ropts = ReportOptions(title=title, baseline=baseline, reference_ride_height=picture_ride_height,
                          reference_yaw_deg=picture_yaw, pictures=not no_pictures)
    opts = SweepOptions(out_dir=out_dir, force=force, jobs=jobs, shard=sh, recompute=recompute,
                        report=ropts, analysis_config=config)
    shown: list[ProgressDisplay] = []

    def progress(ev) -> None:  # a bar on a terminal, else one line per case with the time left
        if not shown:  # the run began ev.elapsed s before its first case finished
            shown.append(ProgressDisplay(ev.total, start=time.monotonic() - ev.elapsed))
        if quiet:
            shown[0].meter.finish(not ev.reused)
            shown[0].draw()
        else:
            shown[0].item_done(f"[{ev.done}/{ev.total}] " + _case_line(ev), worked=not ev.reused)

    try:
        if sh != ALL:
            run = postprocess_shard(sweep_dir, opts, progress=progress)
            for d in shown:
                d.close()
            click.echo(f"shard {sh}: {len(run.outcomes)} case(s), {len(run.computed)} computed, "
                       f"{len(run.reused)} reused; state {run.state_file}. Assemble the tables with "
                       f"`postproc merge {sweep_dir}" + (f" -o {out_dir}" if out_dir else "") + "`.")
            return
        analysis = postprocess_sweep(sweep_dir, opts, progress=progress, render=_write_report)
        for d in shown:
            d.close()
    except StopRequested as exc:
        for d in shown:
            d.close()
        click.echo(f"stopped by {exc}: finished cases are stored, the others recorded interrupted; no tables "
                   "written. Run the same command again to resume.", err=True)
        sys.exit(exc.exit_code)
    _tables_written(analysis)


def _write_report(analysis, path):
    from postproc.report import write_report

    return write_report(analysis, path)


def _tables_written(analysis) -> None:
    outcomes, paths = analysis.outcomes, analysis.paths
    if analysis.up_to_date:
        click.echo(f"{len(outcomes)} case(s): nothing changed since the tables and the report were written; "
                   f"left as they are: {paths['csv']}, {paths['json']}, {paths['report']}")
        click.echo(CAUTION)
        return
    n_flag = sum(bool(o.result.flags) for o in outcomes)
    size = paths["report"].stat().st_size if paths["report"].is_file() else 0
    click.echo(f"{len(outcomes)} case(s), {n_flag} flagged (not ranked).")
    click.echo(f"results: {paths['csv']}, {paths['json']}; report: {paths['report']} ({size / 1e6:.2f} MB)")
    if analysis.analysis is not None:
        dec = analysis.analysis["ranking"]["decision"]
        click.echo(f"analysis: {paths['analysis']} (decision: {dec['status']}: {dec['message']})")
    for n in analysis.notes:
        if n.startswith("analysis.json not written"):
            click.echo(n)
    click.echo(CAUTION)


@main.command("merge")
@click.argument("sweep_dir", type=click.Path(file_okay=False))
@click.option("-o", "--out", "out_dir", type=click.Path(file_okay=False),
              help="The output folder the shards wrote into (default: the sweep folder).")
@click.option("--shards", "n_shards", type=click.IntRange(min=1),
              help="Number of shards the cases were split into (names the missing ones; default from shards/).")
@click.option("--title", help="Report title (default from the study name).")
@click.option("--force", is_flag=True, help="Replace earlier tables (results.csv/json, report).")
@click.option("--wait", type=click.FloatRange(min=0.0), default=300.0, show_default=True,
              help="Seconds to wait for another merge of the same folder before giving up.")
def merge_cmd(sweep_dir: str, out_dir: str | None, n_shards: int | None, title: str | None, force: bool,
              wait: float) -> None:
    """Assemble results.csv, results.json and the report of SWEEP_DIR from
    the per-case results its shards wrote (`postproc sweep --shard I/N`).

    Computes nothing per case: a case without a usable result is listed,
    flagged results-missing and its shard named; everything else is
    written. Exit code 0, 1 when cases are missing (tables still written),
    2 for a usage error.
    """
    from postproc.pipelines.report_data import ReportOptions
    from postproc.pipelines.sweep import SweepOptions, merge_results

    opts = SweepOptions(out_dir=out_dir, force=force, wait=wait, expected_shards=n_shards,
                        report=ReportOptions(title=title))
    analysis, gap = merge_results(sweep_dir, opts, render=_write_report)
    _tables_written(analysis)
    if gap is not None:
        click.echo(f"incomplete: {gap.message()}. Rerun those shards (`postproc sweep {sweep_dir} --shard I/N`), "
                   "then merge again with --force.", err=True)
        sys.exit(1)


# --------------------------------------------------------------------------- analyse

def _print_analysis(d: dict, path) -> None:
    def f(x, nd=4):
        return "—" if x is None else f"{x:.{nd}g}"
    r = d["ranking"]
    dec = r["decision"]
    click.echo(f"source: {d['source']['path']} ({d['source']['rows']} rows, {d['source']['usable_rows']} usable); "
               f"basis: {r['basis']}; {len(r['common_points'])} of {len(r['envelope'])} points common to all variants")
    click.echo(f"decision: {dec['status']}: {dec['message']}")
    for v in r["variants"]:
        click.echo(f"  {v['rank'] or '-'}. {v['variant']}: score {f(v['score'], 3)} ± {f(v['score_uncertainty'], 2)}"
                   f"{'' if v['complete'] else '  INCOMPLETE'}{'' if v['eligible'] else '  violates a constraint'}"
                   + (f"  tie with {', '.join(v['tie_with'])}" if v["tie_with"] else ""))
    for m in d["maps"]:
        c = m["coefficients"]["cl"]
        click.echo(f"map {m['variant']} yaw {m['yaw_deg']:g} {m['speed']:g} m/s level {m['mesh_level']}: "
                   + (f"{c['model']}, LOO RMS {f(c['loo_rms'], 2)}" if c["status"] == "ok" else f"refused: {c['reason']}"))
    for p in d["peaks"]:
        if p["design_line"] or p["stall"]:
            click.echo(f"peak {p['variant']} yaw {p['yaw_deg']:g} rake {1000 * p['rake']:.1f} mm: stall {p['stall']}, bracketed "
                       f"{p['peak_bracketed']}, peak at {f(None if p['peak_h'] is None else 1000 * p['peak_h'], 3)} mm"
                       + (f", design margin {1000 * p['margin']:+.1f} mm ({p['margin_bound']})" if p["margin"] is not None else ""))
    for p in d["platform"]:
        click.echo(f"platform {p['variant']}: " + (f"bottoming {f(p['bottoming_speed'], 3)} m/s ({p['bottoming_mode']}), "
                   f"stall crossing {p['stall_crossing']}" if p["status"] == "ok" else f"refused: {p['reason']}"))
    for n in d["notes"]:
        click.echo(f"note: {n}")
    click.echo(f"written: {path}")
    click.echo("Caution: " + d["caution"])


@main.command("analyse")
@click.argument("source", type=click.Path())
@click.option("-c", "--config", "config", type=click.Path(dir_okay=False),
              help="Analysis settings (ANALYSIS.toml, or a sweep config with an [analysis] table). "
                   "Default: ANALYSIS.toml beside SOURCE, else built-in defaults.")
@click.option("-o", "--out", "out_dir", type=click.Path(file_okay=False),
              help="Folder for analysis.json (default: the sweep folder, or the CSV's folder).")
@click.option("--json", "as_json", is_flag=True, help="Print analysis.json to stdout instead of the summary.")
@click.option("--force", is_flag=True, help="Replace an existing analysis.json.")
def analyse_cmd(source, config, out_dir, as_json, force) -> None:
    """Aero maps with error bars, peak and stall, the platform under load and
    an honest ranking from SOURCE: a sweep folder (after `postproc sweep`)
    or a results CSV (columns in the README). Writes analysis.json."""
    import json

    from .pipelines.analysis import run_analysis

    data, path = run_analysis(source, config, out_dir, force)
    if as_json:
        click.echo(json.dumps(data, indent=2))
    else:
        _print_analysis(data, path)


# ---------------------------------------------------------------------------
# flow structures: vortices, diffuser, underbody, walls (postproc.pipelines.case_flow)
# ---------------------------------------------------------------------------

def _floats(text: str | None, option: str, n: int | None = None) -> list[float] | None:
    from caseprep.contract.errors import UserError

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


def _emit(payload: dict, as_json: bool, output: str | None, force: bool, summary) -> None:
    import json
    from pathlib import Path

    from caseprep.contract.errors import UserError
    from caseprep.contract.atomicio import write_json_atomic

    from caseprep.contract.atomicio import json_ready

    data = json_ready(payload)
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
    from postproc.io.flow import read_flow

    return read_flow(path)


def _analysis_payload(kind: str, source: str, kw: dict) -> dict:
    """Read SOURCE and run the flow analysis ``kind`` on it; the JSON-ready
    payload the command prints. Runs in a child process (:func:`_analysed`)."""
    from postproc.pipelines import case_flow as cf

    case = _load(source)
    head = {"source": str(case.source), "case_id": case.record.case_id if case.record else None}
    if kind == "flow":
        return cf.flow_payload(case, **kw)[0]
    if kind == "vortices":
        kw = dict(kw)
        q_kind, h = cf.q_normalisation(case, kw.pop("q_scale"), kw.pop("gap"))
        q_star = kw.pop("q_star")
        res = cf.analyse_vortices(case, q_star=q_star if q_star is not None else cf.Q_STAR_DEFAULTS[q_kind],
                                  q_length=h, **kw)
        return {**head, **res.to_dict()}
    if kind == "diffuser":
        return {**head, **cf.analyse_diffuser(case, **kw).to_dict()}
    if kind == "underbody":
        return {**head, **cf.analyse_underbody(case, **kw)}
    return {**head, **cf.analyse_walls(case, **kw)}


def _analysed(kind: str, source: str, **kw) -> dict:
    """:func:`_analysis_payload` in a child process, so that a result file
    that crashes the VTK reader ends with a message (exit code 2), not an
    abort; the analysis may use the machine's memory and up to
    MAX_ANALYSIS_SECONDS."""
    from caseprep.contract.limits import MAX_ANALYSIS_SECONDS
    from postproc.io.isolation import isolated, physical_memory

    return isolated(_analysis_payload, kind, source, kw, what=str(source), memory=physical_memory(),
                    timeout=float(MAX_ANALYSIS_SECONDS.value))


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
@click.option("--threshold", "q_star", type=float,
              help="Core threshold on Q/(V/l)^2 (default 0.01 with the gap scale, 100 with the reference length).")
@click.option("--q-scale", type=click.Choice(["auto", "gap", "length"]), default="auto", show_default=True,
              help="Length l normalising Q: the ride height (gap; 'auto' when the manifest gives it) or the "
                   "reference length L.")
@click.option("--gap", type=float, help="Gap scale h (m) when there is no sweep manifest.")
@click.option("--speed", type=float, help="Reference speed V (m/s) when there is no sweep manifest.")
@click.option("--length", type=float, help="Reference length L (m) when there is no sweep manifest.")
@click.option("--max-jump", type=float, help="Largest core displacement (m) between stations when linking tracks (default: two station spacings).")
@click.option("--velocity", default="U", show_default=True, help="Name of the cell velocity array.")
@click.option("--no-regions", is_flag=True, help="Skip the connected 3D Q-regions.")
@_with_common
def vortices_cmd(source, stations, q_star, q_scale, gap, speed, length, max_jump, velocity, no_regions, as_json,
                 output, force):
    """Vortex cores on cross-stream stations (Q-criterion), tracks and 3D Q-regions.

    SOURCE: a case folder, VTK/<case>_<time>.vtm or an internal .vtu. Per core:
    centre [x, y, z] (m), sense (+1/-1 about +x), circulation (m^2/s),
    radius (m), peak_q (1/s^2), axial velocity excess.
    """
    payload = _analysed("vortices", source, q_scale=q_scale, gap=gap, q_star=q_star,
                        stations=_floats(stations, "--stations"), speed=speed, length=length, max_jump=max_jump,
                        regions=not no_regions, velocity=velocity)
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
    yr = _floats(y_range, "--y-range", 2)
    payload = _analysed("diffuser", source, throat=throat, exit=exit_, y_range=tuple(yr) if yr else None, rho=rho,
                        pressure=pressure, velocity=velocity, use_floor=not whole_section)
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
    payload = _analysed("underbody", source, lines=_floats(lines, "--lines"), speed=speed, pressure=pressure)
    _emit(payload, as_json, output, force, _print_underbody)


def _yplus_target(treatment: str, yplus_range: str | None) -> tuple[float, float]:
    from caseprep.contract.walls import WALL_TREATMENTS

    if yplus_range:
        lo, hi = _floats(yplus_range, "--yplus-range", 2)
        return (lo, hi)
    return WALL_TREATMENTS[treatment].band


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
@click.option("--treatment", type=click.Choice(["wall-function", "low-re", "laminar"]),
              default="wall-function", show_default=True,
              help="Intended wall treatment (its y+ band: wall-function 30-150, low-re and laminar 0-5).")
@click.option("--yplus-range", help="Explicit intended y+ range lo,hi (overrides --treatment).")
@click.option("--nu", type=float, help="Kinematic viscosity (m^2/s) when there is no sweep manifest.")
@click.option("--speed", type=float, help="Reference speed V (m/s) when there is no sweep manifest.")
@click.option("--lines", default="0", show_default=True, help="Spanwise positions y (m) of the floor shear lines.")
@_with_common
def walls_cmd(source, treatment, yplus_range, nu, speed, lines, as_json, output, force):
    """Wall checks: y+ per patch, floor wall-shear reversals (separation lines), suspicious cell values."""
    payload = _analysed("walls", source, target=_yplus_target(treatment, yplus_range), nu=nu, speed=speed,
                        floor_lines=_floats(lines, "--lines"))
    _emit(payload, as_json, output, force, _print_walls)


@main.command("flow")
@click.argument("source", type=click.Path())
@click.option("--threshold", "q_star", type=float,
              help="Core threshold on Q/(V/l)^2 (default 0.01 with the gap scale, 100 with the reference length).")
@click.option("--q-scale", type=click.Choice(["auto", "gap", "length"]), default="auto", show_default=True,
              help="Length l normalising Q: the ride height (gap; 'auto' when the manifest gives it) or the "
                   "reference length.")
@click.option("--gap", type=float, help="Gap scale h (m) when there is no sweep manifest.")
@click.option("--treatment", type=click.Choice(["wall-function", "low-re", "laminar"]),
              default="wall-function", show_default=True,
              help="Intended wall treatment (its y+ band: wall-function 30-150, low-re and laminar 0-5).")
@_with_common
def flow_cmd(source, q_star, q_scale, gap, treatment, as_json, output, force):
    """All flow-structure results of one case in one JSON: vortices, diffuser
    (stations found from the floor), underbody Cp and wall checks — the same
    numbers `postproc sweep` puts in its flow columns. A part that cannot be
    computed is reported with its reason instead."""
    payload = _analysed("flow", source, q_star=q_star, q_scale=q_scale, gap=gap, target=_yplus_target(treatment, None))
    parts = ("vortices", "diffuser", "underbody", "walls")

    def summary(d):
        for name in parts:
            part = d[name]
            click.echo(f"{name}: " + ("error: " + part["error"].splitlines()[0] if "error" in part else "ok"))

    _emit(payload, as_json, output, force, summary)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
