"""Geometry: STL reading (I/O layer), surface checks and measurements (numpy kernels).

Coordinates are in the **body frame** (x rearward, y right, z up, see
:mod:`caseprep.frames`) in metres, after scaling by the config's
``length_unit``. Only :func:`read_stl` touches files; every other function
takes arrays and returns arrays or dataclasses and never modifies its input.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .errors import UserError

LENGTH_UNITS = {"m": 1.0, "mm": 1.0e-3, "in": 0.0254}

_BIN_DTYPE = np.dtype([("n", "<f4", (3,)), ("v", "<f4", (3, 3)), ("attr", "<u2")])
_VERTEX_RE = re.compile(rb"vertex\s+(\S+)\s+(\S+)\s+(\S+)")
_SOLID_RE = re.compile(rb"^\s*solid[ \t]*([^\r\n]*)$(.*?)^\s*endsolid[^\r\n]*$", re.S | re.M)

# Plausible body sizes (m): a largest extent outside this range almost
# certainly means a wrong length_unit (common practice, no source).
PLAUSIBLE_SIZE = (0.01, 60.0)


@dataclass(frozen=True)
class Surface:
    """A triangulated surface in the body frame.

    ``triangles``: (M, 3, 3) float64 vertex coordinates, m.
    ``solid``: (M,) int index into ``solid_names`` for each triangle.
    ``solid_names``: names of the solids (patch names), in file order.
    """

    triangles: np.ndarray
    solid: np.ndarray
    solid_names: tuple[str, ...]
    source: str = ""

    @property
    def n_triangles(self) -> int:
        return int(self.triangles.shape[0])

    def select(self, names) -> "Surface":
        """The sub-surface made of the solids in ``names``."""
        idx = [i for i, n in enumerate(self.solid_names) if n in set(names)]
        keep = np.isin(self.solid, idx)
        remap = -np.ones(len(self.solid_names), dtype=int)
        remap[idx] = np.arange(len(idx))
        return Surface(self.triangles[keep], remap[self.solid[keep]], tuple(self.solid_names[i] for i in idx), self.source)


def _sanitise_solid_name(raw: str, index: int) -> str:
    name = raw.strip().split()[0] if raw.strip() else ""
    name = re.sub(r"[^A-Za-z0-9_]", "_", name)
    if not name or not name[0].isalpha():
        name = f"solid{index}" if not name else f"s_{name}"
    return name


def read_stl(path: str | Path, length_unit: str = "m", default_name: str = "body") -> Surface:
    """Read a binary or ASCII STL file into a :class:`Surface` (m, body frame).

    Binary files hold one solid named ``default_name``. ASCII files may hold
    several ``solid NAME … endsolid`` blocks; each becomes a patch named NAME
    (characters other than letters, digits and ``_`` become ``_``).
    Coordinates are multiplied by the ``length_unit`` scale (m, mm or in).
    Raises :class:`UserError` for a missing or unreadable file.
    """
    p = Path(path)
    if length_unit not in LENGTH_UNITS:
        raise UserError(expected="a length unit in " + ", ".join(LENGTH_UNITS), got=length_unit, file=str(p))
    if not p.is_file():
        raise UserError(expected="an existing STL file", got=str(p), fix="check the path (relative paths are relative to the config file)")
    data = p.read_bytes()
    scale = LENGTH_UNITS[length_unit]
    tris, solid, names = None, None, None
    if len(data) >= 84:
        n = int(np.frombuffer(data, dtype="<u4", count=1, offset=80)[0])
        if len(data) == 84 + 50 * n and n > 0:
            rec = np.frombuffer(data, dtype=_BIN_DTYPE, count=n, offset=84)
            tris = rec["v"].astype(np.float64)
            solid = np.zeros(n, dtype=int)
            names = (default_name,)
    if tris is None:
        if not data.lstrip().startswith(b"solid"):
            raise UserError(expected="a binary or ASCII STL file", got="a file of another format", file=str(p),
                            fix="export the geometry as STL")
        blocks = list(_SOLID_RE.finditer(data))
        if not blocks:
            raise UserError(expected="an ASCII STL with 'solid … endsolid' blocks", got="none", file=str(p))
        parts, ids, nm = [], [], []
        for i, b in enumerate(blocks):
            v = _VERTEX_RE.findall(b.group(2))
            try:
                arr = np.array(v, dtype=np.float64).reshape(-1, 3)
            except ValueError:
                raise UserError(expected="numbers after 'vertex'", got="unreadable text", file=str(p),
                                key=f"solid {i + 1}") from None
            if arr.shape[0] % 3:
                raise UserError(expected="three vertices per facet", got=f"{arr.shape[0]} vertices", file=str(p),
                                key=f"solid {i + 1}")
            name = _sanitise_solid_name(b.group(1).decode("ascii", "replace"), i)
            if name in nm:
                name = f"{name}_{i}"
            parts.append(arr.reshape(-1, 3, 3))
            ids.append(np.full(arr.shape[0] // 3, i, dtype=int))
            nm.append(name)
        tris = np.concatenate(parts) if parts else np.zeros((0, 3, 3))
        solid = np.concatenate(ids) if ids else np.zeros(0, dtype=int)
        names = tuple(nm)
    if tris.shape[0] == 0:
        raise UserError(expected="at least one triangle", got="an empty STL", file=str(p))
    if not np.all(np.isfinite(tris)):
        raise UserError(expected="finite coordinates", got="NaN or infinite values", file=str(p))
    return Surface(tris * scale, solid, names, str(p))


def write_stl_ascii(path: str | Path, solids: list[tuple[str, np.ndarray]]) -> str:
    """ASCII STL text for ``solids`` = [(name, (M,3,3) triangles in m)], and
    write it atomically to ``path``. Normals are computed from the vertex
    order (right-hand rule). Returns the text."""
    from .safeio import write_text_atomic

    lines = []
    for name, tris in solids:
        t = np.asarray(tris, dtype=float)
        n = np.cross(t[:, 1] - t[:, 0], t[:, 2] - t[:, 0])
        ln = np.linalg.norm(n, axis=1, keepdims=True)
        n = n / np.where(ln > 0, ln, 1.0)
        lines.append(f"solid {name}")
        for k in range(t.shape[0]):
            lines.append(f"  facet normal {n[k, 0]:.6g} {n[k, 1]:.6g} {n[k, 2]:.6g}")
            lines.append("    outer loop")
            for j in range(3):
                lines.append(f"      vertex {t[k, j, 0]:.10g} {t[k, j, 1]:.10g} {t[k, j, 2]:.10g}")
            lines.append("    endloop")
            lines.append("  endfacet")
        lines.append(f"endsolid {name}")
    text = "\n".join(lines) + "\n"
    write_text_atomic(path, text)
    return text


# --------------------------------------------------------------------------- kernels


def weld(triangles: np.ndarray, rel_tol: float = 2.0**-20) -> tuple[np.ndarray, np.ndarray]:
    """Merge coincident vertices. Returns (points (N,3) m, faces (M,3) int).

    Coordinates are rounded to a grid of ``rel_tol`` × (largest bounding-box
    side), about 1e-6 of the body size, and vertices on the same grid point
    are one vertex. The three grid indices (21 bits each) are packed into one
    64-bit key so the merge is a 1-D sort.
    """
    t = np.asarray(triangles, dtype=float)
    v = t.reshape(-1, 3)
    lo = v.min(axis=0)
    size = float((v.max(axis=0) - lo).max()) or 1.0
    q = np.round((v - lo) / (size * rel_tol)).astype(np.int64)
    key = (q[:, 0] << 42) | (q[:, 1] << 21) | q[:, 2]
    _, first, inverse = np.unique(key, return_index=True, return_inverse=True)
    return v[first], inverse.reshape(-1, 3)


@dataclass(frozen=True)
class SurfaceReport:
    """Topology and size facts of a surface (m, m², m³, body frame)."""

    n_triangles: int
    n_points: int
    open_edges: int            # undirected edges used by one face only
    nonmanifold_edges: int     # undirected edges used by more than two faces
    misoriented_edges: int     # edges used twice in the same direction
    degenerate_faces: int      # zero-area faces (after welding)
    volume: float              # signed enclosed volume, m³ (> 0: outward normals)
    area: float                # surface area, m²
    bounds: tuple[tuple[float, float, float], tuple[float, float, float]]

    @property
    def closed(self) -> bool:
        return self.open_edges == 0 and self.nonmanifold_edges == 0

    @property
    def extent(self) -> np.ndarray:
        return np.asarray(self.bounds[1]) - np.asarray(self.bounds[0])


def inspect_surface(triangles: np.ndarray, welded: tuple[np.ndarray, np.ndarray] | None = None) -> SurfaceReport:
    """Topology checks of a triangulated surface (input untouched).

    Closed: every undirected edge shared by exactly two faces. Consistently
    oriented: each of those edges used once in each direction. Degenerate:
    faces whose area is below 1e-12 × (bbox diagonal)² or with repeated
    welded vertices. Volume by the divergence theorem, V = Σ v0·(v1×v2)/6.
    ``welded``: the result of :func:`weld` for these triangles, if already computed.
    """
    t = np.asarray(triangles, dtype=float)
    pts, faces = welded if welded is not None else weld(t)
    n = len(pts)
    cr = np.cross(t[:, 1] - t[:, 0], t[:, 2] - t[:, 0])
    area2 = np.linalg.norm(cr, axis=1)
    lo, hi = t.reshape(-1, 3).min(axis=0), t.reshape(-1, 3).max(axis=0)
    diag = float(np.linalg.norm(hi - lo)) or 1.0
    degenerate = (area2 < 2e-12 * diag**2) | (faces[:, 0] == faces[:, 1]) | (faces[:, 1] == faces[:, 2]) | (faces[:, 0] == faces[:, 2])
    f = faces[~degenerate]
    a = np.concatenate([f[:, 0], f[:, 1], f[:, 2]]).astype(np.int64)
    b = np.concatenate([f[:, 1], f[:, 2], f[:, 0]]).astype(np.int64)
    und = np.minimum(a, b) * n + np.maximum(a, b)
    _, ucount = np.unique(und, return_counts=True)
    _, dcount = np.unique(a * n + b, return_counts=True)
    volume = float(np.einsum("ij,ij->", t[:, 0], np.cross(t[:, 1], t[:, 2])) / 6.0)
    return SurfaceReport(
        n_triangles=int(t.shape[0]),
        n_points=int(n),
        open_edges=int(np.sum(ucount == 1)),
        nonmanifold_edges=int(np.sum(ucount > 2)),
        misoriented_edges=int(np.sum(dcount > 1)),
        degenerate_faces=int(np.sum(degenerate)),
        volume=volume,
        area=float(0.5 * area2.sum()),
        bounds=(tuple(float(x) for x in lo), tuple(float(x) for x in hi)),
    )


def surface_problems(report: SurfaceReport, file: str, key: str, length_unit: str) -> list[UserError]:
    """The user-facing problems of a :class:`SurfaceReport` (empty: fine)."""
    errs: list[UserError] = []
    if report.open_edges or report.nonmanifold_edges:
        errs.append(UserError(
            expected="a closed surface (every edge shared by exactly two triangles)",
            got=f"{report.open_edges} open edges and {report.nonmanifold_edges} edges shared by more than two triangles",
            file=file, key=key, fix="close the holes / remove duplicate or internal faces in the CAD export"))
    elif report.misoriented_edges:
        errs.append(UserError(
            expected="consistently oriented triangles (each edge used once in each direction)",
            got=f"{report.misoriented_edges} edges used twice in the same direction",
            file=file, key=key, fix="re-export with consistent normals (flip the inverted triangles)"))
    if report.degenerate_faces:
        errs.append(UserError(expected="triangles with non-zero area", got=f"{report.degenerate_faces} degenerate triangles",
                              file=file, key=key, fix="remove zero-area triangles in the CAD export"))
    if report.closed and not report.misoriented_edges and report.volume <= 0:
        errs.append(UserError(expected="outward-pointing normals (positive enclosed volume)",
                              got=f"volume {report.volume:.6g} m³", file=file, key=key,
                              fix="flip all triangles (reverse the vertex order) in the export"))
    size = float(report.extent.max())
    lo, hi = PLAUSIBLE_SIZE
    if size > hi:
        guess = [u for u, s in LENGTH_UNITS.items() if lo <= size * s / LENGTH_UNITS[length_unit] <= hi and s < LENGTH_UNITS[length_unit]]
        errs.append(UserError(expected=f"a body between {lo} m and {hi} m long", got=f"{size:.6g} m with length_unit = {length_unit!r}",
                              file=file, key=key,
                              fix=f"set length_unit = {guess[0]!r}" if guess else "check the length_unit"))
    elif size < lo:
        guess = [u for u, s in LENGTH_UNITS.items() if lo <= size * s / LENGTH_UNITS[length_unit] <= hi and s > LENGTH_UNITS[length_unit]]
        errs.append(UserError(expected=f"a body between {lo} m and {hi} m long", got=f"{size:.6g} m with length_unit = {length_unit!r}",
                              file=file, key=key,
                              fix=f"set length_unit = {guess[0]!r}" if guess else "check the length_unit"))
    return errs


def hull_points(points: np.ndarray, n_dirs: int = 64) -> np.ndarray:
    """A subset (K,3) of ``points`` (N,3, m) that contains every vertex of
    their convex hull — all that linear extremes and projected hulls need.

    The minimum of a linear function (e.g. the height above a plane) over a
    point set is attained at a hull vertex, and a projection's convex hull is
    that of the projected hull vertices, so clearances, extents and shadow
    areas for any number of placements only need these K ≤ N points.

    Method (exact; Akl & Toussaint 1978, "A fast convex hull algorithm",
    Information Processing Letters 7(5), in three dimensions): the points
    extreme along ``n_dirs`` directions spread over the sphere span a
    polytope inside the hull; a point strictly inside it cannot be a hull
    vertex and is dropped. No 3-D hull of all points is built (that costs
    seconds for a smooth million-triangle body whose vertices are nearly all
    on its hull). Duplicate points are merged. Flat or tiny sets are returned
    whole.
    """
    from scipy.spatial import ConvexHull, QhullError

    p = np.unique(np.asarray(points, dtype=float), axis=0)
    if len(p) < 4 * n_dirs:
        return p
    X = np.ascontiguousarray(p.T)
    k = np.arange(n_dirs) + 0.5  # Fibonacci sphere: near-uniform directions
    phi = np.arccos(1.0 - 2.0 * k / n_dirs)
    th = np.pi * (1.0 + 5.0**0.5) * k
    D = np.stack([np.cos(th) * np.sin(phi), np.sin(th) * np.sin(phi), np.cos(phi)], axis=1)
    idx = np.unique([int(np.argmax(X[0] * d[0] + X[1] * d[1] + X[2] * d[2])) for d in D])
    try:
        poly = ConvexHull(p[idx])
    except (QhullError, ValueError):
        return p
    scale = float(np.abs(p).max()) or 1.0
    inside = np.ones(len(p), dtype=bool)
    for a, b, c, d in poly.equations:  # outward normal (a, b, c), offset d: inside ⇔ n·x + d < 0
        inside &= (X[0] * a + X[1] * b + X[2] * c + d) < -1e-12 * scale
    return p[~inside]


def _projection_basis(direction) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Unit ``direction`` d and two unit vectors u, v spanning the plane
    normal to it (u, v, d right-handed)."""
    d = np.asarray(direction, dtype=float)
    d = d / np.linalg.norm(d)
    a = np.array([0.0, 0.0, 1.0]) if abs(d[2]) < 0.9 else np.array([1.0, 0.0, 0.0])
    u = np.cross(a, d)
    u /= np.linalg.norm(u)
    return d, u, np.cross(d, u)


def projected_area(triangles: np.ndarray, direction, resolution: int = 2048) -> float:
    """Area (m²) of the shadow of a closed surface on a plane normal to ``direction``.

    The triangles facing the direction (n·d < 0) are projected onto the plane
    and rasterised on a grid of ``resolution`` cells along the larger side of
    the shadow's bounding box; a cell counts when its centre lies in at least
    one projected triangle (the union, so overlaps count once). Each triangle
    is scan-converted row by row (the span between its edge crossings at the
    row's centre line), so the cost grows with the number of rows a triangle
    spans, not with its pixel count. For a closed surface the front-facing
    triangles tile the silhouette, so the error is confined to the boundary
    cells: |error| ≲ perimeter × h / 2 with h the cell size, about 0.1 % of
    the area for a sphere at 2048 cells. ``direction`` (3,) in the body frame,
    need not be unit.
    """
    t = np.asarray(triangles, dtype=float)
    d, u, v = _projection_basis(direction)
    nrm = np.cross(t[:, 1] - t[:, 0], t[:, 2] - t[:, 0])
    tf = t[nrm @ d < 0]
    if tf.shape[0] == 0:
        return 0.0
    P = np.stack([tf @ u, tf @ v], axis=-1)  # (M,3,2)
    lo = P.reshape(-1, 2).min(axis=0)
    hi = P.reshape(-1, 2).max(axis=0)
    span = float((hi - lo).max())
    if span <= 0:
        return 0.0
    h = span / resolution
    nx = int(np.ceil((hi[0] - lo[0]) / h)) + 2
    ny = int(np.ceil((hi[1] - lo[1]) / h)) + 2
    X = (P[..., 0] - lo[0]) / h - 0.5  # pixel-centre coordinates: centre i at X = i
    Y = (P[..., 1] - lo[1]) / h - 0.5
    j0 = np.ceil(Y.min(axis=1)).astype(np.int64)
    j1 = np.floor(Y.max(axis=1)).astype(np.int64)
    cnt = np.maximum(j1 - j0 + 1, 0)
    diff = np.zeros(ny * (nx + 1), dtype=np.int64)
    csum = np.cumsum(cnt)
    limit = 2_000_000
    start = 0
    while start < len(cnt):
        base = csum[start - 1] if start else 0
        stop = max(int(np.searchsorted(csum, base + limit, side="right")), start + 1)
        c = cnt[start:stop]
        tot = int(c.sum())
        if tot:
            tri = np.repeat(np.arange(start, stop), c)
            row = np.repeat(j0[start:stop], c) + (np.arange(tot) - np.repeat(np.cumsum(c) - c, c))
            y = row.astype(float)
            xmin = np.full(tot, np.inf)
            xmax = np.full(tot, -np.inf)
            for e0, e1 in ((0, 1), (1, 2), (2, 0)):
                ya, yb = Y[tri, e0], Y[tri, e1]
                xa, xb = X[tri, e0], X[tri, e1]
                ok = (y >= np.minimum(ya, yb)) & (y <= np.maximum(ya, yb))
                dy = yb - ya
                flat = dy == 0
                with np.errstate(divide="ignore", invalid="ignore"):
                    x = np.where(flat, xa, xa + (y - ya) * (xb - xa) / np.where(flat, 1.0, dy))
                xmin = np.where(ok, np.minimum(xmin, np.where(flat, np.minimum(xa, xb), x)), xmin)
                xmax = np.where(ok, np.maximum(xmax, np.where(flat, np.maximum(xa, xb), x)), xmax)
            i0 = np.ceil(xmin - 1e-9).astype(np.int64)
            i1 = np.floor(xmax + 1e-9).astype(np.int64)
            good = np.isfinite(xmin) & (i1 >= i0)
            r, i0, i1 = row[good], np.clip(i0[good], 0, nx), np.clip(i1[good] + 1, 0, nx)
            diff += np.bincount(r * (nx + 1) + i0, minlength=diff.size)
            diff -= np.bincount(r * (nx + 1) + i1, minlength=diff.size)
        start = stop
    covered = np.cumsum(diff.reshape(ny, nx + 1), axis=1)[:, :nx] > 0
    return float(covered.sum() * h * h)


def hull_projected_area(points: np.ndarray, direction) -> float:
    """Area (m²) of the convex hull of ``points`` projected on a plane normal
    to ``direction`` (body frame). An upper bound of the true shadow area,
    exact for convex bodies; cheap enough to evaluate per case."""
    from scipy.spatial import ConvexHull, QhullError

    p = np.asarray(points, dtype=float)
    d, u, v = _projection_basis(direction)
    # plain component arithmetic: a threaded BLAS call stalls on a busy machine
    qx = p[:, 0] * u[0] + p[:, 1] * u[1] + p[:, 2] * u[2]
    qy = p[:, 0] * v[0] + p[:, 1] * v[1] + p[:, 2] * v[2]
    q = _drop_interior(np.stack([qx, qy], axis=1))
    try:
        return float(ConvexHull(q).volume)  # 2-D "volume" is the area
    except (QhullError, ValueError):
        return 0.0


def _drop_interior(q: np.ndarray, n_dirs: int = 16) -> np.ndarray:
    """Points of ``q`` (N×2) that may be vertices of its convex hull.

    Akl & Toussaint (1978), "A fast convex hull algorithm", Information
    Processing Letters 7(5): the extreme points along ``n_dirs`` directions
    span a convex polygon inside the hull; a point strictly inside it is not
    a hull vertex and is dropped. The hull of what remains is the hull of
    ``q`` (exact)."""
    if len(q) < 64:
        return q
    ang = np.linspace(0.0, 2.0 * np.pi, n_dirs, endpoint=False)
    x, y = np.ascontiguousarray(q[:, 0]), np.ascontiguousarray(q[:, 1])
    idx = [int(np.argmax(x * np.cos(t) + y * np.sin(t))) for t in ang]  # contiguous 1-D passes
    poly = q[np.unique(idx)]
    if len(poly) < 3:
        return q
    c = poly.mean(axis=0)
    order = np.argsort(np.arctan2(poly[:, 1] - c[1], poly[:, 0] - c[0]))
    poly = poly[order]
    inside = np.ones(len(q), dtype=bool)
    for a, b in zip(poly, np.roll(poly, -1, axis=0)):
        # strictly left of every counter-clockwise edge → strictly inside
        cross = (b[0] - a[0]) * (y - a[1]) - (b[1] - a[1]) * (x - a[0])
        inside &= cross > 1e-12 * max(1.0, float(np.abs(b - a).max()))
    return q[~inside]


@dataclass(frozen=True)
class BodyGeometry:
    """What the planner needs from one variant's geometry (body frame, m).

    ``hull``: convex-hull vertices of the body solids (wheels excluded when
    they are separate solids), ``bounds`` (min, max) corners, ``area`` surface
    area (m²), ``frontal_area`` shadow area along +x (m², zero pitch and yaw),
    ``solid_names`` the patches, ``report`` the topology facts.
    """

    hull: np.ndarray
    bounds: tuple[tuple[float, float, float], tuple[float, float, float]]
    area: float
    frontal_area: float
    solid_names: tuple[str, ...]
    report: SurfaceReport
    source: str

    @property
    def length(self) -> float:
        return float(self.bounds[1][0] - self.bounds[0][0])

    @property
    def width(self) -> float:
        return float(self.bounds[1][1] - self.bounds[0][1])

    @property
    def height(self) -> float:
        return float(self.bounds[1][2] - self.bounds[0][2])


def analyse(surface: Surface, exclude_from_clearance: tuple[str, ...] = ()) -> BodyGeometry:
    """Measure a surface once for all cases of a sweep (input untouched)."""
    welded = weld(surface.triangles)
    rep = inspect_surface(surface.triangles, welded)
    body = surface.select([n for n in surface.solid_names if n not in exclude_from_clearance])
    if body.n_triangles == surface.n_triangles or body.n_triangles == 0:
        pts = welded[0]
    else:
        pts = weld(body.triangles)[0]
    hull = hull_points(pts)
    fa = projected_area(surface.triangles, [1.0, 0.0, 0.0])
    return BodyGeometry(hull=hull, bounds=rep.bounds, area=rep.area, frontal_area=fa,
                        solid_names=surface.solid_names, report=rep, source=surface.source)
