"""Per-case results on disk (``<out>/results/<case_id>.json``): what one case's
post-processing produced, with what it was computed from, so that a later run
reuses it while its inputs are unchanged and recomputes it otherwise.

**The reuse rule.** A per-case result is reused when all of these equal what
it was computed from (its *fingerprint*):

* the case's entry in the manifest (SHA-256 of its canonical JSON: folder,
  parameters, frames, reference values, patches…),
* the post-processing's version (:data:`caseprep.contract.__version__`) and
  :data:`RESULT_VERSION`,
* the **size and modification time (ns)** of every input file of the case:
  the run record (``underfloor-run.json``), ``logs/export.done``, every file
  under ``VTK/`` (the export the forces and y+ are read from) and under
  ``postProcessing/`` (the runtime force monitor the convergence verdict is
  judged from).

Size + modification time, not a content hash: a stat per file costs
microseconds whatever the file's size, reading 5 M faces to hash them costs
as much as post-processing them. Every writer of those files (the solver's
tools, ``run.sh``, the runner) replaces or rewrites them, which changes the
modification time.

**Never trusted blindly.** The file is untrusted input: a result that does
not parse, has another schema, names another case or study, or whose
SHA-256 ``checksum`` (over its canonical JSON without that key) does not
match, is reported with the reason and recomputed, never used.

Files are written atomically (temp file + rename): a reader sees the old
result or the new one, never part of one.
"""
from __future__ import annotations

import hashlib
import json
import os
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from caseprep.contract import __version__
from caseprep.contract.atomicio import json_ready, write_json_atomic
from caseprep.contract.manifest import CaseRecord
from caseprep.contract.errors import UserError
from caseprep.contract.records import RECORD_NAME
from caseprep.contract.untrusted import read_json

RESULTS_DIR = "results"
RESULT_SCHEMA = "underfloor-case-result"
#: Bump when the content of a per-case result changes meaning: older ones are then recomputed.
RESULT_VERSION = 1
#: Folders of a case whose files are inputs of its post-processing (every file below them).
INPUT_TREES = ("VTK", "postProcessing")
#: Single files of a case that are inputs of its post-processing.
INPUT_FILES = (RECORD_NAME, "logs/export.done")


def _canonical(obj: Any, ready: bool = False) -> bytes:
    """Canonical JSON bytes (sorted keys, no spaces); ``ready``: ``obj`` is
    already JSON data (as parsed), no conversion needed."""
    return json.dumps(obj if ready else json_ready(obj), sort_keys=True, separators=(",", ":"),
                      allow_nan=False).encode("utf-8")


def _sha256(data: bytes) -> str:
    return "sha256:" + hashlib.sha256(data).hexdigest()


def case_hash(case: CaseRecord) -> str:
    """SHA-256 of the case's manifest entry (canonical JSON)."""
    return _sha256(_canonical(case.to_dict()))


@dataclass(frozen=True)
class Fingerprint:
    """What a case's result depends on: ``digest`` (SHA-256 over the rest),
    ``case`` (:func:`case_hash`), ``files`` {path relative to the case
    folder: [size B, modification time ns]}, ``version`` (tool and result
    versions)."""

    digest: str
    case: str
    files: dict[str, tuple[int, int]]
    version: str

    def to_dict(self) -> dict[str, Any]:
        return {"digest": self.digest, "case": self.case, "version": self.version,
                "files": {k: list(v) for k, v in self.files.items()}}


def fingerprint(case_dir: str | os.PathLike, case: CaseRecord) -> Fingerprint:
    """The :class:`Fingerprint` of the case's inputs now (stat calls only)."""
    d = Path(case_dir)
    files: dict[str, tuple[int, int]] = {}

    def add(p: Path) -> None:
        try:
            st = p.stat()
        except OSError:
            return
        files[p.relative_to(d).as_posix()] = (int(st.st_size), int(st.st_mtime_ns))

    for rel in INPUT_FILES:
        add(d / rel)
    for tree in INPUT_TREES:
        top = d / tree
        if not top.is_dir():
            continue
        for dirpath, dirnames, filenames in os.walk(top):
            dirnames.sort()
            for name in sorted(filenames):
                add(Path(dirpath) / name)
    chash = case_hash(case)
    version = f"{__version__}/{RESULT_VERSION}"
    digest = _sha256(_canonical({"case": chash, "version": version, "files": files}))
    return Fingerprint(digest=digest, case=chash, files=dict(sorted(files.items())), version=version)


def result_path(out_dir: str | os.PathLike, case_id: str) -> Path:
    return Path(out_dir) / RESULTS_DIR / f"{case_id}.json"


def write_case_result(out_dir: str | os.PathLike, case_id: str, study: str, fp: Fingerprint,
                      payload: dict[str, Any]) -> Path:
    """Write one case's result (``payload``: JSON-ready data) atomically with
    its fingerprint and checksum; returns the path."""
    doc = {"schema": RESULT_SCHEMA, "schema_version": RESULT_VERSION, "case_id": case_id, "study": study,
           "fingerprint": fp.to_dict(), **json_ready(payload)}
    doc["checksum"] = _sha256(_canonical(doc, ready=True))
    path = result_path(out_dir, case_id)
    write_json_atomic(path, doc, root=Path(out_dir))  # never through a link out of the output folder
    return path


@dataclass(frozen=True)
class StoredResult:
    """A per-case result read back: ``payload`` (None when it cannot be
    used) and ``why`` not (``missing``, ``corrupt: …``, ``other case``,
    ``other study``, ``stale: …``), empty when usable."""

    payload: dict[str, Any] | None
    why: str = ""
    fingerprint: str | None = None

    @property
    def usable(self) -> bool:
        return self.payload is not None


def read_case_result(out_dir: str | os.PathLike, case_id: str, study: str,
                     current: Fingerprint | None = None) -> StoredResult:
    """Read and check one case's stored result. With ``current`` (the
    inputs' fingerprint now) a result computed from other inputs is
    ``stale``; without, only its integrity and identity are checked."""
    path = result_path(out_dir, case_id)
    if not (path.exists() or path.is_symlink()):
        return StoredResult(None, "missing")
    try:  # untrusted input: size, encoding, strict JSON and nesting checked
        doc = read_json(path, "per-case result", fix="")
    except UserError as exc:
        return StoredResult(None, "corrupt: " + str(exc).splitlines()[0])
    if not isinstance(doc, dict) or doc.get("schema") != RESULT_SCHEMA:
        return StoredResult(None, "corrupt: not a per-case result")
    if doc.get("schema_version") != RESULT_VERSION:
        return StoredResult(None, f"stale: result version {doc.get('schema_version')!r}, now {RESULT_VERSION}")
    claimed = doc.pop("checksum", None)
    try:
        actual = _sha256(_canonical(doc, ready=True))
    except (TypeError, ValueError):
        actual = None
    if claimed != actual:
        return StoredResult(None, "corrupt: checksum does not match the content")
    if doc.get("case_id") != case_id:
        return StoredResult(None, f"other case: {doc.get('case_id')!r}")
    if doc.get("study") != study:
        return StoredResult(None, f"other study: {doc.get('study')!r}")
    fp = doc.get("fingerprint") or {}
    if not isinstance(fp, dict):
        return StoredResult(None, "corrupt: fingerprint")
    if current is not None and fp.get("digest") != current.digest:
        return StoredResult(None, "stale: " + _what_changed(fp, current), fp.get("digest"))
    return StoredResult(doc, "", fp.get("digest"))


def _what_changed(old: dict[str, Any], new: Fingerprint) -> str:
    if old.get("case") != new.case:
        return "the case's manifest entry changed"
    if old.get("version") != new.version:
        return f"computed by version {old.get('version')}, now {new.version}"
    before = {k: tuple(v) for k, v in (old.get("files") or {}).items() if isinstance(v, list)}
    changed = sorted(set(before) ^ set(new.files) | {k for k in before if k in new.files and before[k] != new.files[k]})
    if not changed:
        return "inputs changed"
    return "inputs changed: " + ", ".join(changed[:3]) + (" …" if len(changed) > 3 else "")


__all__ = ["RESULTS_DIR", "RESULT_SCHEMA", "RESULT_VERSION", "Fingerprint", "StoredResult", "case_hash",
           "fingerprint", "read_case_result", "result_path", "write_case_result"]
