"""Registry of layer families (``[variational] family``).

Each module of this package (other than ``base``) defines one :class:`~.base.LayerFamily` and
calls :func:`register_family` when imported; the registry imports every such module on first
use, so adding a family means adding one module here (or calling :func:`register_family` from
anywhere before the family is requested).
"""

from __future__ import annotations

import importlib
import pkgutil

from lgt.variational.families.base import SPACES, LayerFamily, ModelAnsatz

__all__ = ["LayerFamily", "ModelAnsatz", "SPACES", "register_family", "unregister_family", "get_family",
           "family_names", "available_families"]

_REGISTRY: dict[str, LayerFamily] = {}
_DISCOVERED = False


def _discover() -> None:
    """Import every family module of this package once (each registers its family)."""
    global _DISCOVERED
    if _DISCOVERED:
        return
    _DISCOVERED = True
    for info in pkgutil.iter_modules(__path__):
        if info.name != "base" and not info.name.startswith("_"):
            importlib.import_module(f"{__name__}.{info.name}")


def register_family(family: LayerFamily) -> LayerFamily:
    """Register (or replace) ``family`` under ``family.name`` and return it."""
    if family.fit_space not in SPACES:
        raise ValueError(f"family {family.name!r}: fit_space must be one of {SPACES}, got {family.fit_space!r}")
    _REGISTRY[family.name] = family
    return family


def unregister_family(name: str) -> None:
    """Remove the family ``name`` from the registry (tests; no error if absent)."""
    _REGISTRY.pop(name, None)


def family_names() -> tuple[str, ...]:
    """Names of all registered families, built-in ones first in discovery order."""
    _discover()
    return tuple(_REGISTRY)


def get_family(name: str) -> LayerFamily:
    """The family registered as ``name`` (ValueError naming the known ones otherwise)."""
    _discover()
    try:
        return _REGISTRY[name]
    except KeyError:
        raise ValueError(f"unknown layer family {name!r}; known families are {', '.join(_REGISTRY)}") from None


def available_families(params) -> tuple[str, ...]:
    """Registered families that can be fitted for the model ``params``."""
    return tuple(n for n in family_names() if _REGISTRY[n].unavailable(params) is None)
