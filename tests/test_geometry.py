"""STL reading, topology checks, projected area and hull clearance (caseprep.geometry.stl)."""
from __future__ import annotations

import numpy as np
import pytest

from caseprep.geometry import body, checks, stl
from caseprep.geometry import hull as hullmod
from caseprep.contract.errors import UserError
from planning_helpers import box_triangles, convex_body, write_binary_stl

SPHERE_SCRIPT = None


def _sphere(r=0.5, n=3):
    import importlib.util
    from pathlib import Path

    p = Path(__file__).resolve().parent.parent / "example_cases" / "sphere_re100" / "make_geometry.py"
    spec = importlib.util.spec_from_file_location("sphere_gen", p)
    m = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(m)
    return m.icosphere(r, n)


def test_binary_and_ascii_round_trip(tmp_path):
    t = box_triangles([0, 0, 0], [1.0, 0.5, 0.25])
    s = stl.read_stl(write_binary_stl(tmp_path / "b.stl", t, scale=1e-3), length_unit="mm", default_name="flat")
    assert s.solid_names == ("flat",)
    np.testing.assert_allclose(s.triangles, t, atol=1e-7)  # float32 storage of mm values
    stl.write_stl_ascii(tmp_path / "a.stl", [("body", t), ("wheel fl", t + [2, 0, 0])])
    a = stl.read_stl(tmp_path / "a.stl")
    assert a.solid_names == ("body", "wheel")  # first word, sanitised
    assert a.n_triangles == 24 and list(np.bincount(a.solid)) == [12, 12]
    np.testing.assert_allclose(a.triangles[:12], t, atol=1e-12)


def test_inch_unit(tmp_path):
    t = box_triangles([0, 0, 0], [10.0, 5.0, 2.0])
    s = stl.read_stl(write_binary_stl(tmp_path / "b.stl", t), length_unit="in")
    np.testing.assert_allclose(s.triangles.reshape(-1, 3).max(axis=0), [0.254, 0.127, 0.0508], rtol=1e-6)


def test_missing_and_bad_files(tmp_path):
    with pytest.raises(UserError, match="existing STL"):
        stl.read_stl(tmp_path / "nope.stl")
    (tmp_path / "x.stl").write_text("hello world, not an stl at all" * 5)
    with pytest.raises(UserError, match="STL"):
        stl.read_stl(tmp_path / "x.stl")


def test_closed_box_is_clean_and_volume_exact():
    r = checks.inspect_surface(box_triangles([0, 0, 0], [2.0, 1.0, 0.5]))
    assert r.closed and r.misoriented_edges == 0 and r.degenerate_faces == 0
    assert r.volume == pytest.approx(1.0, rel=1e-12)  # divergence theorem is exact for planar faces
    assert r.area == pytest.approx(2 * (2 + 1 + 0.5), rel=1e-12)


def test_topology_defects_found():
    t = box_triangles([0, 0, 0], [1, 1, 1])
    r = checks.inspect_surface(t[:-1])
    assert r.open_edges == 3 and not r.closed
    flipped = t.copy()
    flipped[0] = flipped[0][::-1]
    assert checks.inspect_surface(flipped).misoriented_edges > 0
    inverted = t[:, ::-1]
    r = checks.inspect_surface(inverted)
    assert r.closed and r.volume == pytest.approx(-1.0)
    probs = checks.surface_problems(r, "f.stl", "variants.x.geometry", "m")
    assert any("outward" in str(p) for p in probs)
    degen = np.concatenate([t, [[[0, 0, 0], [0.5, 0, 0], [1, 0, 0]]]])
    assert checks.inspect_surface(degen).degenerate_faces == 1


def test_implausible_size_suggests_unit():
    r = checks.inspect_surface(box_triangles([0, 0, 0], [4000.0, 1800.0, 1100.0]))
    probs = checks.surface_problems(r, "car.stl", "variants.car.geometry", "m")
    assert len(probs) == 1
    msg = str(probs[0])
    assert "length_unit = 'mm'" in msg and "car.stl" in msg and "variants.car.geometry" in msg


def test_projected_area_box_and_sphere():
    t = box_triangles([0, 0, 0], [2.0, 0.8, 0.5])
    # box shadow along x is exactly 0.8 × 0.5; rasterised boundary error ≲ perimeter × h / 2
    # with h = 0.8 / 2048 → 2.6 × 3.9e-4 / 2 / 0.4 = 1.3e-3 relative
    assert hullmod.projected_area(t, [1, 0, 0]) == pytest.approx(0.4, rel=1.5e-3)
    assert hullmod.projected_area(t, [0, 0, -1]) == pytest.approx(1.6, rel=1.5e-3)
    s = _sphere(0.5, 4)
    # the tessellated sphere's silhouette is a polygon slightly inside the circle π r²;
    # for 5120 faces the chordal deficit is about 0.3 %; rasterisation adds ≲ 0.1 %
    a = hullmod.projected_area(s, [1, 0, 0])
    assert a == pytest.approx(np.pi * 0.25, rel=6e-3) and a < np.pi * 0.25
    # cross-check with the exact polygon area of the convex hull of the projection (convex body)
    assert a == pytest.approx(hullmod.hull_projected_area(s.reshape(-1, 3), [1, 0, 0]), rel=2e-3)
    # a direction that is not an axis
    d = np.array([1.0, 0.3, -0.2])
    assert hullmod.projected_area(s, d) == pytest.approx(hullmod.hull_projected_area(s.reshape(-1, 3), d), rel=2e-3)


def test_projected_area_union_counts_overlaps_once():
    t = np.concatenate([box_triangles([0, 0, 0], [1, 1, 1]), box_triangles([2, 0.5, 0], [3, 1.5, 1])])
    # two unit boxes one behind the other along x, offset by 0.5 in y: shadow 1.5 × 1
    assert hullmod.projected_area(t, [1, 0, 0]) == pytest.approx(1.5, rel=2e-3)


@pytest.mark.parametrize("seed", range(5))
def test_hull_clearance_equals_brute_force(seed):
    from caseprep.contract.frames import rot_y, rot_z

    rng = np.random.default_rng(seed)
    pts = rng.normal(size=(400, 3)) * [1.0, 0.4, 0.2]
    hull = hullmod.hull_points(pts)
    assert len(hull) < len(pts)
    for _ in range(20):
        R = rot_z(rng.uniform(-0.3, 0.3)) @ rot_y(rng.uniform(-0.2, 0.2))
        tz = rng.uniform(0.0, 1.0)
        h_all = (pts @ R.T)[:, 2] + tz
        h_hull = (hull @ R.T)[:, 2] + tz
        assert h_hull.min() == h_all.min()  # the same vertex: exactly equal


def test_functions_do_not_modify_inputs():
    t = convex_body(np.random.default_rng(1).normal(size=(60, 3)))
    t0 = t.copy()
    checks.inspect_surface(t)
    hullmod.projected_area(t, [1, 0, 0])
    checks.weld(t)
    pts = t.reshape(-1, 3)
    hullmod.hull_points(pts)
    hullmod.hull_projected_area(pts, [1, 0, 0])
    body.analyse(stl.TriSurface(t, np.zeros(len(t), dtype=int), ("body",)))
    np.testing.assert_array_equal(t, t0)


def test_example_geometry_is_clean():
    from pathlib import Path

    root = Path(__file__).resolve().parent.parent / "example_cases"
    for f in ["floor_study/geometry/flat.stl", "floor_study/geometry/diffuser8.stl",
              "floor_study/geometry/diffuser14.stl", "sphere_re100/geometry/sphere.stl"]:
        s = stl.read_stl(root / f)
        r = checks.inspect_surface(s.triangles)
        assert checks.surface_problems(r, f, "k", "m") == [], f


def test_one_binary_rule_for_reading_and_writing(tmp_path):
    # a binary STL whose 80-byte header starts with "solid" (some exporters write that) is binary by its size,
    # for the reader and for the solid names alike (STL format: 80-byte header, uint32 count, 50 bytes a facet)
    import struct

    tri = np.zeros(1, dtype=[("n", "<f4", 3), ("v", "<f4", (3, 3)), ("a", "<u2")])
    tri["v"] = [[0, 0, 0], [1, 0, 0], [0, 1, 0]]
    data = b"solid exported by a CAD tool".ljust(80, b" ") + struct.pack("<I", 1) + tri.tobytes()
    (tmp_path / "b.stl").write_bytes(data)
    assert stl.stl_kind(data) == "binary" and stl.stl_solid_names(data) is None
    s = stl.read_stl(tmp_path / "b.stl")
    assert s.n_triangles == 1 and s.solid_names == ("body",)
    assert stl.stl_kind(b"hello, not an STL") is None
    (tmp_path / "x.stl").write_bytes(b"hello, not an STL")
    with pytest.raises(UserError, match="binary or ASCII STL"):
        stl.read_stl(tmp_path / "x.stl")
