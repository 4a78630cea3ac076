"""Property-based tests (hypothesis) of the parsers that take untrusted input.

Properties: the config parser, the JSON reader, the path confinement and
the VTK readers either return a valid result or raise a UserError — never
another exception, never a result that breaks their promises (a confined
path lies inside its folder; a surface's faces refer to existing points and
every face array has one value per face). Examples are derandomised so CI
runs the same inputs every time.
"""
from __future__ import annotations

import math
import sys
import tomllib
from pathlib import Path

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

sys.path.insert(0, str(Path(__file__).parent))

from caseprep.config.load import load_config, parse_config  # noqa: E402
from caseprep.contract.errors import UserError  # noqa: E402
from caseprep.contract.untrusted import confined, is_inside, read_json  # noqa: E402
from planning_helpers import BASE_TOML, car_box  # noqa: E402

FAST = settings(max_examples=150, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
SLOW = settings(max_examples=25, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])

BASE = tomllib.loads(BASE_TOML)

scalars = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True), st.integers(min_value=-(2**63), max_value=2**63 - 1),
    st.text(max_size=30), st.booleans(),
)
values = st.recursive(scalars, lambda inner: st.one_of(st.lists(inner, max_size=5),
                                                        st.dictionaries(st.text(max_size=10), inner, max_size=4)),
                      max_leaves=12)


def _paths(d: dict, prefix=()) -> list[tuple]:
    out = []
    for k, v in d.items():
        out.append(prefix + (k,))
        if isinstance(v, dict):
            out += _paths(v, prefix + (k,))
    return out


PATHS = _paths(BASE) + [("sweep", "yaw_deg"), ("solver", "ranks"), ("mesh", "base_cell"), ("domain", "upstream"),
                        ("body", "wheels"), ("sweep", "points"), ("air", "density"), ("variants", "x")]


@FAST
@given(path=st.sampled_from(PATHS), value=values)
def test_config_parser_mutations_give_a_config_or_a_user_error(tmp_path_factory, path, value):
    tmp = tmp_path_factory.mktemp("cfg", numbered=True)
    car_box(tmp)
    data = tomllib.loads(BASE_TOML)
    obj = data
    for k in path[:-1]:
        obj = obj.setdefault(k, {}) if isinstance(obj, dict) else {}
    if isinstance(obj, dict):
        obj[path[-1]] = value
    try:
        cfg = parse_config(data, file="sweep.toml", base_dir=tmp)
    except UserError as exc:
        assert str(exc).strip()
        return
    # accepted: every number of it is finite
    for v in _numbers(cfg.model_dump()):
        assert math.isfinite(v)


def _numbers(o):
    if isinstance(o, bool):
        return
    if isinstance(o, (int, float)):
        yield float(o)
    elif isinstance(o, dict):
        for v in o.values():
            yield from _numbers(v)
    elif isinstance(o, (list, tuple)):
        for v in o:
            yield from _numbers(v)


@FAST
@given(text=st.text(max_size=400))
def test_config_text_gives_a_config_or_a_user_error(tmp_path_factory, text):
    tmp = tmp_path_factory.mktemp("toml", numbered=True)
    p = tmp / "sweep.toml"
    p.write_text(BASE_TOML[: len(BASE_TOML) // 2] + text)
    try:
        load_config(p)
    except UserError:
        pass


@FAST
@given(data=st.binary(max_size=300) | st.text(max_size=300).map(str.encode))
def test_json_reader_gives_a_value_or_a_user_error(tmp_path_factory, data):
    p = tmp_path_factory.mktemp("json", numbered=True) / "x.json"
    p.write_bytes(data)
    try:
        v = read_json(p, "test file", fix="")
    except UserError:
        return
    assert v is None or isinstance(v, (dict, list, str, int, float, bool))


@FAST
@given(rel=st.one_of(st.text(alphabet="ab./\\~\0 ", max_size=12), st.none(), st.integers()))
def test_confined_paths_stay_inside(tmp_path_factory, rel):
    root = tmp_path_factory.mktemp("root", numbered=True)
    (root / "sub").mkdir()
    (root / "sub" / "up").symlink_to("..")
    (root / "sub" / "out").symlink_to("/")
    try:
        p = confined(root, rel, file="f", key="k")
    except UserError:
        return
    assert is_inside(p, root)


# ------------------------------------------------------------------ VTK readers

def _good_vtp(tmp: Path) -> Path:
    from builders import body_polydata
    from _vtkfiles import write

    return write(body_polydata(), tmp / "body.vtp")


def _check_surface(s) -> None:
    n = s.offsets.size - 1
    assert s.offsets[0] == 0 and s.offsets[-1] == s.connectivity.size and np.all(np.diff(s.offsets) >= 0)
    if s.connectivity.size:
        assert s.connectivity.min() >= 0 and s.connectivity.max() < s.points.shape[0]
    assert all(v.shape[0] == n for v in s.cell_data.values())
    assert np.isfinite(s.points).all()


@SLOW
@given(cut=st.integers(min_value=0, max_value=4000), flips=st.lists(st.tuples(st.integers(0, 4000), st.integers(0, 255)),
                                                                    max_size=6))
def test_vtp_reader_on_damaged_files(tmp_path_factory, cut, flips):
    from postproc.io.surfaces import read_surface

    tmp = tmp_path_factory.mktemp("vtp", numbered=True)
    p = _good_vtp(tmp)
    data = bytearray(p.read_bytes())
    for i, b in flips:
        if i < len(data):
            data[i] = b
    p.write_bytes(bytes(data[: max(cut, 1)] if cut < len(data) else data))
    try:
        s = read_surface(p)
    except UserError:
        return
    _check_surface(s)


@SLOW
@given(points=st.integers(0, 2**40), polys=st.integers(0, 2**40), noise=st.integers(0, 20_000))
def test_vtp_reader_on_lying_headers(tmp_path_factory, points, polys, noise):
    import re

    from postproc.io.surfaces import read_surface

    tmp = tmp_path_factory.mktemp("vtp", numbered=True)
    p = _good_vtp(tmp)
    b = p.read_bytes()
    b = re.sub(rb'NumberOfPoints="\s*\d+', f'NumberOfPoints="{points}'.encode(), b)
    b = re.sub(rb'NumberOfPolys="\s*\d+', f'NumberOfPolys="{polys}'.encode(), b)
    p.write_bytes(b + bytes(noise))
    try:
        s = read_surface(p)
    except UserError:
        return
    _check_surface(s)


@SLOW
@given(blocks=st.lists(st.tuples(st.text(alphabet="abc/.", min_size=1, max_size=8),
                                 st.text(alphabet="ab./~", min_size=0, max_size=10)), max_size=6),
       depth=st.integers(0, 30))
def test_vtm_index_gives_blocks_inside_or_a_user_error(tmp_path_factory, blocks, depth):
    from xml.sax.saxutils import quoteattr

    from postproc.io.surfaces import vtm_blocks

    tmp = tmp_path_factory.mktemp("vtm", numbered=True)
    body = "".join(f"<DataSet name={quoteattr(n)} file={quoteattr(f)}/>" for n, f in blocks)
    body = "<Block name='b'>" * depth + body + "</Block>" * depth
    p = tmp / "x.vtm"
    p.write_text(f"<?xml version='1.0'?><VTKFile type='vtkMultiBlockDataSet'><vtkMultiBlockDataSet>{body}"
                 "</vtkMultiBlockDataSet></VTKFile>")
    try:
        out, _ = vtm_blocks(p)
    except UserError:
        return
    assert all(is_inside(f, tmp) for _, f in out)
