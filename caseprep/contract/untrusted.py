"""Reading files that came from disk (manifests, run records, exports): they
are untrusted input.

* :func:`read_json` reads a JSON file with a size bound, a nesting bound and
  strict numbers (no NaN/Infinity literals), and turns every failure into a
  :class:`~caseprep.contract.errors.UserError` naming the file.
* :func:`confined` turns a relative path taken from such a file into a path
  that is guaranteed to stay inside a root folder: relative, no ``..``, no
  empty or hidden-trick components, and — after following every symbolic
  link — still inside the root. A violation is a UserError naming the record
  and is never followed.
* :func:`expect_*` check the type and range of one value and name its key.
"""
from __future__ import annotations

import json
import math
import os
from pathlib import Path, PurePosixPath
from typing import Any

from caseprep.contract.errors import UserError
from caseprep.contract.limits import MAX_JSON_BYTES, MAX_JSON_DEPTH


def _reject_constant(name: str):
    raise ValueError(f"the non-standard JSON number {name}")


def _depth(obj: Any) -> int:
    """Nesting depth of lists and dicts (iterative: no recursion limit)."""
    deepest = 0
    stack = [(obj, 1)]
    while stack:
        o, d = stack.pop()
        if isinstance(o, dict):
            deepest = max(deepest, d)
            stack.extend((v, d + 1) for v in o.values())
        elif isinstance(o, list):
            deepest = max(deepest, d)
            stack.extend((v, d + 1) for v in o)
    return deepest


def read_json(path: str | os.PathLike, what: str, fix: str) -> Any:
    """The parsed JSON of ``path`` (a ``what`` such as "sweep manifest").

    Refuses (UserError naming the file, with ``fix``) a file that is missing,
    a link or folder, larger than :data:`MAX_JSON_BYTES`, not UTF-8, not
    strict JSON, or nested deeper than :data:`MAX_JSON_DEPTH`."""
    p = Path(path)
    try:
        st = p.stat()
    except OSError as exc:
        raise UserError(expected=f"a readable {what}", got=f"{exc.strerror or exc}", file=str(p), fix=fix) from None
    if not p.is_file():
        raise UserError(expected=f"a {what} file", got="a folder or special file", file=str(p), fix=fix)
    if st.st_size > MAX_JSON_BYTES.value:
        raise UserError(expected=f"a {what} of at most {int(MAX_JSON_BYTES.value):,} bytes",
                        got=f"{st.st_size:,} bytes", file=str(p), fix=fix)
    try:
        with open(p, "rb") as fh:
            data = fh.read(int(MAX_JSON_BYTES.value) + 1)
        text = data.decode("utf-8")
        obj = json.loads(text, parse_constant=_reject_constant)
    except OSError as exc:
        raise UserError(expected=f"a readable {what}", got=str(exc.strerror or exc), file=str(p), fix=fix) from None
    except UnicodeDecodeError:
        raise UserError(expected=f"a {what} in UTF-8 JSON", got="binary data", file=str(p), fix=fix) from None
    except RecursionError:
        raise UserError(expected=f"a {what} nested at most {int(MAX_JSON_DEPTH.value)} levels deep",
                        got="deeper nesting", file=str(p), fix=fix) from None
    except ValueError as exc:  # json.JSONDecodeError, over-long integers, NaN literals
        raise UserError(expected=f"a {what} in valid JSON", got=f"{str(exc)[:160]}", file=str(p), fix=fix) from None
    if _depth(obj) > MAX_JSON_DEPTH.value:
        raise UserError(expected=f"a {what} nested at most {int(MAX_JSON_DEPTH.value)} levels deep",
                        got="deeper nesting", file=str(p), fix=fix)
    return obj


def is_inside(path: str | os.PathLike, root: str | os.PathLike) -> bool:
    """True when ``path``, with every symbolic link followed, lies in ``root``
    (also with its links followed) or is ``root`` itself."""
    try:
        Path(path).resolve().relative_to(Path(root).resolve())
        return True
    except (ValueError, OSError, RuntimeError):
        return False


def relative_parts(rel: object, *, file: str, key: str, what: str = "a folder") -> tuple[str, ...]:
    """The components of ``rel``, a relative POSIX path taken from a file,
    after checks: a string, not absolute, no ``..``/``.``/empty components,
    no backslash or NUL. UserError naming ``file`` and ``key`` otherwise."""
    fix = "files read back are written by underfloor: regenerate this one; paths in it stay inside its folder"
    if not isinstance(rel, str) or not rel:
        raise UserError(expected=f"{what} as a relative path (text)", got=rel, file=file, key=key, fix=fix)
    if "\0" in rel or "\\" in rel or len(rel) > 4096:
        raise UserError(expected=f"{what} as a relative path without NUL or backslash", got=rel[:200], file=file, key=key,
                        fix=fix)
    pp = PurePosixPath(rel)
    if pp.is_absolute() or rel.startswith("~"):
        raise UserError(expected=f"{what} relative to its folder", got=f"the absolute path {rel[:200]!r}", file=file,
                        key=key, fix=fix)
    parts = rel.split("/")
    if any(p in ("", ".", "..") for p in parts):
        raise UserError(expected=f"{what} inside its folder (no '..', '.' or empty parts)", got=rel[:200], file=file,
                        key=key, fix=fix)
    return tuple(parts)


def confined(root: str | os.PathLike, rel: object, *, file: str, key: str, what: str = "a folder") -> Path:
    """``root / rel`` for a relative path ``rel`` read from ``file`` at
    ``key``, refused unless it stays inside ``root`` — lexically (see
    :func:`relative_parts`) and after following symbolic links (a link
    leaving ``root`` is refused, never followed)."""
    parts = relative_parts(rel, file=file, key=key, what=what)
    p = Path(root).joinpath(*parts)
    if not is_inside(p, root):
        raise UserError(expected=f"{what} inside {root}", got=f"{rel!r}, a link leading to {Path(p).resolve()}",
                        file=file, key=key,
                        fix="remove the symbolic link: underfloor reads and writes only inside the sweep folder")
    return p


# ------------------------------------------------------------------ values

def expect_dict(v: object, *, file: str, key: str, fix: str) -> dict:
    if not isinstance(v, dict):
        raise UserError(expected="a JSON object", got=_show(v), file=file, key=key, fix=fix)
    return v


def expect_list(v: object, *, file: str, key: str, fix: str) -> list:
    if not isinstance(v, list):
        raise UserError(expected="a JSON list", got=_show(v), file=file, key=key, fix=fix)
    return v


def expect_str(v: object, *, file: str, key: str, fix: str, max_len: int = 4096) -> str:
    if not isinstance(v, str) or len(v) > max_len:
        raise UserError(expected=f"a text of at most {max_len} characters", got=_show(v), file=file, key=key, fix=fix)
    return v


def expect_number(v: object, *, file: str, key: str, fix: str, none_ok: bool = False) -> float | None:
    """A finite JSON number (not a boolean), or None when ``none_ok``."""
    if v is None and none_ok:
        return None
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(float(v)):
        raise UserError(expected="a finite number" + (" or null" if none_ok else ""), got=_show(v), file=file, key=key,
                        fix=fix)
    return float(v)


def expect_int(v: object, *, file: str, key: str, fix: str, none_ok: bool = False, lo: int = 0,
               hi: int = 2**53) -> int | None:
    """A whole JSON number in [lo, hi] (not a boolean), or None when ``none_ok``."""
    if v is None and none_ok:
        return None
    if isinstance(v, bool) or not isinstance(v, int) or not lo <= v <= hi:
        raise UserError(expected=f"a whole number from {lo} to {hi}" + (" or null" if none_ok else ""), got=_show(v),
                        file=file, key=key, fix=fix)
    return int(v)


def expect_vec3(v: object, *, file: str, key: str, fix: str) -> tuple[float, float, float]:
    if not isinstance(v, list) or len(v) != 3:
        raise UserError(expected="a list of 3 finite numbers", got=_show(v), file=file, key=key, fix=fix)
    return tuple(expect_number(x, file=file, key=f"{key}[{i}]", fix=fix) for i, x in enumerate(v))  # type: ignore[return-value]


def _show(v: object) -> object:
    """``v`` for a message: short, and its type when it is a container."""
    if isinstance(v, (dict, list)):
        return f"a JSON {'object' if isinstance(v, dict) else 'list'} of {len(v)} item(s)"
    if isinstance(v, str) and len(v) > 80:
        return v[:80] + "…"
    return v
