"""TOML configuration: loading and small validation helpers shared by every section.

Every check raises :class:`lgt.errors.ConfigError` naming the dotted key, the value and
the reason, before any computation starts.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path
from typing import Any, Iterable, Mapping

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

from lgt.errors import ConfigError

#: Top-level sections a Fluxline configuration may contain.
KNOWN_SECTIONS = ("model", "initial", "evolution", "spectrum", "potential", "variational",
                  "hardware", "sweep", "output", "continuum")


def load_config(path: str | Path) -> dict[str, Any]:
    """Read a TOML file and check that its top-level sections are known.

    Raises
    ------
    ConfigError
        For an unreadable file, a TOML syntax error or an unknown section.
    """
    path = Path(path)
    try:
        with path.open("rb") as fh:
            data = tomllib.load(fh)
    except FileNotFoundError:
        raise ConfigError("config", str(path), "file not found") from None
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError("config", str(path), f"not valid TOML ({exc})") from None
    check_keys(data, KNOWN_SECTIONS, "")
    return data


def check_keys(section: Mapping[str, Any], allowed: Iterable[str], prefix: str) -> None:
    """Reject keys of ``section`` that are not in ``allowed`` (``prefix`` names the section)."""
    allowed = tuple(allowed)
    for key, value in section.items():
        if key not in allowed:
            raise ConfigError(_dotted(prefix, key), value,
                              f"unknown key; allowed keys are {', '.join(allowed)}")


def _dotted(prefix: str, key: str) -> str:
    return f"{prefix}.{key}" if prefix else key


def as_int(value: Any, key: str, *, minimum: int | None = None) -> int:
    """Coerce ``value`` to int (bools and non-integral floats are rejected)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(key, value, "must be an integer")
    if isinstance(value, float) and not value.is_integer():
        raise ConfigError(key, value, "must be an integer")
    out = int(value)
    if minimum is not None and out < minimum:
        raise ConfigError(key, value, f"must be at least {minimum}")
    return out


def as_float(value: Any, key: str, *, minimum: float | None = None, positive: bool = False) -> float:
    """Coerce ``value`` to a finite float, optionally bounded below."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(key, value, "must be a number")
    out = float(value)
    if not math.isfinite(out):
        raise ConfigError(key, value, "must be finite")
    if positive and out <= 0:
        raise ConfigError(key, value, "must be positive")
    if minimum is not None and out < minimum:
        raise ConfigError(key, value, f"must be at least {minimum}")
    return out


def as_choice(value: Any, key: str, choices: Iterable[str]) -> str:
    """Check that ``value`` is one of ``choices``."""
    choices = tuple(choices)
    if value not in choices:
        raise ConfigError(key, value, f"must be one of {', '.join(repr(c) for c in choices)}")
    return value
