"""Atomic file writing: write to a temporary file beside the target, then rename.

A reader never sees a half-written file, and an interrupted run leaves the old
file (or no file) behind, never a truncated one.
"""
from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path


def write_bytes_atomic(path: str | os.PathLike, data: bytes, mode: int | None = None) -> None:
    """Write ``data`` to ``path`` atomically (temp file in the same folder + rename)."""
    path = Path(path)
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


def write_text_atomic(path: str | os.PathLike, text: str, mode: int | None = None) -> None:
    """Write UTF-8 ``text`` to ``path`` atomically."""
    write_bytes_atomic(path, text.encode("utf-8"), mode=mode)


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


def write_json_atomic(path: str | os.PathLike, obj: object) -> None:
    """Write ``obj`` as indented JSON to ``path`` atomically."""
    write_text_atomic(path, json.dumps(obj, indent=2, sort_keys=False) + "\n")
