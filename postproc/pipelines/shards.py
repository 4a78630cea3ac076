"""Splitting a sweep's post-processing into shards, running cases in worker
processes, recording each shard's state, and one writer at a time for the
sweep's tables.

**Shards.** ``--shard I/N`` (1 ≤ I ≤ N) takes the cases of the manifest whose
position k (0-based, manifest order) has ``k mod N = I − 1``: a deterministic
split of the same manifest into N nearly equal parts whatever the machine,
which a batch array ``--array=1-N`` maps onto (``I = SLURM_ARRAY_TASK_ID``).

**Shard state** (``<out>/shards/<I>-of-<N>.json``, written atomically when the
shard starts and when it ends): the sweep it belongs to (study name,
SHA-256 of the manifest file), the shard, host and pid, ``state``
(``running``, ``done``, ``interrupted``) and each case's outcome (``computed``,
``reused``, ``interrupted``, ``pending``). The merge reads them to name what
is missing; a state file of another study is refused, one of an earlier
manifest of the same study is ignored with a note.

**Workers.** :func:`run_cases` runs a function over items in ``jobs`` worker
processes (or in this process for one job), handing results back as they
come; on a stop signal (SIGTERM/SIGINT, :mod:`caseprep.contract.signals`) it
stops starting cases, terminates the workers (SIGTERM, then SIGKILL after a
grace period) and raises :class:`~caseprep.contract.signals.StopRequested`.

Two merges of one folder never write at once: they hold the sweep
folder's lock (:func:`caseprep.contract.locking.sweep_lock`; the shards hold
it shared), and every file is written atomically, so no reader ever sees a
torn table.
"""
from __future__ import annotations

import datetime as _dt
import hashlib
import json
import multiprocessing
import os
import queue
import re
import signal
import socket
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Iterable, Sequence, TypeVar

from caseprep.contract.atomicio import write_json_atomic
from caseprep.contract.errors import UserError
from caseprep.contract.manifest import MANIFEST_NAME, Manifest
from caseprep.contract.signals import StopRequested, StopSignals

SHARDS_DIR = "shards"
SHARD_SCHEMA = "underfloor-postproc-shard"

T = TypeVar("T")
R = TypeVar("R")


@dataclass(frozen=True)
class Shard:
    """Shard ``index`` of ``count`` (1-based)."""

    index: int
    count: int

    def __str__(self) -> str:
        return f"{self.index}/{self.count}"

    @property
    def file_name(self) -> str:
        return f"{self.index}-of-{self.count}.json"

    def select(self, items: Sequence[T]) -> list[T]:
        """The items at positions k with ``k mod count == index - 1``."""
        return [x for k, x in enumerate(items) if k % self.count == self.index - 1]

    @staticmethod
    def of_position(k: int, count: int) -> "Shard":
        """The shard of ``count`` holding the item at 0-based position ``k``."""
        return Shard(k % count + 1, count)


ALL = Shard(1, 1)
_SHARD_RE = re.compile(r"^\s*(\d+)\s*/\s*(\d+)\s*$")


def parse_shard(text: str | None, key: str = "--shard") -> Shard:
    """``"I/N"`` → :class:`Shard`; None → all cases. UserError unless 1 ≤ I ≤ N."""
    if text is None or text == "":
        return ALL
    m = _SHARD_RE.match(str(text))
    fix = ("give I/N with N ≥ 1 shards and 1 ≤ I ≤ N, e.g. --shard 2/4; in a batch array "
           "--shard $SLURM_ARRAY_TASK_ID/N with --array=1-N")
    if not m:
        raise UserError(expected="a shard I/N (two whole numbers)", got=text, key=key, fix=fix)
    i, n = int(m.group(1)), int(m.group(2))
    if n < 1 or not 1 <= i <= n:
        raise UserError(expected="a shard I/N with N ≥ 1 and 1 ≤ I ≤ N", got=text, key=key, fix=fix)
    return Shard(i, n)


def _utc() -> str:
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def manifest_digest(manifest: Manifest) -> str:
    """SHA-256 of the manifest file's bytes (which version of the sweep)."""
    root = Path(manifest.root) if manifest.root else None
    try:
        data = (root / MANIFEST_NAME).read_bytes() if root else b""
    except OSError:
        data = b""
    return "sha256:" + hashlib.sha256(data).hexdigest()


def write_shard_state(out_dir: Path, manifest: Manifest, shard: Shard, state: str, cases: dict[str, str],
                      started_utc: str) -> Path:
    """Write ``<out>/shards/<I>-of-<N>.json`` (see module doc) atomically."""
    path = Path(out_dir) / SHARDS_DIR / shard.file_name
    counts: dict[str, int] = {}
    for v in cases.values():
        counts[v] = counts.get(v, 0) + 1
    write_json_atomic(path, root=Path(out_dir), obj={
        "schema": SHARD_SCHEMA, "schema_version": 1, "study": manifest.study,
        "manifest": manifest_digest(manifest), "shard": [shard.index, shard.count], "state": state,
        "host": socket.gethostname(), "pid": os.getpid(), "started_utc": started_utc,
        "written_utc": _utc(), "counts": counts, "cases": cases,
    })
    return path


@dataclass(frozen=True)
class ShardState:
    """A shard state file read back (see module doc)."""

    path: Path
    study: str
    manifest: str
    shard: Shard
    state: str
    cases: dict[str, str]


def read_shard_states(out_dir: Path) -> tuple[list[ShardState], list[str]]:
    """Every readable shard state in ``<out>/shards/`` and a note for each
    unreadable one (untrusted input: never a traceback)."""
    states, notes = [], []
    folder = Path(out_dir) / SHARDS_DIR
    for p in sorted(folder.glob("*.json")) if folder.is_dir() else []:
        try:
            d = json.loads(p.read_text(encoding="utf-8"))
            if d.get("schema") != SHARD_SCHEMA:
                raise ValueError("not a shard state")
            i, n = (int(x) for x in d["shard"])
            sh = Shard(i, n)
            if not 1 <= i <= n:
                raise ValueError(f"shard {i}/{n}")
            cases = {str(k): str(v) for k, v in dict(d.get("cases") or {}).items()}
            states.append(ShardState(p, str(d.get("study", "")), str(d.get("manifest", "")), sh,
                                     str(d.get("state", "")), cases))
        except (OSError, ValueError, KeyError, TypeError) as exc:
            notes.append(f"unreadable shard state {p.name} ignored ({exc})")
    return states, notes


# --------------------------------------------------------------------------- workers

def _worker_init(init: Callable[..., None] | None, args: tuple) -> None:
    # The parent handles the stop signals and ends the workers itself, each
    # worker with the processes it started (its isolated readers): every
    # worker leads a process group of its own. SIGINT is ignored (the
    # parent's to handle); SIGTERM (the parent's, or a scheduler's) ends it.
    os.setpgrp()
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    if init is not None:
        init(*args)


def _worker_loop(tasks, results, fn, init, init_args) -> None:
    _worker_init(init, init_args)
    while True:
        item = tasks.get()
        if item is None:
            return
        k, x = item
        try:
            results.put((k, True, fn(x)))
        except Exception as exc:  # a bug in one case must not hang the others: hand it back
            results.put((k, False, f"{type(exc).__name__}: {exc}"))


class WorkerFailed(RuntimeError):
    """A worker raised an unexpected exception (a bug), or died."""


def run_cases(fn: Callable[[T], R], items: Sequence[T], jobs: int, on_result: Callable[[int, R], None],
              init: Callable[..., None] | None = None, init_args: tuple = (), grace: float = 10.0) -> None:
    """Call ``fn(item)`` for every item, ``jobs`` at a time, and
    ``on_result(k, result)`` in this process as each one finishes (k: the
    item's position). ``jobs == 1`` runs in this process; more starts worker
    processes (fork), each calling ``init(*init_args)`` once.

    SIGTERM and SIGINT alike stop it: no new item starts, the workers are
    terminated (SIGTERM, SIGKILL after ``grace`` s or at once on a second
    signal), :class:`StopRequested` is raised. Items finished before the
    signal have had their ``on_result``."""
    if not items:
        return
    if jobs <= 1 or len(items) == 1:
        if init is not None:
            init(*init_args)
        with StopSignals(raise_at_once=True):
            for k, x in enumerate(items):
                on_result(k, fn(x))
        return
    ctx = multiprocessing.get_context("fork")
    tasks, results = ctx.SimpleQueue(), ctx.Queue()
    n = min(jobs, len(items))
    with StopSignals() as stop:
        # not daemonic: a worker starts processes of its own (the isolated readers); ended in the finally below
        procs = [ctx.Process(target=_worker_loop, args=(tasks, results, fn, init, init_args), daemon=False)
                 for _ in range(n)]
        for p in procs:
            p.start()
        try:
            for k, x in enumerate(items):
                tasks.put((k, x))
            for _ in procs:
                tasks.put(None)
            remaining = len(items)
            while remaining:
                if stop.requested:
                    raise StopRequested(stop.signum)
                try:
                    k, ok, value = results.get(timeout=0.2)
                except queue.Empty:
                    if all(not p.is_alive() for p in procs):
                        raise WorkerFailed("every worker process ended with cases left") from None
                    continue
                if not ok:
                    raise WorkerFailed(f"case {k + 1} of {len(items)}: {value}")
                remaining -= 1
                on_result(k, value)
        finally:
            _end_workers(procs, grace, stop)
            results.close()


def _signal_group(pid: int, sig: int) -> None:
    try:
        os.killpg(pid, sig)
    except (ProcessLookupError, PermissionError):
        pass


def _end_workers(procs: Iterable, grace: float, stop: StopSignals) -> None:
    """SIGTERM each worker's process group (the worker and the readers it
    started), SIGKILL what is left after ``grace`` s (at once on a second
    stop signal), then reap the workers."""
    procs = list(procs)
    live = [p for p in procs if p.is_alive()]
    for p in live:
        _signal_group(p.pid, signal.SIGTERM)
    seen = stop.count
    deadline = time.monotonic() + grace
    while live and time.monotonic() < deadline and stop.count == seen:
        time.sleep(0.05)
        live = [p for p in live if p.is_alive()]
    for p in live:
        _signal_group(p.pid, signal.SIGKILL)
    for p in procs:
        p.join()


__all__ = ["ALL", "SHARDS_DIR", "Shard", "ShardState", "WorkerFailed", "manifest_digest",
           "parse_shard", "read_shard_states", "run_cases", "write_shard_state"]
