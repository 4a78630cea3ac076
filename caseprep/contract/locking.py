"""One writer at a time in a sweep folder.

``caseprep write``, ``caseprep run`` and ``postproc sweep`` hold an advisory
lock on the sweep folder while they work (:func:`sweep_lock`): an exclusive
``flock`` on the file ``.underfloor.lock`` in it, which also records the
holder (pid, command, start time). A second command waits up to
:data:`WAIT_SECONDS` for the lock, then refuses with a UserError naming the
holder. The operating system releases the lock when its holder ends, even
by ``kill -9``, so a dead holder never blocks the folder.

A writer that places case folders leaves a journal (``.underfloor-write.json``,
:data:`JOURNAL_NAME`) while the folder is between states, and removes it once
the manifest lists exactly the case folders present. Holding the lock, a
command that finds a journal knows its writer died midway
(:func:`interrupted_write`): the readers refuse until the write is run again,
and the next write completes it.
"""
from __future__ import annotations

import contextlib
import datetime as _dt
import errno
import fcntl
import os
import time
from pathlib import Path
from typing import Iterator

from caseprep.contract.errors import UserError
from caseprep.contract.untrusted import read_json

LOCK_NAME = ".underfloor.lock"
JOURNAL_NAME = ".underfloor-write.json"
#: How long a second command waits for the lock before refusing (s).
WAIT_SECONDS = 5.0


def _holder(fd: int) -> str:
    try:
        text = os.pread(fd, 400, 0).decode("utf-8", "replace").strip()
    except OSError:
        text = ""
    return text or "an unknown process"


@contextlib.contextmanager
def sweep_lock(folder: str | os.PathLike, command: str, wait: float | None = None,
               shared: bool = False) -> Iterator[Path]:
    """Hold the advisory lock of ``folder`` (created when missing) while the
    ``with`` block runs; ``command`` is recorded for whoever waits. Waits up
    to ``wait`` s (default :data:`WAIT_SECONDS`), then raises UserError
    naming the holder's pid and command.

    ``shared``: hold it together with other shared holders (commands that
    work on disjoint parts of the sweep side by side — the batch array's
    tasks, each holding its own cases' locks as well), never together with
    an exclusive one."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / LOCK_NAME
    try:
        fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_NOFOLLOW | os.O_CLOEXEC, 0o644)
    except OSError as exc:
        raise UserError(expected=f"a lock file {LOCK_NAME} that underfloor can open in {folder}",
                        got=os.strerror(exc.errno) if exc.errno else str(exc), file=str(path),
                        fix="remove it if it is a link or a folder; the sweep folder must be writable") from None
    limit = WAIT_SECONDS if wait is None else wait
    deadline = time.monotonic() + limit
    try:
        while True:
            try:
                fcntl.flock(fd, (fcntl.LOCK_SH if shared else fcntl.LOCK_EX) | fcntl.LOCK_NB)
                break
            except OSError as exc:
                if exc.errno not in (errno.EWOULDBLOCK, errno.EAGAIN, errno.EACCES):
                    raise
                if time.monotonic() >= deadline:
                    raise UserError(
                        f"the sweep folder {folder} is in use by another underfloor command: {_holder(fd)} "
                        f"(waited {limit:g} s)",
                        fix="wait for that command to finish (or stop it), then run this one again; one command "
                            "at a time writes to a sweep folder") from None
                time.sleep(0.1)
        stamp = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
        os.ftruncate(fd, 0)  # a shared holder's note may replace another's: it names one of them
        os.pwrite(fd, f"pid {os.getpid()}, `{command}`{' (shared)' if shared else ''}, since {stamp}\n".encode(), 0)
        try:
            yield folder
        finally:
            fcntl.flock(fd, fcntl.LOCK_UN)
    finally:
        os.close(fd)


def interrupted_write(folder: str | os.PathLike) -> dict | None:
    """The journal an interrupted write left in ``folder`` (call while
    holding the lock: any journal then belongs to a writer that died), or
    None. An unreadable journal reads as ``{}``."""
    p = Path(folder) / JOURNAL_NAME
    if not (p.exists() or p.is_symlink()):
        return None
    try:
        d = read_json(p, "write journal", fix="")
    except UserError:
        return {}
    return d if isinstance(d, dict) else {}


def refuse_interrupted(folder: str | os.PathLike, command: str) -> None:
    """UserError when an interrupted write left ``folder`` between states
    (for the readers: ``caseprep run``, ``postproc sweep``)."""
    j = interrupted_write(folder)
    if j is None:
        return
    who = f"pid {j.get('pid', '?')}, started {j.get('started_utc', '?')}"
    cfg = j.get("config_file") or "CONFIG"
    raise UserError(
        f"a `caseprep write` into {folder} ({who}) was interrupted: its manifest may not match the case folders, "
        f"so `{command}` does not start",
        fix=f"run the same write again to complete it: caseprep write {cfg} -o {folder}")
