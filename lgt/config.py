"""TOML configuration: loading, and the small validation helpers every section uses.

Every check raises :class:`lgt.errors.ConfigError` naming the dotted key, the value and the
reason, before any computation starts; an unreadable file raises :class:`lgt.errors.InputError`.
Which sections each task reads is the table :data:`lgt.tasks.TASK_SECTIONS`.

Numeric ranges (documented in the README): every number a config gives is finite and inside
a documented range, so that nothing overflows later. Counts are capped by :data:`MAX_COUNT`
unless a key has its own bound; magnitudes of physical parameters by :data:`MAX_MAGNITUDE`.
"""

from __future__ import annotations

import difflib
import math
import sys
from pathlib import Path
from typing import Any, Iterable, Mapping

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

from lgt.errors import ConfigError, InputError

#: Largest |value| of a coupling, field, time or other physical number (lattice units). Beyond
#: it double-precision spectra and propagators lose all digits (H entries near 1e6 with a
#: Lanczos tolerance of 1e-10 already resolve gaps only to 1e-4); a bound of our choosing.
MAX_MAGNITUDE = 1e6
#: Largest count (steps, iterations, levels requested, ...) unless a key states its own bound.
MAX_COUNT = 10_000_000
#: Largest config file read (bytes); a TOML config is a few kB.
MAX_CONFIG_BYTES = 4 * 2 ** 20


class ConfigFile(dict):
    """A parsed configuration (a plain ``dict``) that remembers the folder of its file.

    Relative paths inside the config (``[variational] hardware_profile``) are resolved against
    :attr:`folder`; a config built in Python (a plain ``dict``) resolves them against the
    current directory.
    """

    folder: Path | None = None


def config_folder(config: Mapping[str, Any]) -> Path:
    """Folder that relative paths of ``config`` are resolved against (its file's, else cwd)."""
    folder = getattr(config, "folder", None)
    return Path(folder) if folder is not None else Path.cwd()


def with_folder(data: Mapping[str, Any], folder: Path | None) -> ConfigFile:
    """A :class:`ConfigFile` holding ``data`` and remembering ``folder``."""
    out = ConfigFile(data)
    out.folder = folder
    return out


def load_config(path: str | Path) -> ConfigFile:
    """Read a TOML configuration file.

    Raises
    ------
    InputError
        For a missing, unreadable, binary, non-UTF-8 or oversized file, a directory, or a
        TOML syntax error (one line naming the file and the reason).
    ConfigError
        For a top-level key that is not a table (``model = 5``).
    """
    path = Path(path)
    try:
        if path.is_dir():
            raise InputError(str(path), "is a directory, not a TOML configuration file")
        if path.stat().st_size > MAX_CONFIG_BYTES:
            raise InputError(str(path), f"is larger than {MAX_CONFIG_BYTES // 2 ** 20} MiB; "
                                        "not a configuration file")
        raw = path.read_bytes()
    except FileNotFoundError:
        raise InputError(str(path), "configuration file not found") from None
    except OSError as exc:
        raise InputError(str(path), f"cannot be read ({exc.strerror or exc})") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(str(path), "is not UTF-8 text (a binary or UTF-16 file?); "
                                    "save the configuration as UTF-8 TOML") from None
    if "\x00" in text:
        raise InputError(str(path), "contains NUL bytes; not a TOML text file")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(str(path), f"is not valid TOML ({exc})") from None
    for key, value in data.items():
        if not isinstance(value, Mapping):
            raise ConfigError(key, value, "top-level keys must be [sections] (tables)")
    return with_folder(data, path.resolve().parent)


def table(config: Mapping[str, Any], name: str) -> Mapping[str, Any]:
    """``config[name]`` as a table (``{}`` when absent); a non-table value is refused."""
    section = config.get(name, {})
    if not isinstance(section, Mapping):
        raise ConfigError(name, section, "must be a table")
    return section


def check_keys(section: Mapping[str, Any], allowed: Iterable[str], prefix: str) -> None:
    """Reject keys of ``section`` that are not in ``allowed`` (``prefix`` names the section).

    The message suggests the closest allowed key for a likely typo (``t_finall`` → ``t_final``).
    """
    allowed = tuple(allowed)
    if not isinstance(section, Mapping):
        raise ConfigError(prefix or "config", section, "must be a table")
    for key, value in section.items():
        if key not in allowed:
            close = difflib.get_close_matches(str(key), allowed, n=1)
            hint = f"did you mean {close[0]!r}? " if close else ""
            raise ConfigError(_dotted(prefix, key), value,
                              f"unknown key; {hint}allowed keys are {', '.join(allowed)}")


def _dotted(prefix: str, key: str) -> str:
    return f"{prefix}.{key}" if prefix else key


def as_int(value: Any, key: str, *, minimum: int | None = None, maximum: int | None = MAX_COUNT) -> int:
    """Coerce ``value`` to int in [minimum, maximum] (bools and non-integral floats are rejected)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(key, value, "must be an integer")
    if isinstance(value, float) and not value.is_integer():
        raise ConfigError(key, value, "must be an integer")
    out = int(value)
    if minimum is not None and out < minimum:
        raise ConfigError(key, value, f"must be at least {minimum}")
    if maximum is not None and out > maximum:
        raise ConfigError(key, value, f"must be at most {maximum:,}")
    return out


def as_float(value: Any, key: str, *, minimum: float | None = None, positive: bool = False,
             maximum: float | None = MAX_MAGNITUDE) -> float:
    """Coerce ``value`` to a finite float with |value| ≤ ``maximum``, optionally bounded below."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(key, value, "must be a number")
    try:
        out = float(value)
    except OverflowError:  # an integer beyond the float range
        raise ConfigError(key, value, "must be finite") from None
    if not math.isfinite(out):
        raise ConfigError(key, value, "must be finite")
    if positive and out <= 0:
        raise ConfigError(key, value, "must be positive")
    if minimum is not None and out < minimum:
        raise ConfigError(key, value, f"must be at least {minimum}")
    if maximum is not None and abs(out) > maximum:
        raise ConfigError(key, value, f"must have magnitude at most {maximum:g}")
    return out


def as_fraction(value: Any, key: str, *, closed: bool = False) -> float:
    """A number in (0, 1) (``closed``: (0, 1]) — tolerances, fidelities, infidelities."""
    out = as_float(value, key, positive=True)
    if out > 1 or (out == 1 and not closed):
        raise ConfigError(key, value, f"must be in (0, 1{']' if closed else ')'}")
    return out


def as_bool(value: Any, key: str) -> bool:
    """A TOML boolean."""
    if not isinstance(value, bool):
        raise ConfigError(key, value, "must be true or false")
    return value


def as_choice(value: Any, key: str, choices: Iterable[str]) -> str:
    """Check that ``value`` is one of ``choices``."""
    choices = tuple(choices)
    if not isinstance(value, str) or value not in choices:
        raise ConfigError(key, value, f"must be one of {', '.join(repr(c) for c in choices)}")
    return value
