"""Flow pictures, rendered off-screen with VTK (through pyvista): no GPU, no
display. Rendering only — the scenes (:class:`postproc.pipelines.case_scene.CaseScene`, read by attribute)
arrive computed.

Headless rendering. The ``vtk`` wheel carries an EGL render window; with
Mesa's EGL (Debian ``libegl1`` + ``libegl-mesa0``) it renders on the CPU
(llvmpipe) without any X server. When no display is set, this module asks
VTK for that window (``VTK_DEFAULT_OPENGL_WINDOW=vtkEGLRenderWindow``) so
that VTK does not first try X. OSMesa works as well where EGL does not:
install ``libosmesa6`` and set ``VTK_DEFAULT_OPENGL_WINDOW=
vtkOSOpenGLRenderWindow`` before running. Whether rendering works is
probed once per process: the libraries are looked up first (nothing is
tried without them), then a tiny picture is rendered; when that fails, the
report is written without pictures and says why, with the install command.

Views (one fixed camera per view for every variant of a report, framed on
the union of all the variants' bodies, so that pictures compare pixel for
pixel):

``floor``       the body seen from below, coloured by Cp (banded scale
                :data:`postproc.report.scales.CP_SCALE`, unlit so that
                colours are exact);
``ground``      Cp on the ground plane under the vehicle, same camera;
``difference``  Cp of the variant minus Cp of the baseline on the common
                plan grid (:data:`~postproc.report.scales.DCP_SCALE`);
``vortices``    iso-surfaces of Q/(V/h)² coloured by the rotation sense,
                the tracked core centres, the body in grey; seen from
                behind, below and the left;
``shear``       wall-shear streak lines on the underside seen from below,
                reversed-flow areas shaded and the separation and
                reattachment lines (zero streamwise shear) drawn.

Plan views are seen from below: nose on the left, the driver's right side
(+y) at the bottom of the picture.
"""
from __future__ import annotations

import io
import os
import time
from dataclasses import dataclass, field

import numpy as np

from caseprep.contract.errors import UserError

from .scales import CP_SCALE, DCP_SCALE, NEUTRAL, SENSE_COLOURS, BandedScale

VIEWS = ("floor", "ground", "difference", "vortices", "shear")
VIEW_TITLES = {
    "floor": "Floor pressure, seen from below",
    "ground": "Ground-plane pressure footprint",
    "difference": "Floor pressure change against the baseline",
    "vortices": "Vortex cores under the floor",
    "shear": "Wall-shear streak lines on the underside",
}
INSTALL_HINT = ("sudo apt-get install -y --no-install-recommends libegl1 libegl-mesa0 "
                "(or libosmesa6 and VTK_DEFAULT_OPENGL_WINDOW=vtkOSOpenGLRenderWindow)")


class RenderingUnavailable(UserError):
    """Off-screen rendering does not work on this machine."""


@dataclass(frozen=True)
class PictureOptions:
    """How pictures are drawn. ``width``/``height`` in pixels;
    ``image_format`` ``png`` or ``webp`` (lossless); ``margin`` fraction of
    the framed extent left free around it."""

    width: int = 960
    height: int = 380
    image_format: str = "png"
    cp_scale: BandedScale = CP_SCALE
    dcp_scale: BandedScale = DCP_SCALE
    margin: float = 0.04
    views: tuple[str, ...] = VIEWS

    def __post_init__(self):
        if self.image_format not in ("png", "webp"):
            raise ValueError(f"expected image_format 'png' or 'webp', got {self.image_format!r}")
        bad = [v for v in self.views if v not in VIEWS]
        if bad:
            raise ValueError(f"expected views among {VIEWS}, got {bad}")


@dataclass(frozen=True)
class Camera:
    """A parallel-projection camera (body frame, m)."""

    position: tuple[float, float, float]
    focal_point: tuple[float, float, float]
    view_up: tuple[float, float, float]
    parallel_scale: float

    def to_dict(self) -> dict:
        return {"position": list(self.position), "focal_point": list(self.focal_point),
                "view_up": list(self.view_up), "parallel_scale": self.parallel_scale}


@dataclass(frozen=True, eq=False)
class Picture:
    """One rendered picture: encoded image bytes and what it shows."""

    view: str
    case_id: str
    variant: str
    title: str
    caption: str
    data: bytes
    mime: str
    width: int
    height: int
    camera: Camera
    seconds: float
    notes: tuple[str, ...] = ()


# --------------------------------------------------------------------------- availability

_STATUS: dict[str, str | None] = {}


def _select_backend() -> None:
    if not os.environ.get("DISPLAY") and not os.environ.get("VTK_DEFAULT_OPENGL_WINDOW"):
        os.environ["VTK_DEFAULT_OPENGL_WINDOW"] = "vtkEGLRenderWindow"


def _libraries_problem() -> str | None:
    """Why off-screen rendering cannot even be tried here (no display, no
    EGL library, or OSMesa asked for and missing), else None."""
    import ctypes.util

    window = os.environ.get("VTK_DEFAULT_OPENGL_WINDOW", "")
    if window == "vtkOSOpenGLRenderWindow":
        return None if ctypes.util.find_library("OSMesa") else "the OSMesa library (libOSMesa) is not installed"
    if window == "vtkEGLRenderWindow" or not os.environ.get("DISPLAY"):
        return None if ctypes.util.find_library("EGL") else "no display and no EGL library (libEGL) installed"
    return None


def _probe() -> tuple[str | None, str | None]:
    """Render a tiny picture in this process: (render window class, None)
    or (None, why it failed)."""
    try:
        import pyvista as pv
    except ImportError as exc:
        return None, f"pyvista/vtk cannot be imported ({exc}); install the package's dependencies (pip install -e .)"
    problem = _libraries_problem()
    if problem is not None:
        return None, problem
    try:
        pl = pv.Plotter(off_screen=True, window_size=(16, 16))
        try:
            pl.add_mesh(pv.Sphere(), color="white")
            img = pl.screenshot(return_img=True)
            backend = pl.ren_win.GetClassName()
        finally:
            pl.close()
    except Exception as exc:  # any failure of the OpenGL set-up means: no pictures
        return None, f"off-screen rendering failed ({type(exc).__name__}: {exc})"
    if img is None or img.shape[0] != 16 or not img.std() > 0:
        return None, "off-screen rendering gave a blank picture"
    return backend, None


def rendering_problem() -> str | None:
    """None when off-screen rendering works here, else why not, with the
    install command. Probed once per process: the libraries are looked up
    first (nothing is tried without them), then a tiny picture is rendered."""
    if "problem" in _STATUS:
        return _STATUS["problem"]
    _select_backend()
    backend, problem = _probe()
    if problem is not None:
        problem += f". Fix: {INSTALL_HINT}"
    _STATUS["backend"] = backend
    _STATUS["problem"] = problem
    return problem


def rendering_backend() -> str | None:
    """The VTK render window class the probe used (e.g. vtkEGLRenderWindow)."""
    rendering_problem()
    return _STATUS.get("backend")


# --------------------------------------------------------------------------- cameras

def _unit(v) -> np.ndarray:
    v = np.asarray(v, dtype=float)
    return v / np.linalg.norm(v)


def _frame(corners: np.ndarray, direction, up, aspect: float, margin: float) -> Camera:
    """A parallel camera looking along ``direction`` with ``up`` framing the
    points ``corners`` (K, 3)."""
    d, u = _unit(direction), _unit(up)
    r = np.cross(d, u)
    u = np.cross(r, d)
    pr, pu = corners @ r, corners @ u
    cr, cu = 0.5 * (pr.max() + pr.min()), 0.5 * (pu.max() + pu.min())
    depth = corners @ d
    centre = cr * r + cu * u + 0.5 * (depth.max() + depth.min()) * d
    half = max(0.5 * (pu.max() - pu.min()), 0.5 * (pr.max() - pr.min()) / aspect) * (1.0 + 2.0 * margin)
    span = float(np.ptp(depth)) + float(np.ptp(pr)) + float(np.ptp(pu)) + 1e-9
    pos = centre - 2.0 * span * d
    return Camera(tuple(float(v) for v in pos), tuple(float(v) for v in centre), tuple(float(v) for v in u),
                  float(max(half, 1e-9)))


def view_cameras(scenes, options: PictureOptions = PictureOptions()) -> dict[str, Camera]:
    """One camera per view for all ``scenes``: framed on the union of the
    bodies' bounding boxes (plan views: their x–y extent)."""
    b = np.array([s.body.bounds for s in scenes if s.body.n_faces], dtype=float)
    if b.size == 0:
        raise ValueError("expected at least one scene with a body surface")
    lo = np.array([b[:, 0].min(), b[:, 2].min(), b[:, 4].min()])
    hi = np.array([b[:, 1].max(), b[:, 3].max(), b[:, 5].max()])
    corners = np.array([[x, y, z] for x in (lo[0], hi[0]) for y in (lo[1], hi[1]) for z in (lo[2], hi[2])])
    aspect = options.width / options.height
    plan = _frame(corners, (0.0, 0.0, 1.0), (0.0, -1.0, 0.0), aspect, options.margin)
    # behind (+x), left (−y) and below (−z) the car, looking at it
    oblique = _frame(corners, (-1.0, 0.75, 0.55), (0.0, 0.0, 1.0), aspect, options.margin)
    return {"floor": plan, "ground": plan, "difference": plan, "shear": plan, "vortices": oblique}


# --------------------------------------------------------------------------- drawing

def _polydata(s, with_values: bool = True):
    """Polygons (attributes points, offsets, connectivity, values) as PolyData."""
    import pyvista as pv

    counts = np.diff(s.offsets)
    faces = np.insert(np.asarray(s.connectivity, dtype=np.int64), np.asarray(s.offsets[:-1], dtype=np.int64),
                      counts) if counts.size else np.zeros(0, dtype=np.int64)
    pd = pv.PolyData(np.asarray(s.points, dtype=float), faces=faces)
    if with_values and s.values is not None:
        pd.cell_data["v"] = np.asarray(s.values, dtype=float)
    return pd


def _lut(scale: BandedScale, nan_rgb=NEUTRAL["background"]):
    """The banded scale as a pyvista lookup table (one entry per band)."""
    import pyvista as pv

    cols = scale.band_colours()
    lut = pv.LookupTable(values=np.column_stack([cols, np.full(len(cols), 255)]).astype(np.uint8),
                         scalar_range=(scale.lo, scale.hi), nan_color=_rgb(nan_rgb))
    return lut


#: attached (pale) and reversed (light orange) underside in the shear view
SHEAR_STATE_COLOURS = ((236, 233, 224), (246, 190, 130))


def _shear_lut():
    import pyvista as pv

    cols = np.array([list(c) + [255] for c in SHEAR_STATE_COLOURS], dtype=np.uint8)
    return pv.LookupTable(values=cols, scalar_range=(-0.5, 1.5), nan_color=_rgb(NEUTRAL["background"]))


def _grid_image(spacing: float, i0: int, j0: int, values: np.ndarray, z: float):
    """Values on a plan grid (cells [i·d, (i+1)·d) × [j·d, (j+1)·d) from
    (i0, j0)) as an ImageData whose points are the cell centres, so that
    scalars interpolate between centres and contour lines follow them."""
    import pyvista as pv

    v = np.asarray(values, dtype=float)
    nx, ny = v.shape
    img = pv.ImageData(dimensions=(nx, ny, 1), spacing=(spacing, spacing, 1.0),
                       origin=((i0 + 0.5) * spacing, (j0 + 0.5) * spacing, z))
    img.point_data["v"] = v.ravel(order="F")
    return img


def _raster_image(raster, values: np.ndarray, z: float):
    """A plan raster (attributes ``grid.spacing``, ``grid.i0``, ``grid.j0``)
    with ``values`` on its cells as an ImageData (:func:`_grid_image`)."""
    return _grid_image(raster.grid.spacing, raster.grid.i0, raster.grid.j0, values, z)


def _polylines(lines, z: float | None = None):
    """Several polylines (K_i, 3) as one PolyData (one actor draws them all);
    ``z`` replaces their heights (plan views)."""
    import pyvista as pv

    if not lines:
        return None
    pts = np.concatenate(lines).astype(float)
    if z is not None:
        pts[:, 2] = z
    cells = []
    base = 0
    for q in lines:
        n = q.shape[0]
        cells.append(np.concatenate([[n], base + np.arange(n)]))
        base += n
    return pv.PolyData(pts, lines=np.concatenate(cells).astype(np.int64))


def _rgb(c) -> tuple[float, float, float]:
    return tuple(v / 255.0 for v in c)


class PictureRenderer:
    """Renders pictures with one off-screen window reused for all of them
    (creating a window costs ~1 s). Use as a context manager."""

    def __init__(self, options: PictureOptions = PictureOptions()):
        problem = rendering_problem()
        if problem is not None:
            raise RenderingUnavailable(problem)
        import pyvista as pv

        self.options = options
        self._pv = pv
        self.plotter = pv.Plotter(off_screen=True, window_size=(options.width, options.height))
        self.plotter.set_background(_rgb(NEUTRAL["background"]))

    def close(self) -> None:
        if self.plotter is not None:
            self.plotter.close()
            self.plotter = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    # ---- one view
    def _finish(self, camera: Camera) -> np.ndarray:
        pl = self.plotter
        c = pl.renderer.GetActiveCamera()
        c.ParallelProjectionOn()
        c.SetPosition(*camera.position)
        c.SetFocalPoint(*camera.focal_point)
        c.SetViewUp(*camera.view_up)
        c.SetParallelScale(camera.parallel_scale)
        # pyvista re-frames the view on the first render unless told the camera is set
        pl.renderer.camera_set = True
        pl.renderer.ResetCameraClippingRange()
        pl.ren_win.Render()
        return self._read_pixels()

    def _read_pixels(self) -> np.ndarray:
        """The rendered window as an RGB array (H, W, 3), top row first."""
        import vtk
        from vtkmodules.util.numpy_support import vtk_to_numpy

        f = vtk.vtkWindowToImageFilter()
        f.SetInput(self.plotter.ren_win)
        f.SetInputBufferTypeToRGB()
        f.ReadFrontBufferOff()
        f.Update()
        img = f.GetOutput()
        w, h, _ = img.GetDimensions()
        a = vtk_to_numpy(img.GetPointData().GetScalars()).reshape(h, w, -1)
        return np.ascontiguousarray(a[::-1, :, :3])

    def _encode(self, img: np.ndarray) -> tuple[bytes, str]:
        from PIL import Image

        buf = io.BytesIO()
        im = Image.fromarray(np.ascontiguousarray(img[..., :3]))
        if self.options.image_format == "webp":
            im.save(buf, "WEBP", lossless=True, quality=80, method=4)
            return buf.getvalue(), "image/webp"
        im.save(buf, "PNG", optimize=True)
        return buf.getvalue(), "image/png"

    def render_array(self, view: str, scene, camera: Camera,
                     baseline=None) -> tuple[np.ndarray, list[str]]:
        """The picture of ``view`` as an RGB array (H, W, 3) and notes."""
        pl = self.plotter
        pl.clear_actors()
        pl.renderer.RemoveAllViewProps()  # also the actors added through VTK directly
        notes: list[str] = []
        o = self.options
        if view in ("floor", "ground", "difference", "shear"):
            self._add_outline(scene)
        if view == "floor":
            self._add_scalar_surface(scene.body, o.cp_scale)
        elif view == "ground":
            if scene.ground is None or scene.ground.values is None:
                notes.append("no ground pressure in this case")
            else:
                self._add_scalar_surface(scene.ground, o.cp_scale)
        elif view == "difference":
            d = getattr(scene, "cp_difference", None)
            if d is None:
                notes.append("no difference to the baseline (no baseline, or no underside raster)")
            else:
                z = scene.body.bounds[4] - 1e-3
                img = _raster_image(d, d.values["cp"], z)
                self._add_scalar_image(img, o.dcp_scale)
        elif view == "shear":
            self._add_shear(scene, notes)
        elif view == "vortices":
            self._add_vortices(scene, notes)
        else:
            raise ValueError(f"unknown view {view!r}")
        return self._finish(camera), notes

    def render(self, view: str, scene, camera: Camera, baseline=None) -> Picture:
        t0 = time.perf_counter()
        img, notes = self.render_array(view, scene, camera, baseline)
        data, mime = self._encode(img)
        return Picture(view=view, case_id=scene.case_id, variant=scene.variant, title=VIEW_TITLES[view],
                       caption=scene.label, data=data, mime=mime, width=img.shape[1], height=img.shape[0],
                       camera=camera, seconds=time.perf_counter() - t0, notes=tuple(notes))

    # ---- drawing helpers
    def _add_scalar_surface(self, s, scale: BandedScale) -> None:
        pd = _polydata(s).cell_data_to_point_data()
        self._add_scalar_mesh(pd, scale)

    def _add_scalar_image(self, img, scale: BandedScale) -> None:
        self._add_scalar_mesh(img, scale)

    def _add_scalar_mesh(self, mesh, scale: BandedScale) -> None:
        """Unlit, so that every pixel has exactly a band colour of the scale
        (or a blend of two neighbouring bands on a band edge)."""
        self.plotter.add_mesh(mesh, scalars="v", preference="point", cmap=_lut(scale), clim=(scale.lo, scale.hi),
                              interpolate_before_map=True, lighting=False, show_scalar_bar=False,
                              nan_color=_rgb(NEUTRAL["background"]))

    def _add_outline(self, scene) -> None:
        """The body's plan outline (its underside raster's edge) over a picture."""
        r = scene.underside
        if r is None:
            return
        z = scene.body.bounds[4] - 0.5 * max(scene.body.bounds[5] - scene.body.bounds[4], 1e-3)
        # one empty ring around the raster so that the outline closes at its edges
        mask = np.pad(np.asarray(r.face) >= 0, 1).astype(float)
        img = _grid_image(r.grid.spacing, r.grid.i0 - 1, r.grid.j0 - 1, mask, z)
        line = img.contour([0.5], scalars="v")
        if line.n_points:
            self.plotter.add_mesh(line, color=_rgb(NEUTRAL["streak"]), line_width=1.2, lighting=False)

    def _add_shear(self, scene, notes: list[str]) -> None:
        r = scene.underside
        if r is None or "shear" not in r.values:
            notes.append("no wall shear on the underside")
            return
        tx = r.values["shear"][..., 0] * scene.attached_sign
        z = scene.body.bounds[4] - 1e-3
        # attached (pale) and reversed (orange) areas, banded at zero streamwise shear
        state = np.where(np.isfinite(tx), np.where(tx < 0, 1.0, 0.0), np.nan)
        img = _raster_image(r, state, z)
        shade = BandedScale(name="shear-state", quantity="reversed", lo=-0.5, hi=1.5, step=1.0, centre=0.5)
        self.plotter.add_mesh(img, scalars="v", preference="point", cmap=_shear_lut(), clim=(shade.lo, shade.hi),
                              interpolate_before_map=True, lighting=False, show_scalar_bar=False,
                              nan_color=_rgb(NEUTRAL["background"]))
        # separation/reattachment lines: zero streamwise shear
        timg = _raster_image(r, np.where(np.isfinite(tx), tx, np.nan), z - 2e-4)
        valid = np.isfinite(timg.point_data["v"])
        if valid.any():
            timg.point_data["v"] = np.where(valid, timg.point_data["v"], 0.0)
            line = timg.contour([0.0], scalars="v")
            if line.n_points:
                self.plotter.add_mesh(line, color=(0.0, 0.25, 0.6), line_width=3, lighting=False)
        lines = _polylines([q for q in scene.streaks if q.shape[0] >= 2], z - 1e-4)
        if lines is not None:
            self.plotter.add_mesh(lines, color=_rgb(NEUTRAL["streak"]), line_width=1, lighting=False)
        if not scene.streaks:
            notes.append("no streak lines (no wall shear on the underside)")

    def _add_vortices(self, scene, notes: list[str]) -> None:
        pv = self._pv
        pl = self.plotter
        pl.add_mesh(_polydata(scene.body, with_values=False),
                    color=_rgb(NEUTRAL["body"]), smooth_shading=False, ambient=0.5, diffuse=0.5)
        size = max(scene.body.bounds[1] - scene.body.bounds[0], 1e-3)
        if scene.q_level is not None:
            notes.append(f"iso-surface Q/(V/h)² = {scene.q_level:g}"
                         + (f", h = {1000 * scene.ride_height:.1f} mm" if scene.ride_height else ""))
        if scene.q_surface is not None and scene.q_surface.n_faces:
            qs = _polydata(scene.q_surface)
            sense = np.asarray(scene.q_surface.values)
            for s in (+1, -1):
                part = qs.extract_cells(np.flatnonzero(sense == s)) if (sense == s).any() else None
                if part is not None and part.n_cells:
                    # translucent, so that the tracked core centres inside show
                    pl.add_mesh(part.extract_surface(algorithm=None), color=_rgb(SENSE_COLOURS[s]), smooth_shading=True,
                                ambient=0.3, diffuse=0.7, specular=0.1, opacity=0.55)
        else:
            notes.append("no Q iso-surface at this level")
        for s in (+1, -1):
            tr = [np.asarray(t.centres, dtype=float) for t in scene.tracks if t.sense == s]
            if not tr:
                continue
            col = tuple(0.55 * v for v in _rgb(SENSE_COLOURS[s]))
            lines = _polylines([c for c in tr if c.shape[0] >= 2])
            if lines is not None:
                pl.add_mesh(lines.tube(radius=0.003 * size, n_sides=8), color=col, ambient=0.4)
            pts = pv.PolyData(np.concatenate(tr))
            pl.add_mesh(pts.glyph(geom=pv.Sphere(radius=0.006 * size, theta_resolution=10, phi_resolution=10),
                                  scale=False, orient=False), color=col, ambient=0.4)
        if not scene.tracks:
            notes.append("no tracked cores")


# --------------------------------------------------------------------------- whole reports

@dataclass(frozen=True, eq=False)
class PictureSet:
    """The pictures of a report: by variant, then view; the cameras used;
    timings (s) per case; notes (skipped cases, failures)."""

    pictures: dict[str, dict[str, Picture]]
    cameras: dict[str, Camera]
    seconds: dict[str, float] = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    backend: str | None = None


def render_pictures(scenes, *, baseline: str | None = None,
                    options: PictureOptions = PictureOptions()) -> PictureSet:
    """All views of every scene (one scene per variant) with one camera per
    view. ``baseline``: the variant the differences are taken against
    (None: no difference pictures). Raises :class:`RenderingUnavailable`
    when off-screen rendering does not work."""
    if not scenes:
        return PictureSet({}, {})
    base = None
    if baseline is not None:
        base = next((s for s in scenes if s.variant == baseline), None)
        if base is None:
            raise UserError(expected="a baseline variant among the pictured variants",
                            got=baseline, key="baseline",
                            fix="choose one of: " + ", ".join(s.variant for s in scenes))
    cams = view_cameras(scenes, options)
    out: dict[str, dict[str, Picture]] = {}
    secs: dict[str, float] = {}
    with PictureRenderer(options) as r:
        for s in scenes:
            t0 = time.perf_counter()
            pics = {}
            for v in options.views:
                if v == "difference" and (base is None or s is base):
                    continue
                pics[v] = r.render(v, s, cams[v], baseline=base)
            out[s.variant] = pics
            secs[s.case_id] = time.perf_counter() - t0
    return PictureSet(out, cams, secs, backend=rendering_backend())
