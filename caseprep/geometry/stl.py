"""STL files: reading (binary and ASCII, several solids), the one rule that
tells binary from ASCII, solid names, scaling, conversion from other surface
formats, and the one ASCII writer.

Coordinates are in the **body frame** (x rearward, y right, z up, see
:mod:`caseprep.contract.frames`) in metres, after scaling by the config's
``length_unit``. The only geometry module that touches files.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from caseprep.contract.errors import UserError
from caseprep.contract.limits import MAX_LENGTH, MAX_STL_TRIANGLES

LENGTH_UNITS = {"m": 1.0, "mm": 1.0e-3, "in": 0.0254}

_BIN_DTYPE = np.dtype([("n", "<f4", (3,)), ("v", "<f4", (3, 3)), ("attr", "<u2")])
_VERTEX_RE = re.compile(rb"vertex\s+(\S+)\s+(\S+)\s+(\S+)")
_SOLID_RE = re.compile(rb"^\s*solid[ \t]*([^\r\n]*)$(.*?)^\s*endsolid[^\r\n]*$", re.S | re.M)
_SOLID_LINE_RE = re.compile(rb"^[ \t]*solid[ \t]+([^\r\n]*?)[ \t]*\r?$", re.MULTILINE)



@dataclass(frozen=True)
class TriSurface:
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

    def select(self, names) -> "TriSurface":
        """The sub-surface made of the solids in ``names``."""
        idx = [i for i, n in enumerate(self.solid_names) if n in set(names)]
        keep = np.isin(self.solid, idx)
        remap = -np.ones(len(self.solid_names), dtype=int)
        remap[idx] = np.arange(len(idx))
        return TriSurface(self.triangles[keep], remap[self.solid[keep]], tuple(self.solid_names[i] for i in idx), self.source)


def _binary_count(data: bytes) -> int:
    """The triangle count in a binary STL header (bytes 80–83, little-endian)."""
    return int(np.frombuffer(data, dtype="<u4", count=1, offset=80)[0])


def stl_kind(data: bytes) -> str | None:
    """``"binary"``, ``"ascii"`` or None (not an STL) — the one rule: a file
    whose length is exactly 84 + 50 × (the triangle count in its header) is
    binary (even when its 80-byte header starts with ``solid``, as some
    exporters write); otherwise one that starts with ``solid`` is ASCII."""
    if len(data) >= 84 and len(data) == 84 + 50 * _binary_count(data):
        return "binary"
    return "ascii" if data.lstrip()[:5].lower() == b"solid" else None


def stl_solid_names(data: bytes) -> list[str] | None:
    """Solid names of an ASCII STL as written (first word of each ``solid``
    line, in file order), or None for a binary STL (which has no named
    solids)."""
    if stl_kind(data) == "binary":
        return None
    return [m.group(1).decode("utf-8", "replace").split()[0] if m.group(1).strip() else ""
            for m in _SOLID_LINE_RE.finditer(data)]


def scale_stl_bytes(data: bytes, scale: float) -> bytes:
    """The STL ``data`` with every coordinate multiplied by ``scale``; solids,
    names and normals kept (binary: float32 in place; ASCII: each vertex
    line rewritten, 9 significant digits)."""
    if stl_kind(data) == "binary":
        tri = np.frombuffer(data, dtype=_BIN_DTYPE, count=_binary_count(data), offset=84).copy()
        tri["v"] *= np.float32(scale)
        return data[:84] + tri.tobytes()

    def sub(m: re.Match) -> bytes:
        xyz = [float(v) * scale for v in m.group(2).split()]
        return m.group(1) + (" ".join(f"{v:.9g}" for v in xyz)).encode()

    return re.sub(rb"(^[ \t]*vertex[ \t]+)([^\r\n]+)", sub, data, flags=re.MULTILINE)


def _sanitise_solid_name(raw: str, index: int) -> str:
    name = raw.strip().split()[0] if raw.strip() else ""
    name = re.sub(r"[^A-Za-z0-9_]", "_", name)
    if not name or not name[0].isalpha():
        name = f"solid{index}" if not name else f"s_{name}"
    return name


def solid_names_as_read(raw: list[bytes]) -> list[str]:
    """The patch names :func:`read_stl` gives solids whose ``solid`` lines
    carry ``raw`` (in file order): characters other than letters, digits and
    ``_`` become ``_``, a name not starting with a letter gets a prefix, and a
    repeated name gets its index appended. The one naming rule of solids."""
    names: list[str] = []
    for i, r in enumerate(raw):
        name = _sanitise_solid_name(r.decode("ascii", "replace"), i)
        if name in names:
            name = f"{name}_{i}"
        names.append(name)
    return names


def with_solid_names_as_read(data: bytes) -> bytes:
    """An ASCII STL's bytes with each ``solid``/``endsolid`` line naming the
    solid as :func:`read_stl` names it (:func:`solid_names_as_read`), so the
    mesher's patches are the names the planner checked; a binary STL is
    returned unchanged."""
    if stl_kind(data) != "ascii":
        return data
    blocks = list(_SOLID_RE.finditer(data))
    names = solid_names_as_read([b.group(1) for b in blocks])
    out, pos = [], 0
    for b, name in zip(blocks, names):
        out.append(data[pos:b.start()])
        out.append(b"solid " + name.encode() + b"\n" + b.group(2).lstrip(b"\r\n") + b"endsolid " + name.encode())
        pos = b.end()
    out.append(data[pos:])
    return b"".join(out)


def read_stl(path: str | Path, length_unit: str = "m", default_name: str = "body") -> TriSurface:
    """Read a binary or ASCII STL file into a :class:`TriSurface` (m, body frame).

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
    size = p.stat().st_size
    if size > 84 + 300 * MAX_STL_TRIANGLES.value:  # 50 bytes per binary triangle, about 250 as ASCII text
        raise UserError(expected=f"a geometry of at most {int(MAX_STL_TRIANGLES.value):,} triangles",
                        got=f"a file of {size:,} bytes", file=str(p), fix="decimate the surface")
    data = p.read_bytes()
    scale = LENGTH_UNITS[length_unit]
    kind = stl_kind(data)
    if kind == "binary":
        n = _binary_count(data)
        rec = np.frombuffer(data, dtype=_BIN_DTYPE, count=n, offset=84)
        tris = rec["v"].astype(np.float64)
        solid = np.zeros(n, dtype=int)
        names = (default_name,)
    elif kind is None:
        raise UserError(expected="a binary or ASCII STL file", got="a file of another format", file=str(p),
                        fix="export the geometry as STL")
    else:
        blocks = list(_SOLID_RE.finditer(data))
        if not blocks:
            raise UserError(expected="an ASCII STL with 'solid … endsolid' blocks", got="none", file=str(p))
        parts, ids = [], []
        nm = solid_names_as_read([b.group(1) for b in blocks])
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
            parts.append(arr.reshape(-1, 3, 3))
            ids.append(np.full(arr.shape[0] // 3, i, dtype=int))
        tris = np.concatenate(parts) if parts else np.zeros((0, 3, 3))
        solid = np.concatenate(ids) if ids else np.zeros(0, dtype=int)
        names = tuple(nm)
    if tris.shape[0] == 0:
        raise UserError(expected="at least one triangle", got="an empty STL", file=str(p))
    if not np.all(np.isfinite(tris)):
        raise UserError(expected="finite coordinates", got="NaN or infinite values", file=str(p))
    if tris.shape[0] > MAX_STL_TRIANGLES.value:
        raise UserError(expected=f"at most {int(MAX_STL_TRIANGLES.value):,} triangles", got=f"{tris.shape[0]:,}", file=str(p),
                        fix="decimate the surface (the mesher refines it anyway)")
    reach = float(np.abs(tris).max()) * scale
    if not reach <= MAX_LENGTH.value:
        raise UserError(expected=f"coordinates within ±{MAX_LENGTH.value:g} m", got=f"{reach:.3g} m", file=str(p),
                        fix=f"check body.length_unit ({length_unit!r}) and the export's units")
    return TriSurface(tris * scale, solid, names, str(p))


def stl_binary_bytes(triangles: np.ndarray) -> bytes:
    """A binary STL of ``triangles`` (M, 3, 3, m; float32 as the format
    stores them), normals from the vertex order (right-hand rule). One solid
    (the format names none)."""
    t = np.asarray(triangles, dtype=float)
    n = np.cross(t[:, 1] - t[:, 0], t[:, 2] - t[:, 0])
    ln = np.linalg.norm(n, axis=1, keepdims=True)
    rec = np.zeros(len(t), dtype=_BIN_DTYPE)
    rec["n"] = n / np.where(ln > 0, ln, 1.0)
    rec["v"] = t
    header = b"underfloor binary STL".ljust(80, b" ")
    return header + np.uint32(len(t)).tobytes() + rec.tobytes()


def stl_ascii_text(solids: list[tuple[str, np.ndarray]]) -> str:
    """ASCII STL text for ``solids`` = [(name, (M,3,3) triangles in m)].
    Normals are computed from the vertex order (right-hand rule)."""
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
    return "\n".join(lines) + "\n"


def write_stl_ascii(path: str | Path, solids: list[tuple[str, np.ndarray]]) -> str:
    """:func:`stl_ascii_text` of ``solids``, written atomically to ``path``;
    returns the text."""
    from caseprep.contract.atomicio import write_text_atomic

    text = stl_ascii_text(solids)
    write_text_atomic(path, text)
    return text


def convert_to_stl(src: Path, solid: str, scale: float) -> bytes:
    """Read a non-STL surface (OBJ, PLY, VTK, … via meshio) and return it as
    an ASCII STL (:func:`stl_ascii_text`) with one solid ``solid``;
    coordinates × ``scale``."""
    import meshio

    try:
        m = meshio.read(src)
    except Exception as exc:  # meshio raises many types for unreadable files
        raise UserError(expected="a surface file meshio can read (STL, OBJ, PLY, VTK …)", got=f"{src.name}: {exc}",
                        file=str(src), fix="export the surface as STL") from None
    pts = np.asarray(m.points, dtype=float)[:, :3] * scale
    tris = [c.data for c in m.cells if c.type == "triangle"]
    if not tris:
        raise UserError(expected="a triangulated surface", got="no triangles", file=str(src),
                        fix="triangulate the surface before export")
    return stl_ascii_text([(solid, pts[np.concatenate(tris)])]).encode()
