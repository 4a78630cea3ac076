"""Reusing another case's work on disk: its mesh (hard links of
``constant/polyMesh``) and, in :mod:`caseprep.run.fields`, its converged fields.

A case that shares a mesh gets hard links to the owner's mesh files (a
copy where the file system refuses links), the owner's mesh-dependent
numerics (``system/meshNumerics``) and its mesh logs (so that the case's run
record reports the cells and the checker's verdict of the mesh it uses), and
``logs/meshShared.log`` saying where they came from. The linked mesh files
are made read-only: no tool of the solve or export stages writes the mesh,
and a tool that tried would otherwise change the owner's mesh through the
link. Meshing again (``run.sh mesh``) removes the links first and writes new
files, so the owner and the sharer never change each other's mesh.

Everything is written inside the case folder; its ``constant``, ``system``
and ``logs`` folders must be real folders, not links (the owner's folder is
only read).
"""
from __future__ import annotations

import errno
import os
import shutil
import stat
from dataclasses import dataclass
from pathlib import Path

MESH_DIR = ("constant", "polyMesh")
#: The owner's files copied beside the mesh: the numerics chosen from its
#: checker's figures and the meshing tools' logs.
MESH_COMPANIONS = ("system/meshNumerics", "logs/blockMesh.log", "logs/surfaceFeatureExtract.log",
                   "logs/snappyHexMesh.log", "logs/checkMesh.log")
SHARE_LOG = "meshShared.log"


@dataclass(frozen=True)
class MeshShare:
    """What :func:`share_mesh` did: ``files`` mesh files, ``linked`` of them
    as hard links (the rest copied), ``bytes`` their size."""

    files: int
    linked: int
    bytes: int

    @property
    def how(self) -> str:
        if self.linked == self.files:
            return "hard links"
        return "copies" if self.linked == 0 else "hard links and copies"


def clear_results(case_dir: Path) -> None:
    """Remove what a solve made on the case's previous mesh: the decomposed
    copies, the time folders other than ``0`` and the monitors' output (as
    ``run.sh mesh`` does before meshing)."""
    for p in case_dir.iterdir():
        name = p.name
        if p.is_symlink() or not p.is_dir():
            continue
        if name.startswith("processor") and name[9:].isdigit():
            shutil.rmtree(p)
        elif name != "0" and _is_time(name):
            shutil.rmtree(p)
    post = case_dir / "postProcessing"
    if post.is_dir() and not post.is_symlink():
        for p in post.glob("uf_*"):
            if p.is_dir() and not p.is_symlink():
                shutil.rmtree(p)


def _is_time(name: str) -> bool:
    try:
        float(name)
    except ValueError:
        return False
    return name[0].isdigit()


def mesh_ready(case_dir: Path) -> str | None:
    """None when ``case_dir`` holds a finished mesh (the mesh stage's marker
    and the mesh's faces), else why not."""
    if not (case_dir / "logs" / "mesh.done").is_file():
        return "its mesh stage is not done"
    poly = case_dir.joinpath(*MESH_DIR)
    if poly.is_symlink() or not poly.is_dir():
        return "it has no constant/polyMesh folder"
    if not any((poly / n).is_file() for n in ("faces", "faces.gz")):
        return "its constant/polyMesh has no faces file"
    return None


def _link_or_copy(src: Path, dst: Path) -> bool:
    """Hard-link ``src`` to ``dst`` (True) or copy it (False)."""
    try:
        os.link(src, dst, follow_symlinks=False)
        return True
    except OSError as exc:
        if exc.errno not in (errno.EXDEV, errno.EPERM, errno.EMLINK, errno.ENOTSUP):
            raise
    shutil.copyfile(src, dst, follow_symlinks=False)
    return False


def share_mesh(owner_dir: Path, case_dir: Path) -> MeshShare:
    """Give ``case_dir`` the finished mesh of ``owner_dir`` (see the module
    docstring). Raises OSError when the files cannot be made; ``case_dir``
    then has no mesh (its old one was removed first)."""
    for sub in ("constant", "system", "logs"):
        if (case_dir / sub).is_symlink():
            raise OSError(errno.ELOOP, f"{case_dir / sub} is a link: refusing to write through it")
    poly = case_dir.joinpath(*MESH_DIR)
    if poly.is_symlink() or poly.is_file():
        poly.unlink()
    elif poly.exists():
        shutil.rmtree(poly)
    src_root = owner_dir.joinpath(*MESH_DIR)
    files = linked = size = 0
    for dirpath, dirnames, filenames in os.walk(src_root, followlinks=False):
        rel = Path(dirpath).relative_to(src_root)
        (poly / rel).mkdir(parents=True, exist_ok=True)
        dirnames[:] = [d for d in dirnames if not (Path(dirpath) / d).is_symlink()]
        for name in filenames:
            src = Path(dirpath) / name
            if src.is_symlink() or not src.is_file():
                continue
            dst = poly / rel / name
            linked += _link_or_copy(src, dst)
            mode = dst.stat().st_mode
            os.chmod(dst, mode & ~(stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH))
            files += 1
            size += dst.stat().st_size
    (case_dir / "logs").mkdir(exist_ok=True)
    for rel in MESH_COMPANIONS:
        src = owner_dir / rel
        dst = case_dir / rel
        if dst.is_symlink() or dst.exists():
            dst.unlink()
        if src.is_file() and not src.is_symlink():
            dst.parent.mkdir(exist_ok=True)
            shutil.copyfile(src, dst)
    share = MeshShare(files, linked, size)
    (case_dir / "logs" / SHARE_LOG).write_text(
        f"mesh of case {owner_dir.name} used ({share.how}): {files} files, {size} bytes from {src_root}\n"
        "no meshing tool ran in this case; the mesh logs beside this one are the owner's\n")
    return share
