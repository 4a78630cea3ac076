"""Stop signals: SIGTERM and SIGINT handled the same way by every long-running
command (``caseprep run``, ``postproc sweep``).

A batch scheduler ends a job (cancellation, time limit, node drain) with
SIGTERM, a terminal with SIGINT (Ctrl-C). Both mean "stop now, cleanly": stop
starting new work, stop the running work, record what was left unfinished,
exit with 128 + the signal number (143 for SIGTERM, 130 for SIGINT; the shell
convention for a process ended by a signal).

:class:`StopSignals` installs its own handler for both signals **whatever the
inherited disposition**: a program started from a non-interactive shell in
the background inherits SIGINT as *ignored*, and Python then leaves it
ignored; a batch system may start jobs with signals ignored. While a handler
(not "ignore") is installed, children started with ``exec`` get the default
disposition back, so the work we start can be stopped too.

Two ways of reacting:

* ``raise_at_once=False`` (the runner): the handler only records the signal;
  the caller polls :attr:`StopSignals.signum` between steps (its loop sleeps
  a fraction of a second), so nothing is interrupted half-way.
* ``raise_at_once=True`` (computations in this process): the handler raises
  :class:`StopRequested` in the main thread at once. Use it only around code
  whose outputs are written atomically.

A second signal while stopping sets :attr:`StopSignals.count` above 1: the
caller may then skip its grace period.
"""
from __future__ import annotations

import signal
import threading
from types import FrameType

#: The signals that mean "stop": the scheduler's and the terminal's.
STOP_SIGNALS: tuple[signal.Signals, ...] = (signal.SIGTERM, signal.SIGINT)


def exit_code(signum: int) -> int:
    """Exit code of a command stopped by ``signum``: 128 + the signal number
    (143 for SIGTERM, 130 for SIGINT)."""
    return 128 + int(signum)


def signal_name(signum: int) -> str:
    try:
        return signal.Signals(signum).name
    except ValueError:
        return f"signal {signum}"


class StopRequested(BaseException):
    """Raised by :class:`StopSignals` (``raise_at_once=True``) when a stop
    signal arrives. A BaseException, like KeyboardInterrupt: ``except
    Exception`` does not swallow it."""

    def __init__(self, signum: int):
        super().__init__(signal_name(signum))
        self.signum = int(signum)

    @property
    def exit_code(self) -> int:
        return exit_code(self.signum)


class StopSignals:
    """Context manager: handle SIGTERM and SIGINT alike while active.

    ``signum``: the first stop signal received (None: none yet); ``count``:
    how many arrived. Outside the main thread (where Python cannot install
    handlers) it does nothing and only a KeyboardInterrupt can stop the
    caller. The previous handlers are restored on exit.
    """

    def __init__(self, raise_at_once: bool = False):
        self.raise_at_once = raise_at_once
        self.signum: int | None = None
        self.count = 0
        self.active = False
        self._old: dict[int, object] = {}

    def _handler(self, signum: int, frame: FrameType | None) -> None:
        self.count += 1
        if self.signum is None:
            self.signum = int(signum)
        if self.raise_at_once and self.count == 1:
            raise StopRequested(signum)

    def note_keyboard_interrupt(self) -> None:
        """Count a KeyboardInterrupt that reached the caller as a SIGINT."""
        self.count += 1
        if self.signum is None:
            self.signum = int(signal.SIGINT)

    def __enter__(self) -> "StopSignals":
        if threading.current_thread() is threading.main_thread():
            for s in STOP_SIGNALS:
                self._old[s] = signal.signal(s, self._handler)
            self.active = True
        return self

    def __exit__(self, *exc) -> None:
        if self.active:
            for s, old in self._old.items():
                signal.signal(s, old if old is not None else signal.SIG_DFL)
            self._old.clear()
            self.active = False

    @property
    def requested(self) -> bool:
        return self.signum is not None

    def check(self) -> None:
        """Raise :class:`StopRequested` when a stop signal has arrived."""
        if self.signum is not None:
            raise StopRequested(self.signum)


__all__ = ["STOP_SIGNALS", "StopRequested", "StopSignals", "exit_code", "signal_name"]
