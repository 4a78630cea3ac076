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
``postproc sweep`` or ``postproc forces``).
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
