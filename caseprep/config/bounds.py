"""Sizes of the config, checked before anything is validated or expanded,
and the ranges of its points.

* :func:`raw_problems` walks the parsed TOML (before type validation): text
  no longer than :data:`~caseprep.contract.limits.MAX_TEXT_LENGTH`, lists no
  longer than :data:`~caseprep.contract.limits.MAX_AXIS_VALUES`, at most
  :data:`~caseprep.contract.limits.MAX_VARIANTS` variants.
* :func:`point_problems` checks every coordinate of the config's points
  against the range declared for its key in :mod:`caseprep.config.keys`
  (the scalar keys are checked by :mod:`caseprep.config.checks`).
* :func:`empty_problems`: an empty sweep list is refused.

Finiteness (no NaN or infinity) is enforced by the schema itself.
"""
from __future__ import annotations

from typing import Any, Iterator

from caseprep.config.keys import KEYS
from caseprep.contract.errors import UserError
from caseprep.contract.limits import MAX_AXIS_VALUES, MAX_TEXT_LENGTH, MAX_VARIANTS


def _walk(obj: Any, key: str = "") -> Iterator[tuple[str, Any]]:
    """(key, value) of every value below ``obj``, keys as in messages (``a.b[2]``); iterative."""
    stack = [(key, obj)]
    while stack:
        k, o = stack.pop()
        yield k, o
        if isinstance(o, dict):
            stack.extend(((f"{k}.{n}" if k else str(n)), v) for n, v in o.items())
        elif isinstance(o, (list, tuple)):
            stack.extend((f"{k}[{i}]", v) for i, v in enumerate(o))


def raw_problems(data: dict, file: str) -> list[UserError]:
    """Sizes of the parsed TOML, before type validation: text length, list
    length, number of variants. Returns the problems (naming the key)."""
    errs: list[UserError] = []
    n_text, n_list = int(MAX_TEXT_LENGTH.value), int(MAX_AXIS_VALUES.value)
    for k, v in _walk(data):
        if isinstance(v, str) and len(v) > n_text:
            errs.append(UserError(expected=f"a text of at most {n_text} characters", got=f"{len(v)} characters",
                                  file=file, key=k, fix="shorten it"))
        elif isinstance(v, (list, tuple)) and len(v) > n_list:
            errs.append(UserError(expected=f"at most {n_list} values", got=f"{len(v):,} values", file=file, key=k,
                                  fix="split the study into several sweeps (see the README: What the tool refuses)"))
        elif isinstance(v, dict) and any(isinstance(n, str) and len(n) > n_text for n in v):
            errs.append(UserError(expected=f"keys of at most {n_text} characters", got="a longer key", file=file, key=k))
    variants = data.get("variants")
    if isinstance(variants, dict) and len(variants) > MAX_VARIANTS.value:
        errs.append(UserError(expected=f"at most {int(MAX_VARIANTS.value)} variants", got=f"{len(variants):,}", file=file,
                              key="variants", fix="split the study into several sweeps"))
    return errs[:20]


def point_problems(cfg_data: dict, file: str) -> list[UserError]:
    """Every coordinate of every point (a key declared in
    :data:`~caseprep.config.keys.KEYS` whose value is a list of 3 numbers)
    against its key's declared range (``cfg_data``: the config's
    ``model_dump()``)."""
    import re

    errs: list[UserError] = []
    for k, v in _walk(cfg_data):
        if not (isinstance(v, (list, tuple)) and len(v) == 3 and all(isinstance(x, (int, float)) for x in v)):
            continue
        g = re.sub(r"\[\d+\]", "[]", k)
        key = KEYS.get(g)
        if key is None or key.range is None or key.unit != "m":
            continue
        for i, x in enumerate(v):
            if not key.range.contains(x):
                errs.append(UserError(expected=key.range.text(), got=x, file=file, key=f"{k}[{i}]", fix=key.range.fix))
    return errs


#: Sweep lists that must not be empty (an empty axis means no case at all,
#: and an empty variant list is not "all variants").
NON_EMPTY = ("sweep.variants", "sweep.ride_height", "sweep.pitch_deg", "sweep.ride_heights_front_rear",
             "sweep.yaw_deg", "sweep.speed", "sweep.mesh_level", "sweep.points")


def empty_problems(sweep: Any, file: str) -> list[UserError]:
    """An empty list in a sweep axis (UserError naming the key)."""
    errs = []
    for key in NON_EMPTY:
        v = getattr(sweep, key.split(".")[1])
        if v is not None and len(v) == 0:
            fix = ("remove the key to run every variant" if key == "sweep.variants"
                   else "give at least one value, or remove the key to use its default")
            errs.append(UserError(expected="at least one value", got="an empty list []", file=file, key=key, fix=fix))
    return errs
