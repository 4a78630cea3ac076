"""The hostile corpus: bad configs, geometries, VTK files, manifests, run
records and names, each with the command it goes through, the exit code it
must give and a fragment of the message it must print.

Every input is generated here (nothing binary is kept in the repository):
``build(tmp)`` writes the input's files into an empty folder and returns the
command line. Inputs are our own inventions (DEMO data), made to break one
rule each: a value that is not finite, too large, of the wrong type, a path
that leaves its folder, a file that lies about its size, …

Kinds: ``config``, ``geometry``, ``name`` (run through ``caseprep check``
and ``caseprep write``), ``vtk``, ``manifest``, ``record`` (run through
``postproc sweep`` or ``postproc forces``), ``table`` (results tables
through ``postproc analyse``).
"""
from __future__ import annotations

import json
import struct
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

from planning_helpers import BASE_TOML, box_triangles, write_binary_stl

#: placeholders in a command line, filled in by the runner
OUT = "{out}"


@dataclass(frozen=True)
class Hostile:
    """One hostile input. ``build(tmp)`` writes its files under ``tmp`` and
    returns the command's arguments (``prog`` is ``caseprep`` or
    ``postproc``); ``exit_code`` and ``fragment`` are what the command must
    give and print. ``also_write``: run ``caseprep write`` too and require
    the same verdict as ``check`` (configs)."""

    name: str
    kind: str
    prog: str
    build: Callable[[Path], list[str]]
    exit_code: int
    fragment: str
    also_write: bool = False
    tags: tuple[str, ...] = field(default_factory=tuple)


# ------------------------------------------------------------------ configs

def _set(text: str, section: str, line: str) -> str:
    """``text`` with ``line`` (``key = value``) set in ``[section]`` (added
    when the section or key is missing)."""
    key = line.split("=")[0].strip()
    out, sec, done = [], None, False
    for ln in text.splitlines():
        stripped = ln.strip()
        if stripped.startswith("[") and not stripped.startswith("[["):
            if sec == section and not done:
                out.append(line)
                done = True
            sec = stripped.strip("[]")
            out.append(ln)
            continue
        if sec == section and ln.split("=")[0].strip() == key:
            if not done:
                out.append(line)
                done = True
            continue
        out.append(ln)
    if not done:
        if sec == section:
            out.append(line)
        else:
            out += ["", f"[{section}]", line]
    return "\n".join(out) + "\n"


def _config(text: str, stl: Callable[[Path], None] | None = None, name: str = "sweep.toml"):
    def build(tmp: Path) -> list[str]:
        (stl or _box_stl)(tmp)
        p = tmp / name
        p.write_text(text) if isinstance(text, str) else p.write_bytes(text)
        return [str(p)]
    return build


def _box_stl(tmp: Path) -> None:
    write_binary_stl(tmp / "car.stl", box_triangles([0.0, -0.2, 0.0], [1.0, 0.2, 0.25]))


#: scalar number keys of the base config → (section, key in section, the key as messages name it)
FLOAT_KEYS = [
    ("air", "speed", "air.speed"), ("air", "temperature", "air.temperature"), ("air", "pressure", "air.pressure"),
    ("air", "altitude", "air.altitude"), ("air", "density", "air.density"), ("air", "viscosity", "air.viscosity"),
    ("air", "kinematic_viscosity", "air.kinematic_viscosity"), ("body", "reference_area", "body.reference_area"),
    ("body", "reference_length", "body.reference_length"), ("body", "wheelbase", "body.wheelbase"),
    ("variants.base", "reference_area", "variants.base.reference_area"), ("mesh", "base_cell", "mesh.base_cell"),
    ("mesh", "gap_cells", "mesh.gap_cells"), ("mesh", "target_yplus", "mesh.target_yplus"),
    ("mesh", "layer_expansion", "mesh.layer_expansion"), ("mesh", "ground_first_cell", "mesh.ground_first_cell"),
    ("domain", "upstream", "domain.upstream"), ("domain", "downstream", "domain.downstream"),
    ("domain", "width", "domain.width"), ("domain", "height", "domain.height"),
    ("domain", "target_blockage", "target_blockage"), ("domain", "max_blockage", "max_blockage"),
    ("solver", "turbulence_intensity", "solver.turbulence_intensity"),
    ("solver", "turbulence_length_scale", "solver.turbulence_length_scale"),
]
LIST_KEYS = [("sweep", "ride_height", "sweep.ride_height[0]"), ("sweep", "pitch_deg", "sweep.pitch_deg[0]"),
             ("sweep", "yaw_deg", "sweep.yaw_deg[0]"), ("sweep", "speed", "sweep.speed[0]")]
INT_KEYS = [("solver", "iterations", "solver.iterations"), ("solver", "write_interval", "solver.write_interval"),
            ("solver", "ranks", "solver.ranks"), ("mesh", "layers", "mesh.layers"),
            ("mesh", "feature_level", "mesh.feature_level"), ("mesh", "max_level", "mesh.max_level")]
VEC_KEYS = [("body", k, f"body.{k}[0]") for k in ("front_axle", "rear_axle", "ride_height_point_front",
                                                  "ride_height_point_rear", "pitch_pivot", "moment_point",
                                                  "centre_of_gravity")]
BAD_FLOATS = {"nan": "nan", "inf": "inf", "minus_inf": "-inf", "text": '"1.0"', "bool": "true", "huge": "1e300",
              "minus_huge": "-1e300"}
BAD_INTS = {"huge": "4611686018427387904", "negative": "-5", "text": '"3"', "bool": "true", "fraction": "1.5"}
BAD_VEC = {"nan": "[nan, 0.0, 0.05]", "inf": "[inf, 0.0, 0.05]", "huge": "[1e300, 0.0, 0.05]",
           "text": '["a", 0.0, 0.05]', "short": "[0.1, 0.0]"}


def config_inputs() -> list[Hostile]:
    out: list[Hostile] = []
    for sec, key, shown in FLOAT_KEYS:
        for tag, val in BAD_FLOATS.items():
            out.append(Hostile(f"config-{shown}-{tag}", "config", "caseprep", _config(_set(BASE_TOML, sec, f"{key} = {val}")),
                               2, shown, also_write=True))
    for sec, key, shown in LIST_KEYS:
        for tag, val in BAD_FLOATS.items():
            out.append(Hostile(f"config-{shown}-{tag}", "config", "caseprep", _config(_set(BASE_TOML, sec, f"{key} = [{val}]")),
                               2, shown, also_write=True))
    for sec, key, shown in INT_KEYS:
        for tag, val in BAD_INTS.items():
            out.append(Hostile(f"config-{shown}-{tag}", "config", "caseprep", _config(_set(BASE_TOML, sec, f"{key} = {val}")),
                               2, shown, also_write=True))
    for sec, key, shown in VEC_KEYS:
        for tag, val in BAD_VEC.items():
            frag = shown if tag != "short" else shown[:-3]
            out.append(Hostile(f"config-{shown}-{tag}", "config", "caseprep", _config(_set(BASE_TOML, sec, f"{key} = {val}")),
                               2, frag, also_write=True))

    def add(name: str, text, code: int, frag: str, stl=None) -> None:
        out.append(Hostile(f"config-{name}", "config", "caseprep", _config(text, stl), code, frag, also_write=True))

    axis = lambda n, a, d: "[" + ", ".join(f"{a + i * d:.6g}" for i in range(n)) + "]"  # noqa: E731
    big = _set(BASE_TOML, "sweep", "ride_height = " + axis(100, 0.02, 1e-4))
    big = _set(big, "sweep", "pitch_deg = " + axis(100, -1.0, 0.01))
    big = _set(big, "sweep", "yaw_deg = " + axis(100, 0.0, 0.01))
    big = _set(big, "sweep", "speed = " + axis(10, 20.0, 0.5))
    add("ten-million-cases", big, 2, "10,000,000 cases")
    add("axis-1001-values", _set(BASE_TOML, "sweep", "yaw_deg = " + axis(1001, 0.0, 0.001)), 2, "at most 1000 values")
    for k in ("ride_height", "yaw_deg", "variants", "speed", "mesh_level", "pitch_deg"):
        add(f"empty-{k}", _set(BASE_TOML, "sweep", f"{k} = []"), 2, f"sweep.{k}")
    add("points-empty", BASE_TOML.replace("ride_height = [0.05]\npitch_deg = [0.0]", "points = []"), 2, "sweep.points")
    add("ranks-2^61-1", _set(BASE_TOML, "solver", "ranks = 2305843009213693951"), 2, "solver.ranks")
    add("ranks-million", _set(BASE_TOML, "solver", "ranks = 1000000"), 2, "solver.ranks")
    add("iterations-prime", _set(_set(BASE_TOML, "solver", "iterations = 9999999967"), "solver",
                                 "write_interval = 9999999966"), 2, "solver.iterations")
    add("base-cell-1e-9", _set(BASE_TOML, "mesh", "base_cell = 1e-9"), 2, "mesh.base_cell")
    add("base-cell-too-many-cells", _set(BASE_TOML, "mesh", "base_cell = 1e-4"), 2, "cells per case")
    add("upstream-1e300", _set(BASE_TOML, "domain", "upstream = 1e300"), 2, "domain.upstream")
    add("ride-height-30m", _set(BASE_TOML, "sweep", "ride_height = [30.0]"), 2, "body length")
    add("ride-height-negative", _set(BASE_TOML, "sweep", "ride_height = [-0.01]"), 2, "sweep.ride_height[0]")
    add("ride-height-touching", _set(BASE_TOML, "sweep", "ride_height = [1e-9]"), 2, "sweep.ride_height[0]")
    add("pitch-too-steep-for-points", _set(BASE_TOML, "sweep", "pitch_deg = [19.0]"), 2, "sweep.ride_height[0]")
    add("speed-1e-300", _set(BASE_TOML, "air", "speed = 1e-300"), 2, "air.speed")
    add("speed-1e300", _set(BASE_TOML, "air", "speed = 1e300"), 2, "air.speed")
    add("yaw-90", _set(BASE_TOML, "sweep", "yaw_deg = [90.0]"), 2, "sweep.yaw_deg[0]")
    add("mesh-level-7", _set(BASE_TOML, "sweep", "mesh_level = [7]"), 2, "sweep.mesh_level[0]")
    add("duplicate-points", _set(BASE_TOML, "sweep", "ride_height = [0.05, 0.05]"), 2, "each operating point once")
    add("both-axes-and-pairs", _set(BASE_TOML, "sweep", "ride_heights_front_rear = [[0.05, 0.05]]"), 2,
        "sweep.ride_heights_front_rear")
    add("pairs-wrong-length", BASE_TOML.replace("ride_height = [0.05]\npitch_deg = [0.0]",
                                                "ride_heights_front_rear = [[0.05, 0.05, 0.05]]"), 2,
        "sweep.ride_heights_front_rear[0]")
    add("unknown-variant-in-sweep", _set(BASE_TOML, "sweep", 'variants = ["nope"]'), 2, "sweep.variants[0]")
    add("unknown-key", _set(BASE_TOML, "air", "sped = 3.0"), 2, "air.sped")
    add("unknown-table", BASE_TOML + "\n[aero]\nx = 1\n", 2, "aero")
    add("missing-study", BASE_TOML.replace('[study]\nname = "t1"\n', ""), 2, "study")
    add("missing-air-speed", BASE_TOML.replace("speed = 30.0", ""), 2, "air.speed")
    add("no-variants", BASE_TOML.replace('[variants.base]\ngeometry = "car.stl"\n', ""), 2, "variants")
    add("variants-not-a-table", 'variants = "car.stl"\n' + BASE_TOML.replace('[variants.base]\ngeometry = "car.stl"\n', ""),
        2, "variants")
    add("air-not-a-table", BASE_TOML.replace("[air]\nspeed = 30.0\n", "").replace("[study]", "air = 3\n[study]"), 2, "air")
    add("toml-syntax", BASE_TOML.replace("speed = 30.0", "speed = = 30"), 2, "not valid TOML")
    add("toml-unclosed-array", BASE_TOML.replace("ride_height = [0.05]", "ride_height = [0.05"), 2, "not valid TOML")
    add("toml-deep-nesting", BASE_TOML.replace("pitch_deg = [0.0]", "pitch_deg = " + "[" * 20000 + "]" * 20000), 2,
        "sweep.toml")
    add("toml-binary", b"\x00\xff\xfe" * 100, 2, "UTF-8")
    add("toml-empty", "", 2, "study")
    add("toml-huge", BASE_TOML + "#" + "x" * 1_000_100 + "\n", 2, "1,000,000 bytes")
    add("description-5000", _set(BASE_TOML, "study", 'description = "' + "x" * 5000 + '"'), 2, "study.description")
    add("geometry-missing", BASE_TOML.replace('"car.stl"', '"nope.stl"'), 2, "variants.base.geometry")
    add("geometry-is-folder", BASE_TOML.replace('"car.stl"', '"."'), 2, "variants.base.geometry")
    add("geometry-dev-zero", BASE_TOML.replace('"car.stl"', '"/dev/zero"'), 2, "variants.base.geometry")
    add("geometry-etc-passwd", BASE_TOML.replace('"car.stl"', '"/etc/passwd"'), 2, "STL")
    add("length-unit-bad", _set(BASE_TOML, "body", 'length_unit = "furlong"'), 2, "body.length_unit")
    add("fidelity-bad", _set(BASE_TOML, "mesh", 'fidelity = "ultra"'), 2, "mesh.fidelity")
    add("ground-none-with-ride-heights", _set(BASE_TOML, "ground", 'mode = "none"'), 2, "sweep.ride_height")
    add("rear-point-ahead", _set(BASE_TOML, "body", "ride_height_point_rear = [0.0, 0.0, 0.0]"), 2,
        "ride_height_point_rear")
    add("nan-front-axle-names-front", _set(BASE_TOML, "body", "front_axle = [nan, 0.0, 0.05]"), 2, "body.front_axle[0]")
    add("blockage-inverted", _set(_set(BASE_TOML, "domain", "target_blockage = 0.2"), "domain", "max_blockage = 0.1"), 2,
        "max_blockage")
    add("domain-too-narrow", _set(BASE_TOML, "domain", "width = 0.1"), 2, "domain.width")
    add("wheel-without-ground", _set(BASE_TOML, "ground", 'mode = "none"') +
        '\n[[body.wheels]]\nname = "fl"\ncentre = [0.2, -0.2, 0.05]\nradius = 0.05\nsolid = "fl"\n', 2, "body.wheels")
    # valid configs: both commands succeed
    add("valid-base", BASE_TOML, 0, "OK")
    add("valid-mm-unit", _set(BASE_TOML, "body", 'length_unit = "mm"'), 0, "OK",
        stl=lambda t: write_binary_stl(t / "car.stl", box_triangles([0.0, -0.2, 0.0], [1.0, 0.2, 0.25]), scale=1e-3))
    add("valid-pairs", BASE_TOML.replace("ride_height = [0.05]\npitch_deg = [0.0]",
                                         "ride_heights_front_rear = [[0.05, 0.06]]"), 0, "OK")
    add("valid-points", BASE_TOML.replace("ride_height = [0.05]\npitch_deg = [0.0]", "") +
        "\n[[sweep.points]]\nride_height = 0.05\nyaw_deg = 2.0\n", 0, "OK")
    return out


# ------------------------------------------------------------------ geometry

def _ascii(solids: list[tuple[str, np.ndarray]]) -> str:
    lines = []
    for name, t in solids:
        lines.append(f"solid {name}")
        for tri in t:
            lines += ["facet normal 0 0 0", "outer loop"] + [f"vertex {float(a)!r} {float(b)!r} {float(c)!r}" for a, b, c in tri] + \
                     ["endloop", "endfacet"]
        lines.append(f"endsolid {name}")
    return "\n".join(lines) + "\n"


def _box_parts(lo=(0.0, -0.2, 0.0), hi=(1.0, 0.2, 0.25)) -> tuple[np.ndarray, np.ndarray]:
    t = box_triangles(lo, hi)
    return t[:2], t[2:]  # the floor (z = lo) and the rest


def _geometry(data_fn: Callable[[], bytes | str], text: str = BASE_TOML):
    def stl(tmp: Path) -> None:
        d = data_fn()
        (tmp / "car.stl").write_bytes(d if isinstance(d, bytes) else d.encode())
    return _config(text, stl)


def _binary(t: np.ndarray, count: int | None = None) -> bytes:
    rec = np.zeros(len(t), dtype=[("n", "<f4", (3,)), ("v", "<f4", (3, 3)), ("a", "<u2")])
    rec["v"] = t
    n = len(t) if count is None else count
    return b"\0" * 80 + struct.pack("<I", n) + rec.tobytes()


def geometry_inputs() -> list[Hostile]:
    box = box_triangles([0.0, -0.2, 0.0], [1.0, 0.2, 0.25])
    floor, rest = _box_parts()
    multi = BASE_TOML
    g: list[tuple[str, Callable[[], bytes | str], int, str]] = [
        ("empty-file", lambda: b"", 2, "STL"),
        ("garbage", lambda: b"\x13\x37" * 5000, 2, "STL"),
        ("binary-truncated", lambda: _binary(box)[:-7], 2, "STL"),
        ("binary-count-huge", lambda: _binary(box, count=2**32 - 1), 2, "STL"),
        ("binary-zero-triangles", lambda: _binary(box[:0]), 2, "STL"),
        ("ascii-no-endsolid", lambda: _ascii([("body", box)]).replace("endsolid body\n", ""), 2, "STL"),
        ("ascii-nan-vertex", lambda: _ascii([("body", box)]).replace("vertex 0.0 ", "vertex nan ", 1), 2, "finite"),
        ("ascii-inf-vertex", lambda: _ascii([("body", box)]).replace("vertex 0.0 ", "vertex inf ", 1), 2, "finite"),
        ("ascii-1e308", lambda: _ascii([("body", box * 1e308)]), 2, "car.stl"),
        ("binary-float-max", lambda: _binary(box * 3e38), 2, "car.stl"),
        ("ascii-text-vertex", lambda: _ascii([("body", box)]).replace("vertex 0.0 ", "vertex zero ", 1), 2, "car.stl"),
        ("ascii-two-vertices", lambda: "\n".join(ln for i, ln in enumerate(_ascii([("body", box)]).splitlines())
                                                 if i != 3) + "\n", 2, "vertices"),
        ("open-surface", lambda: _binary(box[:-1]), 2, "closed surface"),
        ("inside-out", lambda: _binary(box[:, ::-1]), 2, "outward"),
        ("degenerate-triangle", lambda: _binary(np.concatenate([box, box[:1, [0, 0, 1]]])), 2, "car.stl"),
        ("tiny-body", lambda: _binary(box * 1e-6), 2, "a body between"),
        ("huge-body", lambda: _binary(box * 1e3), 2, "car.stl"),
        ("half-model", lambda: _binary(box_triangles([0.0, 0.0, 0.0], [1.0, 0.2, 0.25])), 2, "both sides of y = 0"),
        ("below-ground", lambda: _binary(box_triangles([0.0, -0.2, -0.5], [1.0, 0.2, 0.25])), 2, "clear of the ground"),
        ("solid-named-ground", lambda: _ascii([("ground", floor), ("body", rest)]), 2, "ground"),
        ("solid-named-inlet", lambda: _ascii([("inlet", floor), ("body", rest)]), 2, "inlet"),
        ("duplicate-solid-names", lambda: _ascii([("body", floor), ("body", rest)]), 0, "OK"),
        ("valid-dashed-solid-names", lambda: _ascii([("floor-main", floor), ("body", rest)]), 0, "OK"),
        ("valid-dotted-solid-names", lambda: _ascii([("wing.rear", floor), ("body", rest)]), 0, "OK"),
        ("valid-digit-solid-name", lambda: _ascii([("1floor", floor), ("body", rest)]), 0, "OK"),
        ("valid-unnamed-solids", lambda: _ascii([("", floor), ("", rest)]), 0, "OK"),
        ("valid-ascii-header-solid-binary", lambda: b"solid x" + _binary(box)[7:], 0, "OK"),
    ]
    return [Hostile(f"geometry-{n}", "geometry", "caseprep", _geometry(fn, multi), c, f, also_write=True)
            for n, fn, c, f in g]


# ------------------------------------------------------------------ names

HOSTILE_NAMES = ["../x", "a/b", "/abs", "-dash", "x y", "a" * 65, "naïve", "$(id)", "`id`", "a;b", "a|b", "a\\nb",
                 "a\\tb", ".hidden", "1abc", "_x", "a\\u0000b", "a'b", 'a\\"b', "*", "a.b", "con:", "~root"]


def name_inputs() -> list[Hostile]:
    out = []
    for i, n in enumerate(HOSTILE_NAMES):
        key_line = f'"{n}"'
        out.append(Hostile(f"name-variant-{i}", "name", "caseprep",
                           _config(BASE_TOML.replace("[variants.base]", f"[variants.{key_line}]")), 2, "variants.",
                           also_write=True))
        out.append(Hostile(f"name-study-{i}", "name", "caseprep",
                           _config(BASE_TOML.replace('name = "t1"', f"name = {key_line}")), 2, "study.name",
                           also_write=True))
    return out


# ------------------------------------------------------------------ VTK exports

def _spoil_sweep(spoil: Callable[[Path], None], command: str, cases=("a", "b")):
    """A finished sweep (tests/hostile/builders.py) with case ``a`` spoiled
    by ``spoil(case_dir)``; the command runs on the sweep (``sweep``, without
    pictures: the inputs aim at the readers) or on case a's surface file
    (``forces``)."""
    def build(tmp: Path) -> list[str]:
        from builders import finished_sweep

        root = finished_sweep(tmp / "sw", list(cases))
        spoil(root / "cases" / "a")
        if command == "sweep":
            return ["sweep", str(root), "--no-pictures"]
        return ["forces", str(root / "cases" / "a" / "VTK" / "a_100.vtm"), "--patches", "body", "--rho", "1"]
    return build


BODY = "VTK/a_100/boundary/body.vtp"
VTM = "VTK/a_100.vtm"


def _edit_bytes(rel: str, fn: Callable[[bytes], bytes]) -> Callable[[Path], None]:
    def spoil(case: Path) -> None:
        p = case / rel
        p.write_bytes(fn(p.read_bytes()))
    return spoil


def _replace_file(rel: str, fn: Callable[[Path], None]) -> Callable[[Path], None]:
    def spoil(case: Path) -> None:
        p = case / rel
        p.unlink()
        fn(p)
    return spoil


def _surface_with(**arrays) -> Callable[[Path], None]:
    """body.vtp rewritten with other face arrays, points or faces (our sphere, DEMO data)."""
    def write(p: Path) -> None:
        from _surfaces import icosphere
        from _vtkfiles import polydata, write as write_vtk

        X, F = icosphere(0.05, 1, center=(0.4, 0.0, 0.1))
        X = arrays.get("points", X)
        F = arrays.get("faces", F)
        m = len(F)
        cells = {"p": np.ones(m), "wallShearStress": np.zeros((m, 3)), "yPlus": np.full(m, 40.0)}
        for k, v in arrays.items():
            if k in ("points", "faces"):
                continue
            if v is None:
                cells.pop(k)
            else:
                cells[k] = v
        write_vtk(polydata(X, F, cells), p)
    return _replace_file(BODY, write)


def _numbers(b: bytes, points: int | None = None, polys: int | None = None, noise: int = 0) -> bytes:
    """``b`` with its header's point or face count replaced, and ``noise`` random bytes appended."""
    import re

    if points is not None:
        b = re.sub(rb'NumberOfPoints="\s*\d+', f'NumberOfPoints="{points}'.encode(), b)
    if polys is not None:
        b = re.sub(rb'NumberOfPolys="\s*\d+', f'NumberOfPolys="{polys}'.encode(), b)
    return b + np.random.default_rng(7).bytes(noise)


BOMB = b"""<?xml version="1.0"?>
<!DOCTYPE v [<!ENTITY a "aaaaaaaaaa"><!ENTITY b "&a;&a;&a;&a;&a;&a;&a;&a;&a;&a;"><!ENTITY c "&b;&b;&b;&b;&b;&b;&b;&b;&b;&b;">
<!ENTITY d "&c;&c;&c;&c;&c;&c;&c;&c;&c;&c;"><!ENTITY e "&d;&d;&d;&d;&d;&d;&d;&d;&d;&d;"><!ENTITY f "&e;&e;&e;&e;&e;&e;&e;&e;&e;&e;">
<!ENTITY g "&f;&f;&f;&f;&f;&f;&f;&f;&f;&f;"><!ENTITY h "&g;&g;&g;&g;&g;&g;&g;&g;&g;&g;">]>
<VTKFile type="vtkMultiBlockDataSet"><vtkMultiBlockDataSet><DataSet name="&h;" file="x.vtp"/></vtkMultiBlockDataSet></VTKFile>
"""


def vtk_inputs() -> list[Hostile]:
    """Bad surface files and exports: each through ``postproc sweep`` (the
    batch goes on; case a flagged) and ``postproc forces`` (exit 2, message)."""
    import os

    def vtm_text(fn):
        return _edit_bytes(VTM, lambda b: fn(b.decode()).encode())

    def link_out(case: Path) -> None:
        (case / BODY).unlink()
        os.symlink("/dev/zero", case / BODY)

    def vtk_dir_out(case: Path) -> None:
        import shutil

        shutil.rmtree(case / "VTK")
        os.symlink("/tmp", case / "VTK")

    def deep_blocks(b: str) -> str:
        return b.replace("<Block name='boundary'>", "<Block name='boundary'>" + "<Block name='x'>" * 1_000 +
                         "</Block>" * 1_000)

    def many_blocks(b: str) -> str:
        return b.replace("</Block>", "".join(f"<DataSet name='p{i}' file='a_100/boundary/body.vtp'/>"
                                             for i in range(100_001)) + "</Block>", 1)

    # (name, spoiler, sweep flag fragment, forces exit code, forces fragment)
    spoilers = [
        ("declares-4e9-points", _edit_bytes(BODY, lambda b: _numbers(b, points=4_000_000_000)[:497]), "unreadable", 2,
         "header declaring"),
        ("crashes-reader-points", _edit_bytes(BODY, lambda b: _numbers(b, points=1_000_000_000, noise=400_000)),
         "unreadable", 2, "crashed the reader"),
        ("crashes-reader-polys", _edit_bytes(BODY, lambda b: _numbers(b, polys=800_000_000, noise=300_000)),
         "unreadable", 2, "crashed the reader"),
        ("truncated", _edit_bytes(BODY, lambda b: b[: len(b) // 2]), "unreadable", 2, "body.vtp"),
        ("empty", _edit_bytes(BODY, lambda b: b""), "unreadable", 2, "an empty file"),
        ("garbage", _edit_bytes(BODY, lambda b: np.random.default_rng(1).bytes(5000)), "unreadable", 2, "body.vtp"),
        ("header-only", _edit_bytes(BODY, lambda b: b[: b.index(b"<AppendedData")]), "unreadable", 2, "body.vtp"),
        ("xml-entity-bomb", _edit_bytes(BODY, lambda b: BOMB), "unreadable", 2, "body.vtp"),
        ("nan-pressure", _surface_with(p=np.full(80, np.nan)), "forces-failed", 2, "finite"),
        ("inf-points", _surface_with(points=np.full((42, 3), np.inf)), "unreadable", 2, "finite point coordinates"),
        ("face-to-missing-point", _surface_with(faces=np.array([[0, 1, 500]] * 80)), "unreadable", 2, "body.vtp"),
        ("no-pressure-array", _surface_with(p=None), "forces-failed", 2, "'p'"),
        ("body-is-a-folder", _replace_file(BODY, lambda p: p.mkdir()), "forces-failed", 2, "body.vtp"),
        ("body-links-out", link_out, "forces-failed", 2, "inside"),
        ("vtm-absolute-block", vtm_text(lambda t: t.replace("a_100/boundary/body.vtp", "/etc/passwd")),
         "forces-failed", 2, "absolute path"),
        ("vtm-dotdot-block", vtm_text(lambda t: t.replace("a_100/boundary/body.vtp", "../../../b/VTK/a_100/boundary/body.vtp")),
         "forces-failed", 2, "no '..'"),
        ("vtm-missing-block", vtm_text(lambda t: t.replace("a_100/boundary/body.vtp", "a_100/boundary/nope.vtp")),
         "forces-failed", 2, "missing"),
        ("vtm-nested-vtm", vtm_text(lambda t: t.replace("a_100/boundary/body.vtp", "../a_100.vtm")), "forces-failed", 2,
         "no '..'"),
        ("vtm-not-xml", vtm_text(lambda t: "this is not xml <<<"), "forces-failed", 2, "XML"),
        ("vtm-wrong-root", vtm_text(lambda t: "<?xml version='1.0'?><Other/>"), "forces-failed", 2, "vtkMultiBlockDataSet"),
        ("vtm-entity-bomb", _edit_bytes(VTM, lambda b: BOMB), "forces-failed", 2, "a_100.vtm"),
        ("vtm-deep-blocks", vtm_text(deep_blocks), "", 0, "force"),
        ("vtm-too-many-blocks", vtm_text(many_blocks), "forces-failed", 2, "100,000 blocks"),
        ("vtm-no-blocks", vtm_text(lambda t: "<VTKFile type='vtkMultiBlockDataSet'><vtkMultiBlockDataSet/></VTKFile>"),
         "forces-failed", 2, "boundary patches"),
        ("vtk-folder-links-out", vtk_dir_out, "forces-failed", 2, "VTK"),
        ("series-file-bomb", lambda c: (c / "VTK" / "a.vtm.series").write_text("[" * 100_000 + "]" * 100_000), "", 0,
         "force"),
        ("time-header-nan", vtm_text(lambda t: t.replace("time='100'", "time='nan'")), "", 0, "force"),
    ]
    out = []
    for name, spoil, flag, code, frag in spoilers:
        sweep_frag = f"a: ok; no coefficients; flags: {flag}" if flag in ("unreadable", "forces-failed") else \
            f"flags: {flag}" if flag else "2 case(s), 0 flagged"
        out.append(Hostile(f"vtk-sweep-{name}", "vtk", "postproc", _spoil_sweep(spoil, "sweep"), 0, sweep_frag))
        out.append(Hostile(f"vtk-forces-{name}", "vtk", "postproc", _spoil_sweep(spoil, "forces"), code, frag))
    def crashing_volume(case: Path) -> None:
        import re

        from builders import volume_vtu

        v = volume_vtu(case / "VTK" / "a_100" / "internal.vtu")
        # 48 GB of points declared in 1.5 MB of dense data: more than any machine's memory, whatever the limit
        v.write_bytes(re.sub(rb'NumberOfPoints="\s*64', b'NumberOfPoints="4000000000', v.read_bytes()) +
                      np.random.default_rng(3).bytes(1_500_000))

    for cmd in ("vortices", "flow", "walls"):  # the flow commands read the volume in a child process too
        def build(tmp: Path, cmd=cmd) -> list[str]:
            from builders import finished_sweep

            root = finished_sweep(tmp / "sw", ["a"])
            crashing_volume(root / "cases" / "a")
            return [cmd, str(root / "cases" / "a")]
        out.append(Hostile(f"vtk-{cmd}-crashing-volume", "vtk", "postproc", build, 2, "crashed the reader"))
    def sweep_with_flow(tmp: Path) -> list[str]:
        args = _spoil_sweep(crashing_volume, "sweep")(tmp)
        return [a for a in args if a != "--no-pictures"]  # the flow columns read each case's volume

    out.append(Hostile("vtk-sweep-crashing-volume", "vtk", "postproc", sweep_with_flow, 0, "flags: unreadable"))
    for name, data, frag in [
        ("legacy-4e9-points", b"# vtk DataFile Version 3.0\nx\nBINARY\nDATASET POLYDATA\nPOINTS 4000000000 float\n" +
         b"\0" * 200, "header declaring"),
        ("legacy-garbage", b"# vtk DataFile Version 3.0\nx\nASCII\nDATASET POLYDATA\nPOINTS 3 float\n1 2\n", "x.vtk"),
        ("legacy-not-vtk", b"hello", "x.vtk"),
    ]:
        def build(tmp: Path, data=data) -> list[str]:
            (tmp / "x.vtk").write_bytes(data)
            return ["forces", str(tmp / "x.vtk"), "--rho", "1"]
        out.append(Hostile(f"vtk-forces-{name}", "vtk", "postproc", build, 2, frag))
    return out


# ------------------------------------------------------------------ manifests

def _manifest(edit: Callable[[dict], object], command: str = "sweep", raw: bytes | None = None):
    def build(tmp: Path) -> list[str]:
        from builders import edit_manifest, finished_sweep

        root = finished_sweep(tmp / "sw", ["a", "b"], exports=False)
        if raw is not None:
            (root / "manifest.json").write_bytes(raw)
        else:
            edit_manifest(root, edit)
        return ["sweep", str(root)] if command == "sweep" else ["run", str(root), "--skip-solver-check"]
    return build


def _case(i: int, **kw):
    def edit(d):
        d["cases"][i].update(kw)
    return edit


def _sub(path: str, value):
    """Set ``cases[0].<path>`` (dotted) to ``value``."""
    def edit(d):
        obj = d["cases"][0]
        *head, last = path.split(".")
        for k in head:
            obj = obj[k]
        obj[last] = value
    return edit


def manifest_inputs() -> list[Hostile]:
    def drop(path):
        def edit(d):
            obj = d["cases"][0]
            *head, last = path.split(".")
            for k in head:
                obj = obj[k]
            del obj[last]
        return edit

    m: list[tuple[str, Callable | None, bytes | None, str]] = [
        ("top-level-list", lambda d: [d], None, "schema"),
        ("schema-wrong", lambda d: d.update(schema="other"), None, "schema"),
        ("schema-version-2", lambda d: d.update(schema_version=2), None, "schema_version"),
        ("cases-string", lambda d: d.update(cases="all"), None, "at cases"),
        ("cases-dict", lambda d: d.update(cases={"a": {}}), None, "at cases"),
        ("cases-number", lambda d: d.update(cases=3), None, "at cases"),
        ("record-string", lambda d: d["cases"].__setitem__(0, "a"), None, "cases[0]"),
        ("record-list", lambda d: d["cases"].__setitem__(0, [1, 2]), None, "cases[0]"),
        ("case-id-missing", drop("case_id"), None, "cases[0].case_id"),
        ("case-id-number", _case(0, case_id=7), None, "cases[0].case_id"),
        ("case-id-dotdot", _case(0, case_id="../../x"), None, "cases[0].case_id"),
        ("case-id-absolute", _case(0, case_id="/tmp/x"), None, "cases[0].case_id"),
        ("case-id-space", _case(0, case_id="a b"), None, "cases[0].case_id"),
        ("case-id-long", _case(0, case_id="a" * 80), None, "cases[0].case_id"),
        ("case-id-newline", _case(0, case_id="a\nb"), None, "cases[0].case_id"),
        ("folder-absolute", _case(0, folder="/etc"), None, "folder"),
        ("folder-dotdot", _case(0, folder="../../../../etc"), None, "folder"),
        ("folder-empty", _case(0, folder=""), None, "folder"),
        ("folder-number", _case(0, folder=3), None, "folder"),
        ("params-list", _case(0, params=[1]), None, "params"),
        ("params-yaw-text", _sub("params.yaw_deg", "four"), None, "params.yaw_deg"),
        ("params-mesh-level-fraction", _sub("params.mesh_level", 1.5), None, "params.mesh_level"),
        ("params-mesh-level-bool", _sub("params.mesh_level", True), None, "params.mesh_level"),
        ("reference-missing", drop("reference"), None, "reference"),
        ("reference-area-zero", _sub("reference.area", 0.0), None, "reference.area"),
        ("reference-rho-text", _sub("reference.rho", "air"), None, "reference.rho"),
        ("reference-axle-short", _sub("reference.front_axle", [0.0, 0.0]), None, "reference.front_axle"),
        ("frames-missing", drop("frames"), None, "frames"),
        ("rotation-2x2", _sub("frames.rotation_body_to_ground", [[1, 0], [0, 1]]), None, "rotation_body_to_ground"),
        ("wind-text", _case(0, wind_direction_body="x"), None, "wind_direction_body"),
        ("patches-list", _case(0, patches=["body"]), None, "patches"),
        ("patches-body-string", _sub("patches.body", "body"), None, "patches.body"),
        ("estimated-cells-text", _case(0, estimated_cells="many"), None, "estimated_cells"),
        ("outputs-escape", _case(0, outputs={"forces": "../../../etc/passwd"}), None, "outputs.forces"),
        ("duplicate-ids", lambda d: d["cases"].append(dict(d["cases"][0])), None, "cases[2].case_id"),
        ("duplicate-folders", lambda d: d["cases"][1].update(folder=d["cases"][0]["folder"]), None, "cases[1].folder"),
        ("nan-literal", None, b'{"schema": "underfloor-manifest", "schema_version": 1, "cases": [NaN]}', "NaN"),
        ("deep-nesting", None, b"[" * 100_000 + b"]" * 100_000, "nested"),
        ("huge-integer", None, b'{"schema": "underfloor-manifest", "x": ' + b"9" * 5000 + b"}", "valid JSON"),
        ("binary", None, b"\xff\xfe\x00" * 50, "UTF-8"),
        ("empty", None, b"", "valid JSON"),
    ]
    out = [Hostile(f"manifest-{n}", "manifest", "postproc", _manifest(e, raw=raw), 2, frag) for n, e, raw, frag in m]
    for n, e, raw, frag in m[::4]:  # the runner reads the same manifests
        out.append(Hostile(f"manifest-run-{n}", "manifest", "caseprep", _manifest(e, "run", raw), 2, frag))

    def folder_manifest(tmp: Path) -> list[str]:
        from builders import finished_sweep

        root = finished_sweep(tmp / "sw", ["a"])
        (root / "manifest.json").unlink()
        (root / "manifest.json").mkdir()
        return ["sweep", str(root)]

    def linked_manifest(tmp: Path) -> list[str]:
        import os

        from builders import finished_sweep

        root = finished_sweep(tmp / "sw", ["a"])
        (root / "manifest.json").unlink()
        os.symlink("/etc/passwd", root / "manifest.json")
        return ["sweep", str(root)]

    out.append(Hostile("manifest-is-a-folder", "manifest", "postproc", folder_manifest, 2, "manifest.json"))
    out.append(Hostile("manifest-links-to-passwd", "manifest", "postproc", linked_manifest, 2, "manifest"))
    return out


# ------------------------------------------------------------------ run records

def record_inputs() -> list[Hostile]:
    def rec(over: dict | None = None, raw: bytes | None = None, folder: bool = False):
        def spoil(case: Path) -> None:
            from builders import run_record

            p = case / "underfloor-run.json"
            if folder:
                p.unlink()
                p.mkdir()
            elif raw is not None:
                p.write_bytes(raw)
            else:
                p.write_text(json.dumps(run_record("a", **(over or {}))))
        return spoil

    r = [
        ("iterations-many", rec({"iterations": "many"})), ("cells-negative", rec({"cells": -3})),
        ("cells-fraction", rec({"cells": 1.5})), ("cells-bool", rec({"cells": True})),
        ("cells-huge", rec({"cells": 10**30})), ("status-number", rec({"status": 3})),
        ("stages-string", rec({"stages": "all"})), ("stages-numbers", rec({"stages": [1, 2]})),
        ("stage-missing-status", rec({"stages": [{"stage": "mesh"}]})),
        ("stage-extra-key", rec({"stages": [{"stage": "mesh", "status": "ok", "evil": 1}]})),
        ("layers-string", rec({"layers": "x"})), ("layers-numbers", rec({"layers": [1]})),
        ("flags-string", rec({"flags": "not-converged"})), ("flags-numbers", rec({"flags": [1]})),
        ("residuals-list", rec({"final_residuals": [1e-5]})), ("residuals-text", rec({"final_residuals": {"p": "low"}})),
        ("message-number", rec({"message": 1})), ("mesh-ok-text", rec({"mesh_ok": "yes"})),
        ("nan-literal", rec(raw=b'{"case_id": "a", "wall_time": NaN}')),
        ("deep-nesting", rec(raw=b"[" * 100_000 + b"]" * 100_000)), ("binary", rec(raw=b"\xff\xfe" * 40)),
        ("empty", rec(raw=b"")), ("top-level-list", rec(raw=b"[1, 2]")), ("is-a-folder", rec(folder=True)),
    ]
    return [Hostile(f"record-{n}", "record", "postproc", _spoil_sweep(s, "sweep", cases=("a",)), 0,
                    "flags: record-unreadable") for n, s in r]


# ------------------------------------------------------------------ results tables

TABLE_HEADER = "case_id,variant,ride_height_front,ride_height_rear,yaw_deg,speed,mesh_level,cl,cd,cs,cl_front,cl_rear,flags"


def _table_row(i: int, variant: str, hf: float, hr: float) -> str:
    """One usable row of an invented floor (DEMO numbers)."""
    return f"r{i},{variant},{hf:.6f},{hr:.6f},0,40,0,-1.1,0.3,0,-0.5,-0.6,"


def _csv(lines: Callable[[], list[str]] | None = None, raw: Callable[[Path], None] | None = None):
    """A results CSV (header + ``lines()``, or written by ``raw(path)``) through ``postproc analyse``."""
    def build(tmp: Path) -> list[str]:
        path = tmp / "results.csv"
        if raw is not None:
            raw(path)
        else:
            path.write_text("\n".join([TABLE_HEADER, *lines()]) + "\n")
        return ["analyse", str(path), "-o", str(tmp.parent / "out")]
    return build


def _sparse(size: int) -> Callable[[Path], None]:
    def write(path: Path) -> None:
        with open(path, "wb") as fh:
            fh.write((TABLE_HEADER + "\n").encode())
            fh.truncate(size)          # a hole: the size without the disk space
    return write


def _sweep_results(n: int):
    """A post-processed sweep folder whose results.json lists ``n`` case rows."""
    def build(tmp: Path) -> list[str]:
        root = tmp / "sw"
        root.mkdir()
        row = {"case_id": "a", "variant": "a", "ride_height_front": 0.02, "ride_height_rear": 0.03, "yaw_deg": 0.0,
               "speed": 40.0, "mesh_level": 0, "cl": -1.1, "cd": 0.3, "cs": 0.0, "cl_front": -0.5, "cl_rear": -0.6,
               "flags": ""}
        (root / "results.json").write_text(json.dumps({"cases": [dict(row, case_id=f"c{i}") for i in range(n)]}))
        return ["analyse", str(root), "-o", str(tmp.parent / "out")]
    return build


def table_inputs() -> list[Hostile]:
    grid = [(0.01 + 0.001 * (k % 40), 0.002 * (k // 40)) for k in range(400)]
    t = [
        # 207,000 rows: past the row limit long before any parsing or fitting
        ("rows-207k", _csv(lambda: [_table_row(i, f"v{i % 3}", *grid[i % 400]) for i in range(207_000)]),
         "at most 10,000 data rows"),
        ("columns-300", _csv(raw=lambda p: p.write_text(TABLE_HEADER + "".join(f",x{i}" for i in range(300)) + "\n")),
         "at most 200 columns"),
        ("cell-10k-characters", _csv(lambda: [_table_row(0, "v" * 10_000, 0.02, 0.03)]), "cells of at most 256"),
        ("variants-300", _csv(lambda: [_table_row(i, f"v{i}", 0.02, 0.03) for i in range(300)]), "at most 200 variants"),
        # 150 variants, each at its own 66 points: 150 × 9,900 pairs for the ranking's lists
        ("pairs-1.5M", _csv(lambda: [_table_row(i, f"v{i % 150}", 0.01 + 1e-5 * i, 0.03) for i in range(9_900)]),
         "variant × operating-point pairs"),
        ("bytes-60MB", _csv(raw=_sparse(60_000_000)), "at most 50,000,000 bytes"),
        ("sweep-results-20k-rows", _sweep_results(20_001), "at most 10,000 data rows"),
    ]
    return [Hostile(f"table-{n}", "table", "postproc", b, 2, frag) for n, b, frag in t]


def all_inputs() -> list[Hostile]:
    return (config_inputs() + geometry_inputs() + name_inputs() + vtk_inputs() + manifest_inputs() + record_inputs()
            + table_inputs())
