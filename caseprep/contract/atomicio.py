"""Atomic file writing: write to a temporary file beside the target, then rename.

A reader never sees a half-written file, and an interrupted run leaves the old
file (or no file) behind, never a truncated one.

Given ``root`` (the output folder the user chose), the target must lie below
it and is reached without following symbolic links: every folder between
``root`` and the file is opened with ``O_NOFOLLOW`` (created when missing),
the temporary file is created with ``O_EXCL | O_NOFOLLOW`` and renamed over
the target (a rename replaces a link, it never writes through it). A link or
file where a folder should be is a :class:`UserError`; nothing is written
outside ``root``.
"""
from __future__ import annotations

import json
import os
import secrets
import tempfile
from pathlib import Path
from typing import Sequence

from caseprep.contract.errors import UserError


def _refuse_link(root: Path, rel: str, exc: OSError) -> UserError:
    what = "a symbolic link" if os.path.islink(root / rel) else "not a folder"
    return UserError(expected=f"a real folder {rel} inside the output folder {root}", got=what, file=str(root / rel),
                     fix="remove or rename it: underfloor writes only inside the output folder and never through links")


def open_folder(root: str | os.PathLike, parts: Sequence[str], create: bool = True) -> int:
    """A file descriptor of the folder ``root/parts…``, each part opened
    without following links (created when missing and ``create``). The
    caller closes it. UserError when a part is a link or not a folder."""
    root = Path(root)
    if create:
        root.mkdir(parents=True, exist_ok=True)
    fd = os.open(root, os.O_RDONLY | os.O_DIRECTORY)
    try:
        for i, part in enumerate(parts):
            if part in ("", ".", "..") or "/" in part or "\0" in part:
                raise ValueError(f"expected a single path component, got {part!r}")
            if create:
                try:
                    os.mkdir(part, 0o755, dir_fd=fd)
                except FileExistsError:
                    pass
            try:
                nfd = os.open(part, os.O_RDONLY | os.O_DIRECTORY | os.O_NOFOLLOW, dir_fd=fd)
            except (NotADirectoryError, OSError) as exc:
                if isinstance(exc, FileNotFoundError) and not create:
                    raise
                raise _refuse_link(root, "/".join(parts[: i + 1]), exc) from None
            os.close(fd)
            fd = nfd
        return fd
    except BaseException:
        os.close(fd)
        raise


def _write_in(dfd: int, name: str, data: bytes, mode: int | None, where: Path) -> None:
    """Atomically write ``name`` in the open folder ``dfd`` (no links followed)."""
    tmp = f".{name[:80]}.{secrets.token_hex(6)}.tmp"
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_NOFOLLOW, 0o600, dir_fd=dfd)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
            os.fchmod(fh.fileno(), 0o644 if mode is None else mode)
        try:
            os.replace(tmp, name, src_dir_fd=dfd, dst_dir_fd=dfd)
        except IsADirectoryError:
            raise UserError(expected=f"a file {name} (or none)", got="a folder", file=str(where / name),
                            fix="move the folder away") from None
    except BaseException:
        try:
            os.unlink(tmp, dir_fd=dfd)
        except FileNotFoundError:
            pass
        raise


def write_bytes_atomic(path: str | os.PathLike, data: bytes, mode: int | None = None, *,
                       root: str | os.PathLike | None = None) -> None:
    """Write ``data`` to ``path`` atomically (temp file in the same folder + rename).

    With ``root``: ``path`` must lie below ``root`` and no symbolic link
    below ``root`` is followed (see the module docstring)."""
    path = Path(path)
    if root is not None:
        root = Path(root)
        try:
            rel = path.relative_to(root)
        except ValueError:
            raise ValueError(f"{path} is not below the output folder {root}") from None
        parts = rel.parts
        if not parts or any(p in ("..", ".") for p in parts):
            raise ValueError(f"expected a file below {root}, got {path}")
        dfd = open_folder(root, parts[:-1])
        try:
            _write_in(dfd, parts[-1], data, mode, path.parent)
        finally:
            os.close(dfd)
        return
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        if mode is not None:
            os.chmod(tmp, mode)
        else:
            os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise


def write_text_atomic(path: str | os.PathLike, text: str, mode: int | None = None, *,
                      root: str | os.PathLike | None = None) -> None:
    """Write UTF-8 ``text`` to ``path`` atomically (``root``: see :func:`write_bytes_atomic`)."""
    write_bytes_atomic(path, text.encode("utf-8"), mode=mode, root=root)


def json_ready(obj: object) -> object:
    """``obj`` with numpy arrays and scalars turned into Python lists and
    numbers, dict keys into strings, and non-finite floats (NaN, ±inf) into
    None, so that it serialises as strict JSON. Input not modified."""
    import enum
    import math

    import numpy as np

    if isinstance(obj, dict):
        return {str(k): json_ready(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_ready(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return json_ready(obj.tolist())
    if isinstance(obj, (np.floating, float)):
        f = float(obj)
        return f if math.isfinite(f) else None
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, enum.Enum):
        return json_ready(obj.value)
    return obj


def write_json_atomic(path: str | os.PathLike, obj: object, *, root: str | os.PathLike | None = None) -> None:
    """Write ``obj`` as indented strict JSON to ``path`` atomically (``root``:
    see :func:`write_bytes_atomic`)."""
    write_text_atomic(path, json.dumps(json_ready(obj), indent=2, sort_keys=False, allow_nan=False) + "\n", root=root)
