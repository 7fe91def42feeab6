"""Error kinds shared by every Fluxline module, and the one map from error kind to exit status.

Physics and numerics code raises plain Python errors (``ValueError`` for bad arguments);
configuration and input handling raise the kinds below, and :func:`exit_status` (used by every
command-line entry point) turns them into messages and exit statuses.

Exit statuses (documented in the README's command table):

====  ==========================================================================
0     success
2     bad input: a configuration key or value, an input file, an output path,
      or a resource the run would exceed (memory, disk, permissions)
3     the run finished but missed its requested tolerance (results still written)
130   interrupted (SIGINT / Ctrl-C); 143 terminated (SIGTERM / SIGHUP)
141   the reader of standard output went away (broken pipe, e.g. ``| head``), as for
      other Unix tools killed by SIGPIPE
====  ==========================================================================
"""

from __future__ import annotations

from typing import Any

#: Exit status of a successful run.
EXIT_OK = 0
#: Exit status of a bad configuration, input file, output path or resource limit.
EXIT_BAD_INPUT = 2
#: Exit status of a run that finished but missed its tolerance.
EXIT_TOLERANCE_MISSED = 3
#: Exit status after SIGINT (128 + 2).
EXIT_INTERRUPTED = 130
#: Exit status after SIGTERM or SIGHUP (128 + 15).
EXIT_TERMINATED = 143

#: Exit status when standard output is a closed pipe (128 + SIGPIPE).
EXIT_BROKEN_PIPE = 141

#: Longest rendering of an offending value inside an error message.
MAX_VALUE_CHARS = 120


def short_repr(value: Any, limit: int = MAX_VALUE_CHARS) -> str:
    """``repr(value)`` cut to ``limit`` characters (a 1 MB value is not echoed in full)."""
    text = repr(value)
    if len(text) <= limit:
        return text
    return f"{text[:limit - 20]}… ({len(text):,} characters)"


class FluxlineError(Exception):
    """Base of the errors a user can cause; each kind maps to one exit status."""

    exit_status = EXIT_BAD_INPUT


class ConfigError(FluxlineError, ValueError):
    """A configuration key has a bad value (or is unknown).

    Attributes
    ----------
    key : str
        Dotted name of the offending key, e.g. ``"model.levels"``.
    value : Any
        The value that was given.
    reason : str
        Why it is rejected.
    """

    def __init__(self, key: str, value: Any, reason: str) -> None:
        self.key = key
        self.value = value
        self.reason = reason
        super().__init__(f"{key} = {short_repr(value)}: {reason}")


class InputError(FluxlineError):
    """A file or command-line input is unusable (missing, unreadable, malformed, locked).

    Attributes
    ----------
    what : str
        What is wrong, e.g. the path or ``"--output"`` or ``"measured.csv line 7, field q3"``.
    reason : str
        Why it is rejected.
    """

    def __init__(self, what: str, reason: str) -> None:
        self.what = what
        self.reason = reason
        super().__init__(f"{what}: {reason}")


class ResourceError(FluxlineError, RuntimeError):
    """A run would exceed (or did exceed) a resource: memory, disk space, permissions."""


class ToleranceMissed(FluxlineError):
    """A run finished but missed its requested tolerance (its results are still reported)."""

    exit_status = EXIT_TOLERANCE_MISSED


def exit_status(exc: BaseException) -> int:
    """The documented exit status for an exception reaching a command-line entry point."""
    if isinstance(exc, FluxlineError):
        return exc.exit_status
    if isinstance(exc, KeyboardInterrupt):  # lgt.signals.Interrupted carries 130 or 143
        return getattr(exc, "exit_status", EXIT_INTERRUPTED)
    if isinstance(exc, BrokenPipeError):
        return EXIT_BROKEN_PIPE
    if isinstance(exc, (MemoryError, OSError)):
        return EXIT_BAD_INPUT
    return 1


def message(exc: BaseException) -> str:
    """The one line a command-line entry point prints for ``exc`` (after ``fluxline: error:``)."""
    if isinstance(exc, FluxlineError):
        return short_repr_text(str(exc))
    if isinstance(exc, MemoryError):
        return "out of memory (the run needs more than this machine has free)"
    if isinstance(exc, OSError):
        where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        return short_repr_text(f"{where}{exc.strerror or exc}")
    return short_repr_text(f"{type(exc).__name__}: {exc}")


def short_repr_text(text: str, limit: int = 4 * MAX_VALUE_CHARS) -> str:
    """One line of at most ``limit`` characters (newlines folded)."""
    text = " ".join(str(text).split())
    return text if len(text) <= limit else f"{text[:limit - 20]}… ({len(text):,} characters)"
