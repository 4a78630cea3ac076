"""Initial fields of a case: the uniform free stream it was written with, or
the converged fields of another case (a warm start).

A warm start takes the cell values (``internalField``) of the source's
latest solution — read directly when the two cases share a mesh, else mapped
onto this case's mesh by the solver's own utility (``mapFields -consistent``,
volume-weighted interpolation; logs/mapFields.log) — scales them to this
case's speed by dynamic similarity of incompressible flow at the same
geometry (Re aside), with r = V_case / V_source::

    U ∝ r,   p (kinematic) ∝ r²,   k ∝ r²,   ω ∝ r,   ν_t ∝ r

and writes them into ``0/`` with this case's own boundary conditions (taken
from the uniform files the writer made, kept in :data:`UNIFORM_DIR` on the
first warm start), so the inlet, the moving ground and the wheels keep their
own speeds. Cells the mapping left at zero turbulence (outside the source's
domain) get the free-stream values back. Units: SI; the fields of the
solver's kinematic formulation.

Run as ``python -m caseprep.run.fields CASE --kind uniform|copied|mapped
[--source DIR --speed-ratio R]`` by the runner just before the solve stage;
it never fails the stage: when a warm start cannot be made it restores the
uniform fields and says why. What it did goes to ``logs/initialField.json``
(read into the run record's ``initial_field``).
"""
from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np

UNIFORM_DIR = "initial-uniform"
RESULT_NAME = "initialField.json"
#: Exponent of the speed ratio each field scales with (module docstring).
SPEED_POWER = {"U": 1, "p": 2, "k": 2, "omega": 1, "nut": 1}
KINDS = ("uniform", "copied", "mapped")
_NUM = rb"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"


class FieldError(ValueError):
    """A field file this module cannot read."""


def _header_value(data: bytes, key: bytes) -> bytes | None:
    m = re.search(rb"FoamFile\s*\{[^}]*?\b" + key + rb"\s+([^;]+);", data, re.S)
    return m.group(1).strip().strip(b'"') if m else None


def read_internal(path: Path) -> np.ndarray | float | tuple[float, ...]:
    """The ``internalField`` of a volume field file (ASCII or binary, as the
    solver writes them): an (N,) or (N, 3) array for a non-uniform field, a
    number or a 3-tuple for a uniform one. Raises :class:`FieldError`."""
    data = path.read_bytes()
    fmt = (_header_value(data, b"format") or b"ascii").decode()
    arch = (_header_value(data, b"arch") or b"").decode()
    m = re.search(rb"\binternalField\s+", data)
    if not m:
        raise FieldError(f"expected an internalField in {path}, got none")
    rest = data[m.end():]
    u = re.match(rb"uniform\s+(\(([^)]*)\)|" + _NUM + rb")\s*;", rest)
    if u:
        if u.group(2) is not None:
            return tuple(float(x) for x in u.group(2).split())
        return float(u.group(1))
    n = re.match(rb"nonuniform\s+List<(scalar|vector)>\s*(\d+)\s*\(", rest)
    if not n:
        raise FieldError(f"expected a uniform value or a scalar/vector list as internalField in {path}")
    width = 3 if n.group(1) == b"vector" else 1
    count = int(n.group(2))
    body = rest[n.end():]
    if fmt == "binary":
        size = 4 if "scalar=32" in arch else 8
        nbytes = count * width * size
        if len(body) < nbytes + 1 or body[nbytes:nbytes + 1] != b")":
            raise FieldError(f"expected {count} binary values in {path}, the file is shorter or malformed")
        vals = np.frombuffer(body[:nbytes], dtype="<f4" if size == 4 else "<f8").astype(float)
    else:
        end = body.find(b")\n;") if width == 1 else body.find(b")\n)")
        end = body.find(b";") if end < 0 else end
        text = body[:end].replace(b"(", b" ").replace(b")", b" ")
        vals = np.array(text.split(), dtype=float)
        if vals.size < count * width:
            raise FieldError(f"expected {count} values in {path}, got {vals.size // width}")
        vals = vals[:count * width]
    return vals.reshape(count, 3) if width == 3 else vals


def with_internal(uniform_text: str, values: np.ndarray) -> str:
    """The field file ``uniform_text`` (an ASCII file with
    ``internalField uniform …;``, as the writer makes them) with its internal
    field replaced by ``values`` ((N,) or (N, 3)); the boundary conditions
    are kept."""
    if values.ndim == 2:
        kind = "vector"
        body = "\n".join(f"({a:.9g} {b:.9g} {c:.9g})" for a, b, c in values)
    else:
        kind = "scalar"
        body = "\n".join(f"{v:.9g}" for v in values)
    new = f"internalField   nonuniform List<{kind}>\n{len(values)}\n(\n{body}\n)\n;"
    out, n = re.subn(r"(?m)^internalField\s+uniform[^;]*;", lambda _: new, uniform_text, count=1)
    if n != 1:
        raise FieldError("expected a uniform internalField in the case's own initial field file")
    return out


def latest_time(case_dir: Path) -> Path | None:
    """The case's latest time folder other than 0 (None: no solution)."""
    best = None
    for p in case_dir.iterdir():
        if not p.is_dir() or p.is_symlink() or p.name == "0" or not p.name[0].isdigit():
            continue
        try:
            t = float(p.name)
        except ValueError:
            continue
        if best is None or t > best[0]:
            best = (t, p)
    return best[1] if best else None


def field_names(case_dir: Path) -> list[str]:
    """The fields the case starts from (its uniform files: ``0/`` on the first use)."""
    base = case_dir / UNIFORM_DIR if (case_dir / UNIFORM_DIR).is_dir() else case_dir / "0"
    return sorted(p.name for p in base.iterdir() if p.is_file() and p.name in SPEED_POWER)


def keep_uniform(case_dir: Path) -> Path:
    """The folder of the case's uniform initial files (made from ``0/`` once)."""
    keep = case_dir / UNIFORM_DIR
    if not keep.is_dir():
        tmp = case_dir / (UNIFORM_DIR + ".part")
        if tmp.exists():
            shutil.rmtree(tmp)
        tmp.mkdir()
        for name in SPEED_POWER:
            if (case_dir / "0" / name).is_file():
                shutil.copyfile(case_dir / "0" / name, tmp / name)
        tmp.rename(keep)
    return keep


def restore_uniform(case_dir: Path) -> None:
    """``0/`` back to the uniform files the writer made (nothing to do before a first warm start)."""
    keep = case_dir / UNIFORM_DIR
    if keep.is_dir():
        for p in keep.iterdir():
            if p.is_file():
                shutil.copyfile(p, case_dir / "0" / p.name)


def _cells(case_dir: Path) -> int | None:
    """The cell count from the mesh's owner file header note (``nCells:N``)."""
    for name in ("owner", "owner.gz"):
        p = case_dir / "constant" / "polyMesh" / name
        if p.is_file():
            head = p.open("rb").read(4096)
            m = re.search(rb"nCells:\s*(\d+)", head)
            return int(m.group(1)) if m else None
    return None


def prepare(case_dir: Path, kind: str, source: Path | None = None, speed_ratio: float = 1.0) -> dict:
    """Set up ``0/`` of ``case_dir`` (module docstring); returns what was done
    (``kind`` as done, ``why`` when a warm start fell back to uniform)."""
    keep = keep_uniform(case_dir) if kind != "uniform" else case_dir / UNIFORM_DIR
    restore_uniform(case_dir)
    if kind == "uniform":
        return {"kind": "uniform"}
    names = field_names(case_dir)
    try:
        latest = latest_time(source) if source is not None else None
        if latest is None:
            raise FieldError(f"the source {source} has no solution folder")
        if kind == "mapped":
            _map_fields(case_dir, source)
            values = {n: read_internal(case_dir / "0" / n) for n in names}
        else:
            values = {n: read_internal(latest / n) for n in names}
        n_cells = _cells(case_dir)
        for name, v in values.items():
            if not isinstance(v, np.ndarray):
                raise FieldError(f"the {'mapped' if kind == 'mapped' else 'source'} field {name} is uniform: "
                                 "nothing to start from")
            if n_cells is not None and len(v) != n_cells:
                raise FieldError(f"field {name} has {len(v)} values for a mesh of {n_cells} cells")
        for name, v in values.items():
            uniform_text = (keep / name).read_text()
            v = np.array(v, dtype=float) * speed_ratio ** SPEED_POWER[name]
            if name in ("k", "omega"):
                free = read_internal(keep / name)
                v = np.where(v > 0, v, float(free))  # unmapped cells: free stream
            (case_dir / "0" / name).write_text(with_internal(uniform_text, v))
    except (FieldError, OSError, ValueError, subprocess.SubprocessError) as exc:
        restore_uniform(case_dir)
        return {"kind": "uniform", "why": f"the warm start from {source} could not be made ({exc}): cold start"}
    return {"kind": kind, "source_time": latest.name, "fields": names}


def _map_fields(case_dir: Path, source: Path) -> None:
    """Run the solver's mapping utility: ``source``'s latest fields onto this
    case's mesh, into ``0/`` (log logs/mapFields.log)."""
    log = case_dir / "logs" / "mapFields.log"
    env = dict(os.environ)
    if "WM_PROJECT_DIR" not in env and Path("/usr/share/openfoam/etc").is_dir():
        env["WM_PROJECT_DIR"] = "/usr/share/openfoam"  # the Debian package's installation (as run.sh assumes)
    with open(log, "w") as out:
        rc = subprocess.call(["mapFields", str(source.resolve()), "-consistent", "-sourceTime", "latestTime"],
                             cwd=case_dir, stdout=out, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL, env=env)
    text = log.read_text(errors="replace")
    if rc != 0 or "FOAM FATAL" in text:
        tail = " ".join(text.strip().splitlines()[-3:])[:300]
        raise FieldError(f"mapFields exited {rc}: {tail}")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description="Set up the initial fields of a case (uniform or from a solved case).")
    ap.add_argument("case")
    ap.add_argument("--kind", choices=KINDS, required=True)
    ap.add_argument("--source")
    ap.add_argument("--speed-ratio", type=float, default=1.0)
    a = ap.parse_args(argv)
    case = Path(a.case)
    done = prepare(case, a.kind, Path(a.source) if a.source else None, a.speed_ratio)
    (case / "logs").mkdir(exist_ok=True)
    (case / "logs" / RESULT_NAME).write_text(json.dumps(done))
    print(json.dumps(done))
    return 0


if __name__ == "__main__":
    sys.exit(main())
