"""Write a sweep folder from rendered CaseSpecs (the I/O half of case writing).

Layout written under ``out_dir``::

    manifest.json           sweep manifest (caseprep.contract.manifest), one record per case
    cases.txt               one case id per line (run_all.sh, slurm_array.sh read it)
    run_all.sh              workstation runner (N cases at a time)
    slurm_array.sh          SLURM array job: the solver (one task per case)
    slurm_post.sh           SLURM array job: the post-processing shards
    slurm_merge.sh          SLURM job: merge the shards, tables and report
    submit.sh               submits the three with afterany dependencies
    geometry/<file>         the ONE copy of each surface file (body, wheels)
    cases/<case_id>/        one solver case; constant/triSurface/<file> is a
                            relative symlink to ../../../../geometry/<file>

Safety rules:

* Only new cases are added by default. A case folder that exists and holds
  exactly what would be written is left alone (files the run added — mesh,
  results, logs — are ignored in that comparison). A case that exists and
  differs is refused (:class:`UserError` naming the case and the first
  differing file) unless ``force=True``; then that case folder is replaced
  as a whole (its mesh, results and logs go with it).
* Nothing is written before every case and geometry file has been rendered
  and checked, so a refused run changes nothing.
* Each case folder is assembled in a hidden temporary folder beside its
  final place and renamed into place, so a case appears complete or not at
  all; the sweep-level files and the geometry copies are written atomically
  (:mod:`caseprep.contract.atomicio`). Files outside the cases being replaced are never
  deleted.
"""
from __future__ import annotations

import dataclasses
import datetime as _dt
import hashlib
import os
import shutil
import tempfile
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping, Sequence

import numpy as np

from caseprep.contract import __version__
from caseprep.contract.errors import UserError
from caseprep.contract.manifest import MANIFEST_NAME, CaseRecord, Manifest, read_manifest, write_manifest
from caseprep.casefiles.render import (CASES_DIR, GEOMETRY_DIR, CaseFile, mesh_fingerprint, outputs_record, render_case,
                                       render_sweep_scripts, surfaces)
from caseprep.contract.atomicio import open_folder, write_bytes_atomic, write_json_atomic, write_text_atomic
from caseprep.contract.limits import is_case_id
from caseprep.contract.locking import JOURNAL_NAME, interrupted_write, sweep_lock
from caseprep.geometry.stl import (convert_to_stl, read_stl, scale_stl_bytes, stl_ascii_text, stl_binary_bytes,
                                   stl_solid_names, with_solid_names_as_read)
from caseprep.planning.batch import BatchSettings
from caseprep.planning.spec import CaseSpec


@dataclass(frozen=True)
class WriteSummary:
    """What :func:`write_sweep` did. ``case_bytes``: bytes of the files written
    into case folders (symlinks and the shared geometry not counted)."""

    root: Path
    written: tuple[str, ...]
    replaced: tuple[str, ...]
    unchanged: tuple[str, ...]
    geometry_written: tuple[str, ...]
    manifest: Path
    case_bytes: int
    cleaned: tuple[str, ...] = ()      # what an interrupted earlier write left and this one settled
    unlisted: tuple[str, ...] = ()     # folders in cases/ with no record (not written by caseprep): not listed

    @property
    def n_cases(self) -> int:
        return len(self.written) + len(self.replaced) + len(self.unchanged)


# --------------------------------------------------------------------------- geometry

def _resolve_source(name: str, spec: CaseSpec, sources: Mapping[str, os.PathLike | str], config_dir: Path) -> Path:
    """Where the shared geometry file ``name`` comes from: ``sources[name]``,
    else ``spec.extra["geometry_sources"][name]``, else ``<config dir>/<name>``
    (relative paths are taken relative to the config file's folder)."""
    src = sources.get(name)
    if src is None:
        src = (spec.extra.get("geometry_sources") or {}).get(name)
    p = Path(src) if src is not None else Path(name)
    if not p.is_absolute():
        p = config_dir / p
    if not p.is_file():
        raise UserError(expected=f"the geometry file for {name!r}", got=str(p), key="geometry",
                        fix="check the geometry path in the config (relative paths are relative to the config file)")
    return p


def _expected_solids(spec: CaseSpec) -> dict[str, list[str]]:
    """Per shared file: solid names the mesher must find in it."""
    return {s.file: [solid for solid, _ in s.regions] for s in surfaces(spec)}


def _make_geometry(name: str, recipe: Mapping) -> bytes:
    """A geometry file the planner asked for (``spec.extra["geometry_recipes"]``):
    the ``source`` STL read in its ``unit``, the ``solids`` kept (None: all),
    the points moved by p' = ``rotation`` @ p + ``offset`` (m; None: kept),
    written as one binary STL solid (``solid_name`` given: a placed wheel)
    or as ASCII with the kept solids' names (a body without its wheels)."""
    try:
        surf = read_stl(recipe["source"], recipe["unit"], default_name=recipe.get("solid_name") or "body")
    except UserError as exc:
        raise UserError(f"{exc} (making geometry/{name})") from None
    if recipe.get("solids") is not None:
        missing = [n for n in recipe["solids"] if n not in surf.solid_names]
        if missing:
            raise UserError(expected=f"the solids {missing} in {recipe['source']}", got=list(surf.solid_names),
                            file=str(recipe["source"]), key="geometry solids", fix="check the solid names of the file")
        surf = surf.select(recipe["solids"])
    tris = surf.triangles
    if recipe.get("rotation") is not None:
        R = np.asarray(recipe["rotation"], dtype=float).reshape(3, 3)
        tris = tris @ R.T + np.asarray(recipe["offset"], dtype=float).reshape(3)
    if recipe.get("solid_name"):
        return stl_binary_bytes(tris)
    groups = [(n, tris[surf.solid == i]) for i, n in enumerate(surf.solid_names)]
    return stl_ascii_text(groups).encode()


def _prepare_geometry(specs: Sequence[CaseSpec], sources: Mapping, config_dir: Path) -> dict[str, bytes]:
    """Bytes of each shared geometry file (copied, scaled, converted or made
    from a recipe once)."""
    out: dict[str, bytes] = {}
    want: dict[str, tuple[list[str], CaseSpec, float]] = {}
    for spec in specs:
        scales = spec.extra.get("geometry_scales") or {}
        for name, solids in _expected_solids(spec).items():
            scale = float(scales.get(name, spec.extra.get("geometry_scale", 1.0)))
            prev = want.get(name)
            if prev is not None and (sorted(prev[0]) != sorted(solids) or prev[2] != scale):
                raise UserError(expected=f"every case to use {name!r} with the same solids and scale",
                                got=f"{prev[0]} ×{prev[2]} and {solids} ×{scale}", key="geometry",
                                fix="give differing surfaces different file names")
            want[name] = (solids, spec, scale)
    for name, (solids, spec, scale) in want.items():
        recipe = (spec.extra.get("geometry_recipes") or {}).get(name)
        if recipe is not None and name not in sources:
            out[name] = _make_geometry(name, recipe)
            continue
        src = _resolve_source(name, spec, sources, config_dir)
        is_stl = src.suffix.lower() == ".stl"
        if is_stl:
            data = with_solid_names_as_read(src.read_bytes())  # the solids named as the planner read them
            if scale != 1.0:
                data = scale_stl_bytes(data, scale)
        else:
            if len(solids) != 1:
                raise UserError(expected=f"an STL with named solids {solids}", got=src.name, file=str(src),
                                key="geometry", fix="export a multi-solid surface as ASCII STL")
            data = convert_to_stl(src, solids[0], scale)
        found = stl_solid_names(data)
        if found is None or len(found) == 1:
            if len(solids) != 1:
                what = "a binary STL (no solid names)" if found is None else f"one solid {found}"
                raise UserError(expected=f"{len(solids)} named solids {solids}", got=what, file=str(src), key="geometry",
                                fix="export the surface as ASCII STL with one solid per part")
        elif sorted(found) != sorted(solids):
            raise UserError(expected=f"solids {sorted(solids)}", got=sorted(found), file=str(src), key="geometry solids",
                            fix="list every solid of the file in the config (body parts and wheels)")
        out[name] = data
    return out


# --------------------------------------------------------------------------- cases
def _first_difference(folder: Path, files: Mapping[str, CaseFile]) -> str | None:
    """First file (sorted) of ``files`` that ``folder`` lacks or holds differently,
    with the reason; None if all match. Other files in the folder are ignored."""
    for rel in sorted(files):
        f = files[rel]
        p = folder / rel
        if f.symlink:
            if not p.is_symlink():
                return f"{rel} (not a link to the shared geometry)"
            if os.readlink(p) != f.text:
                return f"{rel} (links to {os.readlink(p)!r}, expected {f.text!r})"
            continue
        if p.is_symlink() or not p.is_file():
            return f"{rel} (missing)"
        try:
            data = p.read_bytes()
        except OSError as exc:
            return f"{rel} (unreadable: {exc})"
        if data != f.text.encode("utf-8"):
            return f"{rel} (content differs)"
        if bool(p.stat().st_mode & 0o100) != bool(f.mode & 0o100):
            return f"{rel} (executable bit differs)"
    return None


def _current_umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def _assemble(tmp: Path, files: Mapping[str, CaseFile], umask: int = 0o022) -> int:
    """Write ``files`` into the fresh folder ``tmp``; returns bytes written.

    Plain writes (no per-file sync): the folder is renamed into place only
    when complete, which is what makes the case appear atomically.
    """
    nbytes = 0
    made: set[Path] = {tmp}
    for rel in sorted(files):
        f = files[rel]
        p = tmp / rel
        if p.parent not in made:
            p.parent.mkdir(parents=True, exist_ok=True)
            made.add(p.parent)
        if f.symlink:
            os.symlink(f.text, p)
            continue
        data = f.text.encode("utf-8")
        fd = os.open(p, os.O_WRONLY | os.O_CREAT | os.O_EXCL, f.mode & 0o777)
        try:
            os.write(fd, data)
        finally:
            os.close(fd)
        if f.mode & umask:
            os.chmod(p, f.mode & 0o777)  # the umask took bits away: set the intended mode
        nbytes += len(data)
    return nbytes


def _place_case(cases_dir: Path, case_id: str, files: Mapping[str, CaseFile], replace: bool, umask: int) -> int:
    tmp = Path(tempfile.mkdtemp(prefix=f".uf-new-{case_id}-", dir=cases_dir))
    try:
        os.chmod(tmp, 0o755)  # mkdtemp makes it private
        n = _assemble(tmp, files, umask)
        final = cases_dir / case_id
        if replace:
            old = Path(tempfile.mkdtemp(prefix=f".uf-old-{case_id}-", dir=cases_dir))
            os.rename(final, old / "case")
            os.rename(tmp, final)
            shutil.rmtree(old, ignore_errors=True)
        else:
            os.rename(tmp, final)  # fails if something appeared meanwhile: never overwrites
        return n
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def _check_specs(specs: Sequence[CaseSpec]) -> None:
    seen: set[str] = set()
    for s in specs:
        cid = s.case_id
        if not cid or "/" in cid or "\\" in cid or cid.startswith(".") or cid != os.path.basename(cid) or "\0" in cid:
            raise ValueError(f"unsafe case id {cid!r}: expected a single path component (validated upstream)")
        if cid in seen:
            raise ValueError(f"duplicate case id {cid!r} in the plan")
        seen.add(cid)


def config_hash(config_path: os.PathLike | str) -> str:
    """``sha256:<hex>`` of the config file's bytes."""
    return "sha256:" + hashlib.sha256(Path(config_path).read_bytes()).hexdigest()


def _geometry_to_write(root: Path, geometry: Mapping[str, bytes], force: bool) -> list[str]:
    """The shared geometry files that are new or differ (refused unless ``force``)."""
    geo_dir = root / GEOMETRY_DIR
    todo: list[str] = []
    for name, data in geometry.items():
        p = geo_dir / name
        if p.is_symlink() or (p.exists() and not p.is_file()):
            raise UserError(expected=f"{GEOMETRY_DIR}/{name} to be a plain file", got="a link or folder",
                            file=str(p), fix="remove it; caseprep keeps one real copy there")
        if p.is_file():
            if p.stat().st_size == len(data) and p.read_bytes() == data:
                continue
            if not force:
                raise UserError(
                    f"the shared geometry {GEOMETRY_DIR}/{name} in {root} differs from the source "
                    "(all existing cases were meshed with the old one)",
                    fix="write to a new folder, or re-run with --force to replace it (existing meshes then no longer "
                        "match the geometry: re-run their mesh stage)")
        todo.append(name)
    return todo


def _cases_to_write(cases_dir: Path, specs: Sequence[CaseSpec], rendered: Mapping[str, Mapping[str, CaseFile]],
                    force: bool) -> tuple[list[str], list[str], list[str]]:
    """(new, to replace, unchanged) case ids; a differing case is refused unless ``force``."""
    new, replace, same = [], [], []
    for s in specs:
        folder = cases_dir / s.case_id
        if not (folder.exists() or folder.is_symlink()):
            new.append(s.case_id)
            continue
        if folder.is_symlink() or not folder.is_dir():
            raise UserError(expected=f"{CASES_DIR}/{s.case_id} to be a case folder", got="a file or link",
                            file=str(folder), fix="move it away")
        diff = _first_difference(folder, rendered[s.case_id])
        if diff is None:
            same.append(s.case_id)
        elif force:
            replace.append(s.case_id)
        else:
            raise UserError(
                f"case {s.case_id} already exists in {cases_dir} and differs from what would be written: "
                f"first difference {diff}",
                fix="re-run with --force to replace the differing cases (their mesh, results and logs are deleted), "
                    "or write to a new folder")
    return new, replace, same


def _old_manifest(root: Path, force: bool) -> Manifest | None:
    """The sweep's existing manifest (None when there is none). One that
    cannot be read — malformed, or with a record pointing outside the sweep —
    is refused (UserError naming the record), or with ``force`` set aside:
    its records are dropped and the new manifest lists this plan's cases."""
    p = root / MANIFEST_NAME
    if not (p.exists() or p.is_symlink()):
        return None
    try:
        return read_manifest(root)
    except UserError as exc:
        if force:
            return None
        raise UserError(f"the existing manifest cannot be kept: {exc}",
                        fix="write to a new folder, or re-run with --force to replace the manifest "
                            "(its unreadable records are dropped)") from None


def _planned_records(specs: Sequence[CaseSpec], rendered: Mapping[str, Mapping[str, CaseFile]],
                     geometry: Mapping[str, bytes]) -> list[CaseRecord]:
    """The manifest record of every planned case, with its mesh fingerprint
    when it may share its mesh (config ``mesh.reuse``)."""
    outputs = outputs_record()
    return [dataclasses.replace(s.record(f"{CASES_DIR}/{s.case_id}"), outputs=outputs,
                                mesh_key=(mesh_fingerprint(rendered[s.case_id], geometry)
                                          if s.solver.mesh_reuse == "identical" else None))
            for s in specs]


def assign_mesh_owners(records: Sequence[CaseRecord]) -> list[CaseRecord]:
    """Each record with its mesh owner: the first record (in the given
    order) with the same ``mesh_key``; a record without a key owns its own
    mesh. Records of the same owner have the same variant by construction
    (the surfaces are part of the key)."""
    first: dict[str, str] = {}
    out = []
    for r in records:
        if r.mesh_key is None:
            out.append(dataclasses.replace(r, mesh_owner=r.case_id))
            continue
        owner = first.setdefault(r.mesh_key, r.case_id)
        out.append(dataclasses.replace(r, mesh_owner=owner))
    return out


def _fingerprint_files(files: Mapping[str, CaseFile]) -> str:
    """SHA-256 over a case's files as written (link targets, bytes, executable bit), sorted by path."""
    h = hashlib.sha256()
    for rel in sorted(files):
        f = files[rel]
        h.update(rel.encode() + b"\0" + (b"L" if f.symlink else b"X" if f.mode & 0o100 else b"F") + b"\0")
        h.update(f.text.encode("utf-8") + b"\0")
    return h.hexdigest()


def _fingerprint_folder(folder: Path, rels: Sequence[str]) -> str | None:
    """The :func:`_fingerprint_files` of what ``folder`` holds at ``rels`` (None when unreadable)."""
    h = hashlib.sha256()
    try:
        for rel in sorted(rels):
            p = folder / rel
            if p.is_symlink():
                kind, data = b"L", os.readlink(p).encode("utf-8")
            else:
                kind = b"X" if p.stat().st_mode & 0o100 else b"F"
                data = p.read_bytes()
            h.update(rel.encode() + b"\0" + kind + b"\0" + data + b"\0")
    except OSError:
        return None
    return h.hexdigest()


TEMP_PREFIXES = (".uf-new-", ".uf-old-")


def _clean_temporary(cases_dir: Path) -> list[str]:
    """Remove the temporary folders a killed writer left in ``cases/``: a
    half-assembled new case (``.uf-new-*``) is deleted; a case moved aside
    for replacement (``.uf-old-*/case``) goes back to its place when the new
    one never arrived, else it is deleted. Returns what was done, in words."""
    done: list[str] = []
    if not cases_dir.is_dir() or cases_dir.is_symlink():
        return done
    for entry in sorted(os.scandir(cases_dir), key=lambda e: e.name):
        if not entry.name.startswith(TEMP_PREFIXES) or entry.is_symlink() or not entry.is_dir():
            continue
        p = Path(entry.path)
        if entry.name.startswith(".uf-old-"):
            cid = entry.name[len(".uf-old-"):].rsplit("-", 1)[0]
            moved = p / "case"
            if is_case_id(cid) and moved.is_dir() and not (cases_dir / cid).exists():
                os.rename(moved, cases_dir / cid)
                done.append(f"restored {CASES_DIR}/{cid} (its replacement never arrived)")
        shutil.rmtree(p, ignore_errors=True)
        done.append(f"removed {CASES_DIR}/{entry.name}")
    return done


def _settle(root: Path, journal: dict, old: Manifest | None, verified: bool) -> tuple[Path, list[str]]:
    """Write the manifest, cases.txt and the scripts for exactly the case
    folders present in ``root/cases`` and remove the journal. Each present
    folder gets the planned record (``journal["planned"]``) when it holds the
    planned content — a new case that is present, a replaced case whose files
    match the planned fingerprint (or all of them when ``verified``) — else
    its record in the old manifest. Folders without any record are not
    listed and are returned by name."""
    cases_dir = root / CASES_DIR
    _clean_temporary(cases_dir)
    planned = {}
    for i, d in enumerate(journal.get("planned", [])):
        try:
            r = CaseRecord.from_dict(d, source=str(root / JOURNAL_NAME), index=i)
        except UserError:
            continue
        planned[r.case_id] = r
    new, replace = set(journal.get("new", [])), set(journal.get("replace", []))
    prints = journal.get("fingerprints", {})
    old_records = {r.case_id: r for r in (old.cases if old is not None else ())}
    present = set()
    if cases_dir.is_dir() and not cases_dir.is_symlink():
        present = {e.name for e in os.scandir(cases_dir)
                   if not e.name.startswith(".") and e.is_dir(follow_symlinks=False)}
    records: list[CaseRecord] = []
    for cid, r in old_records.items():  # kept cases first, in their order
        if cid not in planned and cid in present and old is not None and old.case_dir(r).is_dir():
            records.append(r)
    for cid, r in planned.items():
        if cid not in present:
            continue
        if cid in replace and not verified:
            rels = journal.get("rels", {}).get(cid)
            same = rels is not None and _fingerprint_folder(cases_dir / cid, rels) == prints.get(cid)
            if not same:
                if cid in old_records:
                    records.append(old_records[cid])
                continue
        records.append(r)
    records = assign_mesh_owners(records)
    listed = {r.case_id for r in records}
    unlisted = sorted(present - listed)
    manifest = Manifest(
        cases=tuple(records), tool_version=__version__, config_file=str(journal.get("config_file", "")),
        config_hash=str(journal.get("config_hash", "")),
        created_utc=_dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        study=str(journal.get("study", "")))
    scripts = render_sweep_scripts([r.case_id for r in records], int(journal.get("n_procs", 1) or 1),
                                   _journal_batch(journal), str(journal.get("study", "")))
    for rel, f in scripts.items():
        write_text_atomic(root / rel, f.text, mode=f.mode, root=root)
    mpath = write_manifest(manifest, root)
    try:
        os.unlink(root / JOURNAL_NAME)
    except FileNotFoundError:
        pass
    return mpath, unlisted


def _journal_batch(journal: dict) -> BatchSettings:
    """The batch settings recorded in a journal (defaults when absent or
    malformed: the journal is read back from disk)."""
    try:
        return BatchSettings(**dict(journal.get("batch") or {}))
    except (TypeError, ValueError):
        return BatchSettings()


def _settle_interrupted(root: Path) -> tuple[str, ...]:
    """Complete what a killed earlier write left (call holding the lock):
    temporary folders cleaned, and when its journal is there, the manifest
    rewritten for the folders present. Returns what was done, in words."""
    done = _clean_temporary(root / CASES_DIR)
    journal = interrupted_write(root)
    if journal is not None:
        try:
            old = read_manifest(root) if (root / MANIFEST_NAME).is_file() else None
        except UserError:
            old = None
        _settle(root, journal, old, verified=False)
        done.append(f"completed the manifest of an interrupted write (pid {journal.get('pid', '?')})")
    return tuple(done)


def prepare_sweep(specs: Sequence[CaseSpec], config_path: os.PathLike | str,
                  geometry_sources: Mapping[str, os.PathLike | str] | None = None
                  ) -> tuple[dict[str, dict[str, CaseFile]], dict[str, bytes]]:
    """Everything :func:`write_sweep` writes, made in memory and checked,
    nothing written: (case files by case id, shared geometry bytes by file
    name). ``caseprep check`` runs it too, so a config that passes ``check``
    is one that ``write`` can write. Raises UserError."""
    specs = list(specs)
    cfg = Path(config_path)
    if not specs:
        raise UserError(expected="at least one case to write", got="an empty plan", file=str(cfg),
                        fix="check the sweep ranges in the config")
    _check_specs(specs)
    if not cfg.is_file():
        raise UserError(expected="a config file", got=str(cfg), fix="give the path of the sweep's TOML config")
    rendered = {s.case_id: render_case(s) for s in specs}
    geometry = _prepare_geometry(specs, geometry_sources or {}, cfg.resolve().parent)
    return rendered, geometry


def write_sweep(
    specs: Sequence[CaseSpec],
    out_dir: os.PathLike | str,
    config_path: os.PathLike | str,
    force: bool = False,
    *,
    geometry_sources: Mapping[str, os.PathLike | str] | None = None,
    study: str | None = None,
    batch: BatchSettings = BatchSettings(),
) -> WriteSummary:
    """Write the sweep folder ``out_dir`` for ``specs`` (see module docstring).

    ``config_path``: the config the specs came from (hashed into the manifest;
    its folder is where relative geometry paths start). ``geometry_sources``
    maps shared geometry file names (``spec.geometry``, ``Wheel.geometry``) to
    source files; else ``spec.extra["geometry_sources"]``, else the name next
    to the config. ``spec.extra["geometry_scales"][name]`` (else ``spec.extra["geometry_scale"]``,
    default 1) multiplies the
    source coordinates (e.g. 0.001 for a file drawn in mm) when the shared
    copy is made. ``batch``: the resources of the cluster job scripts
    (:class:`caseprep.planning.batch.BatchSettings`, from the config's
    ``[cluster]`` table). ``study``: manifest study name (default: the existing
    manifest's, else the config file's stem).

    Returns a :class:`WriteSummary`. Raises :class:`UserError` for a case or
    geometry file that exists with different content (unless ``force``) and
    for bad geometry sources.
    """
    specs = list(specs)
    root = Path(out_dir)
    cfg = Path(config_path)
    if root.exists() and not root.is_dir():
        raise UserError(expected="an output folder", got=f"{root} (a file)", key="-o", fix="choose a folder path")

    # 1. render everything (pure) and prepare geometry — nothing written yet
    rendered, geometry = prepare_sweep(specs, cfg, geometry_sources)
    chash = config_hash(cfg)

    # 2.-4. one writer at a time; an interrupted earlier write is settled first
    with sweep_lock(root, "caseprep write"):
        cleaned = _settle_interrupted(root)
        return _write_locked(specs, root, cfg, config_path, force, rendered, geometry, chash, study, cleaned, batch)


def _write_locked(specs, root: Path, cfg: Path, config_path, force: bool, rendered, geometry, chash: str,
                  study: str | None, cleaned: tuple[str, ...], batch: BatchSettings) -> WriteSummary:
    # 2. compare with what exists
    cases_dir = root / CASES_DIR
    geo_dir = root / GEOMETRY_DIR
    for sub in (cases_dir, geo_dir):  # never write through a link or into a file
        if sub.is_symlink() or (sub.exists() and not sub.is_dir()):
            raise UserError(expected=f"{sub.name}/ in {root} to be a real folder (or absent)",
                            got="a symbolic link" if sub.is_symlink() else "a file", file=str(sub),
                            fix="remove or rename it: underfloor writes only inside the output folder, never through links")
    old = _old_manifest(root, force)
    geo_todo = _geometry_to_write(root, geometry, force)
    new, replace, same = _cases_to_write(cases_dir, specs, rendered, force)
    planned = _planned_records(specs, rendered, geometry)
    journal = {
        "pid": os.getpid(), "command": "caseprep write", "config_file": str(config_path),
        "started_utc": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "study": study or (old.study if old is not None and old.study else cfg.stem),
        "config_hash": chash, "n_procs": max(s.solver.n_procs for s in specs), "batch": dataclasses.asdict(batch),
        "new": new, "replace": replace,
        "fingerprints": {cid: _fingerprint_files(rendered[cid]) for cid in replace},
        "rels": {cid: sorted(rendered[cid]) for cid in replace},
        "planned": [r.to_dict() for r in planned],
    }

    # 3. write: the journal first, so that an interrupted write can be completed
    os.close(open_folder(root, [CASES_DIR]))  # created without following links
    write_json_atomic(root / JOURNAL_NAME, journal, root=root)
    try:
        for name in geo_todo:
            write_bytes_atomic(geo_dir / name, geometry[name], mode=0o644, root=root)
        umask = _current_umask()
        jobs = [(cid, False) for cid in new] + [(cid, True) for cid in replace]
        # File creation is metadata-bound (system calls release the GIL): a few
        # threads, each assembling whole case folders, overlap that waiting.
        with ThreadPoolExecutor(max_workers=min(8, max(1, len(jobs)))) as pool:
            sizes = list(pool.map(lambda j: _place_case(cases_dir, j[0], rendered[j[0]], replace=j[1], umask=umask),
                                  jobs))
        nbytes = sum(sizes)
    except BaseException:
        # interrupted (Ctrl-C, a full disk…): list exactly the folders now present, then re-raise
        _settle(root, journal, old, verified=False)
        raise

    # 4. manifest and scripts: exactly the case folders present
    mpath, unlisted = _settle(root, journal, old, verified=True)
    return WriteSummary(root=root, written=tuple(new), replaced=tuple(replace), unchanged=tuple(same),
                        geometry_written=tuple(geo_todo), manifest=mpath, case_bytes=nbytes, cleaned=cleaned,
                        unlisted=tuple(unlisted))
