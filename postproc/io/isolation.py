"""Reading untrusted result files so that one bad file cannot kill the run.

The VTK library runs native code: a file that declares billions of points
makes it throw ``std::bad_alloc`` and abort the process, a corrupt one may
crash it. :func:`isolated` runs a reading function in a child process with a
memory limit (:data:`~caseprep.contract.limits.MAX_VTK_MEMORY`, address space)
and a time limit (:data:`~caseprep.contract.limits.MAX_VTK_SECONDS`); the
child's result comes back through a pipe. A child that dies (a native abort,
a signal, the memory limit) or overruns its time becomes an
:class:`UnreadableFile` error naming the file and the reason, and the caller
goes on with the next case.

Children are forked from a small server process that has already imported
VTK and numpy (multiprocessing's ``forkserver``), so each read costs a fork,
not an interpreter start. The child works in the caller's working directory.
"""
from __future__ import annotations

import contextlib
import multiprocessing as mp
import os
import signal
import sys
import tempfile
import threading
from typing import Any, Callable

from caseprep.contract.errors import UserError
from caseprep.contract.limits import MAX_VTK_MEMORY, MAX_VTK_SECONDS


class UnreadableFile(UserError):
    """A result file that cannot be read: corrupt, truncated, absurd sizes,
    or it crashed the reader. The case is flagged ``unreadable``."""


_PRELOAD = ["numpy", "vtk", "vtkmodules.vtkCommonCore", "vtkmodules.vtkCommonDataModel", "vtkmodules.vtkIOXML",
            "vtkmodules.vtkIOLegacy", "vtkmodules.util.numpy_support", "postproc.io.surfaces"]
_ctx_lock = threading.Lock()
_ctx = None

#: Run readers in child processes (False: in this process, for debugging).
ENABLED = os.environ.get("UNDERFLOOR_READ_IN_PROCESS") != "1"


def physical_memory() -> int:
    """The machine's physical memory (bytes): the memory limit of analyses
    that may legitimately need a lot (0 when unknown: no limit)."""
    try:
        return int(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        return 0


def preload(*modules: str) -> None:
    """Modules the child processes should find already imported (call before
    the first read: the server process starts once, with what is listed)."""
    with _ctx_lock:
        if _ctx is None:
            _PRELOAD.extend(m for m in modules if m not in _PRELOAD)


def _forget_inherited_server() -> None:
    """In a process forked from one that had started the server process
    (e.g. a worker of ``postproc sweep -j N``): the server is its parent's
    child, not its own, so asking after it fails (``waitpid``: no child
    processes). Forget the inherited server so that the first read here
    starts one of its own."""
    try:
        from multiprocessing import forkserver
    except ImportError:  # pragma: no cover - platforms without fork
        return
    srv = getattr(forkserver, "_forkserver", None)
    if srv is not None and getattr(srv, "_forkserver_pid", None) is not None:
        for name in ("_forkserver_pid", "_forkserver_address", "_forkserver_alive_fd"):
            if hasattr(srv, name):
                setattr(srv, name, None)


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_forget_inherited_server)


def _context():
    global _ctx
    with _ctx_lock:
        if _ctx is None:
            ctx = mp.get_context("forkserver")
            ctx.set_forkserver_preload(_PRELOAD)
            _ctx = ctx
        return _ctx


@contextlib.contextmanager
def _main_hidden():
    """Start children without re-running the caller's main script in them:
    the child runs a function of this package, nothing of ``__main__`` (a
    script without an ``if __name__ == "__main__"`` guard would otherwise run
    again in every child)."""
    main = sys.modules.get("__main__")
    saved = {k: getattr(main, k) for k in ("__spec__", "__file__") if main is not None and hasattr(main, k)}
    try:
        if main is not None:
            main.__spec__ = None
            if hasattr(main, "__file__"):
                del main.__file__
        yield
    finally:
        for k, v in saved.items():
            setattr(main, k, v)


def _child(conn, cwd: str, memory: int, errfile: str, fn: Callable, args: tuple, kwargs: dict) -> None:
    import resource

    try:
        fd = os.open(errfile, os.O_WRONLY | os.O_APPEND)
        os.dup2(fd, 2)  # the native library's last words go to the caller's message, not its terminal
        os.close(fd)
        os.chdir(cwd)
        if memory > 0:
            resource.setrlimit(resource.RLIMIT_AS, (memory, memory))
        result = ("ok", fn(*args, **kwargs))
    except UnreadableFile as exc:
        result = ("unreadable", str(exc))
    except UserError as exc:
        result = ("user", str(exc))
    except MemoryError:
        result = ("crash", f"it ran out of its memory limit ({memory / 1e9:.3g} GB)")
    except BaseException as exc:  # anything else the reader raised is about the file, not a bug of ours
        result = ("crash", f"{type(exc).__name__}: {str(exc)[:300]}")
    try:
        conn.send(result)
    except Exception as exc:  # the result could not be sent back (e.g. too large for the memory limit)
        conn.send(("crash", f"its result could not be returned ({type(exc).__name__})"))
    finally:
        conn.close()


def _last_words(path: str) -> str:
    """The last line the child wrote to its standard error (at most 200 characters)."""
    try:
        with open(path, "rb") as fh:
            fh.seek(0, 2)
            fh.seek(max(0, fh.tell() - 2000))
            lines = [ln.strip() for ln in fh.read().decode("utf-8", "replace").splitlines() if ln.strip()]
    except OSError:
        return ""
    return lines[-1][:200] if lines else ""


def _signal_name(code: int) -> str:
    try:
        return signal.Signals(-code).name
    except ValueError:
        return f"signal {-code}"


def isolated(fn: Callable[..., Any], *args, what: str, memory: int | None = None, timeout: float | None = None,
             **kwargs) -> Any:
    """``fn(*args, **kwargs)`` run in a child process (``fn`` a module-level
    function, arguments and result picklable); ``what`` names the file for
    messages. Raises :class:`UnreadableFile` when the child crashes, hits the
    memory limit or the time limit, and re-raises the UserErrors it raised."""
    if not ENABLED:
        return fn(*args, **kwargs)
    memory = int(MAX_VTK_MEMORY.value) if memory is None else int(memory)
    timeout = float(MAX_VTK_SECONDS.value) if timeout is None else float(timeout)
    ctx = _context()
    recv, send = ctx.Pipe(duplex=False)
    errfd, errfile = tempfile.mkstemp(prefix="underfloor-reader-", suffix=".err")
    os.close(errfd)
    p = ctx.Process(target=_child, args=(send, os.getcwd(), memory, errfile, fn, args, kwargs), daemon=True)
    with _ctx_lock, _main_hidden():
        p.start()
    send.close()
    try:
        if not recv.poll(timeout):
            p.kill()
            p.join()
            raise UnreadableFile(expected=f"a file the VTK reader reads within {timeout:g} s", got="no result in time",
                                 file=what, fix="the file may be corrupt or far larger than it should be; re-export it")
        try:
            kind, value = recv.recv()
        except (EOFError, OSError):
            p.join()
            code = p.exitcode
            why = (f"killed by {_signal_name(code)}" if code is not None and code < 0 else f"exit code {code}")
            last = _last_words(errfile)
            why += f": {last}" if last else ""
            raise UnreadableFile(
                expected="a VTK file the reader can read", got=f"a file that crashed the reader ({why})", file=what,
                fix=f"the file is corrupt or declares more data than fits in {memory / 1e9:.3g} GB; re-export it "
                    "with the solver's converter (foamToVTK)") from None
    finally:
        recv.close()
        try:
            os.unlink(errfile)
        except OSError:
            pass
        if p.is_alive():
            p.join(5)
            if p.is_alive():
                p.kill()
                p.join()
    if kind == "ok":
        return value
    if kind == "unreadable":
        raise UnreadableFile(value)
    if kind == "crash":
        raise UnreadableFile(expected="a VTK file the reader can read", got=f"a file the reader failed on ({value})",
                             file=what, fix="re-export it with the solver's converter (foamToVTK)")
    raise UserError(value)
