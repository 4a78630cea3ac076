"""Off-screen flow pictures (postproc.report.pictures) on synthetic scenes:
colours read back against the banded scale, non-blank renders, one camera
per view for every variant, orientation, and what happens when rendering
is unavailable.

The pressure fields are our own invented analytic fields (DEMO); the checks
compare the pictures with our own colour scale (common practice, no
source). Needs off-screen rendering (EGL); skipped when it is missing
unless UNDERFLOOR_REQUIRE_RENDERING=1 (set by .ci/run), where it fails.
"""
from __future__ import annotations

import os

import numpy as np
import pytest

from postproc.kernels.planview import PlanGrid, point_average, rasterise_lowest
from postproc.pipelines.case_scene import CaseScene, CoreTrack, SurfaceData, scene_difference
from postproc.report import pictures as pics
from postproc.report.scales import CP_SCALE, DCP_SCALE, SENSE_COLOURS

L, W = 1.0, 0.4  # plate length and width (m)


def _require_rendering():
    problem = pics.rendering_problem()
    if problem is not None:
        if os.environ.get("UNDERFLOOR_REQUIRE_RENDERING") == "1":
            pytest.fail(problem)
        pytest.skip(problem)


def cp_field(x, y):
    """DEMO analytic underside pressure: suction peak mid-plate, Cp from
    −1.7 to +0.8."""
    return 0.8 - 2.5 * np.sin(np.pi * x / L) * np.cos(np.pi * y / W)


def plate(nx=100, ny=40, z=0.02, x0=0.0, cp=cp_field, shear=(1.0, 0.0)):
    xs, ys = np.linspace(x0, x0 + L, nx + 1), np.linspace(-W / 2, W / 2, ny + 1)
    X, Y = np.meshgrid(xs, ys, indexing="ij")
    P = np.stack([X.ravel(), Y.ravel(), np.full(X.size, z)], axis=1)

    def nid(i, j):
        return i * (ny + 1) + j

    q = np.array([[nid(i, j), nid(i + 1, j), nid(i + 1, j + 1), nid(i, j + 1)] for i in range(nx) for j in range(ny)])
    off = np.arange(0, 4 * len(q) + 1, 4)
    c = P[q].mean(axis=1)
    return P, off, q.ravel(), cp(c[:, 0] - x0, c[:, 1]), np.tile([shear[0], shear[1], 0.0], (len(q), 1))


def scene(variant="plate", cp=cp_field, x0=0.0, tracks=(), q_surface=None, shear=(1.0, 0.0)):
    P, off, conn, v, tau = plate(cp=cp, x0=x0, shear=shear)
    body = SurfaceData(P, off, conn, v, "body")
    g = PlanGrid.covering(x0, x0 + L, -W / 2, W / 2, 0.005)
    r = rasterise_lowest(P, off, conn, g, {"shear": tau}, point_values={"cp": point_average(len(P), off, conn, v)})
    return CaseScene(case_id=f"{variant}-0001", variant=variant, label=variant, body=body, underside=r,
                     tracks=tuple(tracks), q_surface=q_surface, q_level=0.05)


def world_xy(camera, row, col, w, h):
    """Body-frame (x, y) under pixel (row, col) of a plan view from below:
    right = +x, down = +y (view up = −y), parallel scale = half the height."""
    s = 2.0 * camera.parallel_scale / h
    fx, fy = camera.focal_point[0], camera.focal_point[1]
    return fx + (col + 0.5 - w / 2) * s, fy + (row + 0.5 - h / 2) * s


@pytest.fixture(scope="module")
def renderer():
    _require_rendering()
    with pics.PictureRenderer(pics.PictureOptions(width=480, height=240)) as r:
        yield r


def test_floor_colours_match_the_scale_within_one_step(renderer):
    s = scene()
    cam = pics.view_cameras([s], renderer.options)["floor"]
    img, notes = renderer.render_array("floor", s, cam)
    h, w = img.shape[:2]
    rows, cols = np.meshgrid(np.arange(20, h - 20, 7), np.arange(20, w - 20, 7), indexing="ij")
    x, y = world_xy(cam, rows.ravel(), cols.ravel(), w, h)
    inside = (x > 0.02) & (x < L - 0.02) & (np.abs(y) < W / 2 - 0.02)
    assert inside.sum() > 500
    got = CP_SCALE.nearest_band(img[rows.ravel()[inside], cols.ravel()[inside]])
    want = CP_SCALE.band_index(cp_field(x[inside], y[inside]))
    # every sampled pixel within one band of the analytic value (edges between
    # bands blend two neighbouring colours), nearly all in the right band
    assert np.abs(got - want).max() <= 1
    assert np.mean(got == want) > 0.9
    # and the pixel colours are the scale's own colours (unlit rendering)
    d = np.abs(img[rows.ravel()[inside], cols.ravel()[inside]].astype(int)
               - CP_SCALE.band_colours()[got].astype(int)).max(axis=1)
    assert np.mean(d <= 3) > 0.85


def test_orientation_nose_left_right_side_down(renderer):
    # Cp rises with x and with y: the picture must get warmer to the right
    # (nose on the left) and towards the bottom (driver's right, +y, at the bottom)
    s = scene(cp=lambda x, y: -1.5 + 1.5 * x / L + 1.5 * y / W)
    cam = pics.view_cameras([s], renderer.options)["floor"]
    img, _ = renderer.render_array("floor", s, cam)
    h, w = img.shape[:2]
    band = CP_SCALE.nearest_band(img)
    assert band[h // 2, int(0.25 * w)] < band[h // 2, int(0.75 * w)]
    assert band[int(0.3 * h), w // 2] < band[int(0.7 * h), w // 2]


def test_every_view_is_non_blank_and_cameras_are_shared():
    _require_rendering()
    sense_surf = SurfaceData(np.array([[0.6, -0.1, 0.0], [0.9, -0.1, 0.0], [0.9, -0.1, 0.015],
                                       [0.6, 0.1, 0.0], [0.9, 0.1, 0.0], [0.9, 0.1, 0.015]]),
                             np.array([0, 3, 6]), np.array([0, 1, 2, 3, 4, 5]), np.array([1.0, -1.0]), "Q")
    tr = (CoreTrack(np.array([[0.6, -0.1, 0.01], [0.8, -0.12, 0.012], [1.0, -0.14, 0.013]]), +1),
          CoreTrack(np.array([[0.6, 0.1, 0.01], [0.8, 0.12, 0.012], [1.0, 0.14, 0.013]]), -1))
    a = scene("flat")
    b = scene("ramp", cp=lambda x, y: cp_field(x + 0.1, y) - 0.25, x0=0.1, tracks=tr, q_surface=sense_surf,
              shear=(-1.0, 0.2))
    scenes = [a, scene_difference(b, a)]
    opts = pics.PictureOptions(width=400, height=200)
    ps = pics.render_pictures(scenes, baseline="flat", options=opts)
    assert set(ps.pictures) == {"flat", "ramp"}
    assert "difference" not in ps.pictures["flat"] and "difference" in ps.pictures["ramp"]
    from io import BytesIO

    from PIL import Image

    for variant, views in ps.pictures.items():
        for view, p in views.items():
            im = np.asarray(Image.open(BytesIO(p.data)).convert("RGB"))
            assert im.shape == (200, 400, 3) and p.mime == "image/png"
            assert im.reshape(-1, 3).std(axis=0).max() > 10.0, (variant, view)  # not blank
            # one camera per view for every variant, framed on both bodies
            assert p.camera == ps.cameras[view]
    # the difference picture of a uniform −0.25 shift sits in the band [−0.3, −0.2)
    im = np.asarray(Image.open(BytesIO(ps.pictures["ramp"]["difference"].data)).convert("RGB"))
    cam = ps.cameras["difference"]
    x, y = world_xy(cam, 100, np.arange(0, 400), 400, 200)
    inside = (x > 0.15) & (x < 0.95)
    bands = DCP_SCALE.nearest_band(im[100, inside])
    assert np.all(bands == DCP_SCALE.band_index(-0.25))
    # the vortex picture shows both rotation senses
    im = np.asarray(Image.open(BytesIO(ps.pictures["ramp"]["vortices"].data)).convert("RGB")).reshape(-1, 3)
    for s in (+1, -1):
        c = np.asarray(SENSE_COLOURS[s], dtype=float)
        hue = c / np.linalg.norm(c)
        cos = (im.astype(float) @ hue) / np.maximum(np.linalg.norm(im.astype(float), axis=1), 1e-9)
        assert np.count_nonzero(cos > 0.995) > 20
    # the shear picture shades the reversed underside of "ramp" (τ_x < 0 everywhere … relative to its
    # attached sign +1 given in the scene)
    im = np.asarray(Image.open(BytesIO(ps.pictures["ramp"]["shear"].data)).convert("RGB")).reshape(-1, 3)
    assert np.count_nonzero(np.all(np.abs(im.astype(int) - pics.SHEAR_STATE_COLOURS[1]) <= 2, axis=1)) > 1000


def test_missing_baseline_names_the_available_ones():
    from caseprep.contract.errors import UserError

    with pytest.raises(UserError, match="flat, ramp"):
        pics.render_pictures([scene("flat"), scene("ramp")], baseline="wedge")


def test_missing_egl_library_is_found_before_trying(monkeypatch):
    import ctypes.util

    monkeypatch.setenv("VTK_DEFAULT_OPENGL_WINDOW", "vtkEGLRenderWindow")
    monkeypatch.setattr(ctypes.util, "find_library", lambda name: None)
    assert "libEGL" in pics._libraries_problem()
    monkeypatch.setenv("VTK_DEFAULT_OPENGL_WINDOW", "vtkOSOpenGLRenderWindow")
    assert "OSMesa" in pics._libraries_problem()


def test_rendering_unavailable_gives_the_install_command(monkeypatch):
    monkeypatch.setattr(pics, "_STATUS", {})
    monkeypatch.setattr(pics, "_probe", lambda: (None, "no display and no EGL library (libEGL) installed"))
    problem = pics.rendering_problem()
    assert problem is not None and "libegl1" in problem and "apt-get install" in problem
    with pytest.raises(pics.RenderingUnavailable, match="libegl-mesa0"):
        pics.PictureRenderer()
