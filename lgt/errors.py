"""Error types shared by every Fluxline module."""

from __future__ import annotations

from typing import Any


class ConfigError(ValueError):
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
        super().__init__(f"{key} = {value!r}: {reason}")


class ResourceError(RuntimeError):
    """A requested computation would not fit in the available memory."""
