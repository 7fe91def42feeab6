"""Configuration identity: canonical JSON text of plain data and short sha256 digests.

A sweep's run id and configuration hash are digests of :func:`canonical_json`, so the same
physical run gets the same name in every file whatever the key order or ``1`` vs ``1.0``
(JSON numbers are compared as written by Python's float repr).
"""

from __future__ import annotations

import hashlib
import json
from typing import Any, Iterator, Mapping

import numpy as np


def plain(value: Any) -> Any:
    """Convert numpy scalars/arrays and tuples into JSON-compatible Python values."""
    if isinstance(value, Mapping):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return plain(value.tolist())
    if isinstance(value, np.generic):
        return value.item()
    return value


def canonical_json(value: Any) -> str:
    """Deterministic JSON text of plain data (sorted keys, no spaces, exact float repr)."""
    return json.dumps(plain(value), sort_keys=True, separators=(",", ":"), allow_nan=False)


def flatten(tree: Mapping[str, Any], prefix: str = "") -> Iterator[tuple[str, Any]]:
    """Yield ``(dotted.key, leaf)`` pairs of a nested mapping."""
    for key, value in tree.items():
        name = f"{prefix}{key}"
        if isinstance(value, Mapping):
            yield from flatten(value, name + ".")
        else:
            yield name, value


def digest(text: str, length: int = 16) -> str:
    """Truncated hexadecimal sha256 of ``text`` (``length`` hex digits)."""
    return hashlib.sha256(text.encode()).hexdigest()[:length]
