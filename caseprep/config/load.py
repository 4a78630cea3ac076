"""Loading the sweep config: TOML file → validated, frozen :class:`Config`.

:func:`load_config` reads a file and returns a :class:`Config` or raises one
:class:`~caseprep.contract.errors.UserError` (several problems at once as
:class:`~caseprep.contract.errors.UserErrors`) naming the file, the key, what
was expected, what was found, and the fix: type errors from the models
(:mod:`caseprep.config.schema`), value errors from the checks
(:mod:`caseprep.config.checks`).
"""
from __future__ import annotations

import tomllib
from pathlib import Path
from typing import Any

from pydantic import ValidationError

from caseprep.config.bounds import empty_problems, point_problems, raw_problems
from caseprep.config.checks import problems
from caseprep.config.schema import EMPTY_GEOMETRY, FIDELITIES, Config, translate_errors
from caseprep.contract.errors import UserError, UserErrors, did_you_mean
from caseprep.contract.limits import MAX_CONFIG_BYTES


def _tuplify(x: Any) -> Any:
    if isinstance(x, list):
        return tuple(_tuplify(v) for v in x)
    if isinstance(x, dict):
        return {k: _tuplify(v) for k, v in x.items()}
    return x


def _resolve_paths(cfg: Config, base: Path) -> Config:
    variants = {n: (v if v.geometry == EMPTY_GEOMETRY else v.model_copy(update={"geometry": str((base / v.geometry).resolve())}))
                for n, v in cfg.variants.items()}
    wheels = tuple(w.model_copy(update={"geometry": str((base / w.geometry).resolve())}) if w.geometry else w for w in cfg.body.wheels)
    return cfg.model_copy(update={"variants": variants, "body": cfg.body.model_copy(update={"wheels": wheels})})


def parse_config(data: dict, file: str = "config.toml", base_dir: str | Path = ".") -> Config:
    """Validate an already-parsed TOML mapping. Raises UserError/UserErrors."""
    errs = raw_problems(data, file)  # sizes first: nothing large is validated or expanded
    if errs:
        raise errs[0] if len(errs) == 1 else UserErrors(errs)
    try:
        cfg = Config.model_validate(_tuplify(data))
    except ValidationError as exc:
        errs = translate_errors(exc, file)
        raise (errs[0] if len(errs) == 1 else UserErrors(errs)) from None
    base = Path(base_dir)
    errs = problems(cfg, base, file) + empty_problems(cfg.sweep, file) + point_problems(cfg.model_dump(), file)
    if errs:
        raise errs[0] if len(errs) == 1 else UserErrors(errs)
    out = _resolve_paths(cfg, base)
    out._file = file
    return out


def load_config(path: str | Path) -> Config:
    """Read and validate a TOML config file; returns the frozen :class:`Config`.

    Raises :class:`UserError` (or :class:`UserErrors` for several problems)
    for anything wrong in it: syntax, unknown keys, types, values, missing
    geometry files.
    """
    p = Path(path)
    if not p.is_file():
        raise UserError(expected="an existing config file (TOML)", got=str(p), fix="check the path")
    size = p.stat().st_size
    if size > MAX_CONFIG_BYTES.value:
        raise UserError(expected=f"a config file of at most {int(MAX_CONFIG_BYTES.value):,} bytes", got=f"{size:,} bytes",
                        file=str(p), fix="a sweep config is a few kilobytes: check that this is the config")
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except UnicodeDecodeError:
        raise UserError(expected="a UTF-8 text file", got="binary data", file=str(p)) from None
    except tomllib.TOMLDecodeError as exc:
        raise UserError(f"{p} is not valid TOML: {exc}", fix="fix the syntax at that line (strings in quotes, arrays in [ ])") from None
    except RecursionError:
        raise UserError(expected="a TOML config of tables and flat lists", got="lists or tables nested too deep to read",
                        file=str(p), fix="fix the brackets") from None
    return parse_config(data, file=str(p), base_dir=p.parent)


def with_fidelity(cfg: Config, fidelity: str | None, file: str = "--fidelity") -> Config:
    """``cfg`` with its mesh fidelity preset replaced by ``fidelity`` (one of
    :data:`FIDELITIES`); ``None`` returns ``cfg`` unchanged. Used by
    ``caseprep write --fidelity`` and the demo to write a sweep at another
    level without editing the config."""
    if fidelity is None or fidelity == cfg.mesh.fidelity:
        return cfg
    if fidelity not in FIDELITIES:
        raise UserError(expected=f"a fidelity preset ({', '.join(FIDELITIES)})", got=fidelity, key=file,
                        fix="pick one of those." + did_you_mean(fidelity, FIDELITIES))
    return cfg.model_copy(update={"mesh": cfg.mesh.model_copy(update={"fidelity": fidelity})})
