"""SIGINT, SIGTERM and SIGHUP handled alike by every long command.

Inside :func:`stop_on_signals` the first of these signals raises :class:`Interrupted` (a
``KeyboardInterrupt``) in the main thread, so the command stops taking new work, keeps what is
complete and cleans up; inside a :func:`deferred` block (e.g. while a finished run is written)
the exception waits until the block ends. A **second** signal ends the process at once: the
callbacks registered with :func:`on_abort` kill and reap the worker processes, one line goes to
stderr, and the process exits with the status of the first signal, without a traceback.

Exit statuses (``lgt.errors``): 130 after SIGINT, 143 after SIGTERM or SIGHUP.
"""

from __future__ import annotations

import os
import signal
import sys
import threading
from contextlib import contextmanager
from typing import Callable, Iterator

from lgt.errors import EXIT_INTERRUPTED, EXIT_TERMINATED

#: The signals handled like Ctrl-C.
STOP_SIGNALS = (signal.SIGINT, signal.SIGTERM, signal.SIGHUP)


def signal_status(signum: int) -> int:
    """Documented exit status after ``signum`` (130 for SIGINT, 143 for SIGTERM/SIGHUP)."""
    return EXIT_INTERRUPTED if signum == signal.SIGINT else EXIT_TERMINATED


class Interrupted(KeyboardInterrupt):
    """Raised by the first stop signal; ``exit_status`` is the documented status."""

    def __init__(self, signum: int = signal.SIGINT) -> None:
        self.signum = signum
        self.exit_status = signal_status(signum)
        super().__init__(signal.Signals(signum).name)


def status_of(exc: BaseException) -> int:
    """Exit status of an interruption (``Interrupted`` or a plain ``KeyboardInterrupt``)."""
    return getattr(exc, "exit_status", EXIT_INTERRUPTED)


def describe(exc: BaseException) -> str:
    """``"interrupted (SIGINT)"`` / ``"terminated (SIGTERM)"`` for messages."""
    signum = getattr(exc, "signum", signal.SIGINT)
    verb = "interrupted" if signum == signal.SIGINT else "terminated"
    return f"{verb} ({signal.Signals(signum).name})"


class _State:
    depth = 0           # nesting of stop_on_signals
    deferring = 0       # nesting of deferred()
    received: int | None = None
    pending = False
    aborts: list[Callable[[], None]] = []
    previous: dict[int, object] = {}


_state = _State()


def _handler(signum: int, frame: object) -> None:
    if _state.received is not None:
        _abort_now()
    _state.received = signum
    if _state.deferring:
        _state.pending = True
        return
    raise Interrupted(signum)


def _abort_now() -> None:
    """Second signal: kill workers, say so, exit with the first signal's status."""
    status = signal_status(_state.received or signal.SIGINT)
    for callback in list(_state.aborts):
        try:
            callback()
        except Exception:  # best effort: we are leaving anyway
            pass
    try:
        sys.stderr.write("fluxline: second signal, stopping now (complete results are kept; "
                         "run the same command again to resume)\n")
        sys.stderr.flush()
    except Exception:
        pass
    os._exit(status)


@contextmanager
def stop_on_signals() -> Iterator[None]:
    """Handle SIGINT/SIGTERM/SIGHUP as described in the module docstring (main thread only;
    elsewhere, and when already active, a no-op)."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    if _state.depth:
        _state.depth += 1
        try:
            yield
        finally:
            _state.depth -= 1
        return
    _state.depth = 1
    _state.received, _state.pending = None, False
    _state.previous = {s: signal.signal(s, _handler) for s in STOP_SIGNALS}
    try:
        yield
    finally:
        for s, old in _state.previous.items():
            signal.signal(s, old)
        _state.depth = 0
        _state.received, _state.pending = None, False


@contextmanager
def deferred() -> Iterator[None]:
    """Delay the first stop signal's exception until the block ends (a write completes); an
    exception of the block itself takes precedence."""
    _state.deferring += 1
    try:
        yield
    finally:
        _state.deferring -= 1
    if not _state.deferring and _state.pending:
        _state.pending = False
        raise Interrupted(_state.received or signal.SIGINT)


@contextmanager
def on_abort(callback: Callable[[], None]) -> Iterator[None]:
    """Run ``callback`` (e.g. kill the worker processes) if a second signal ends the process."""
    _state.aborts.append(callback)
    try:
        yield
    finally:
        _state.aborts.remove(callback)


def stop_requested() -> int | None:
    """The stop signal received so far inside :func:`stop_on_signals`, if any."""
    return _state.received
