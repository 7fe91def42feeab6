"""Layer families for the model, looked up by name in the registry
(:mod:`lgt.variational.families`): ``symmetric`` (exponentials of the model's own terms, run on
the physical subspace) and ``hardware`` (native brickwork on the link register), plus any
family registered later. Every family is the identity at zero parameters.

This module keeps the names other modules import (:class:`ModelAnsatz`, :func:`make_ansatz`,
:func:`ordered_terms`, the two built-in builders).
"""

from __future__ import annotations

from circuits.layers import NativeLayerSpec
from lgt.basis import PhysicalBasis
from lgt.variational.families import SPACES, ModelAnsatz, family_names, get_family
from lgt.variational.families.base import LayerOptions
from lgt.variational.families.hardware import hardware_ansatz
from lgt.variational.families.symmetric import ANGLE_MODES, ordered_terms, symmetric_ansatz

__all__ = ["ANGLE_MODES", "SPACES", "ModelAnsatz", "LayerOptions", "family_names", "make_ansatz",
           "ordered_terms", "symmetric_ansatz", "hardware_ansatz"]


def make_ansatz(basis: PhysicalBasis, family: str, layers: int, angles: str = "term",
                spec: NativeLayerSpec | None = None, space: str | None = None) -> ModelAnsatz:
    """``layers`` layers of the registered ``family`` on ``space`` (default: the family's own)."""
    options = LayerOptions(angles, spec or NativeLayerSpec())
    return get_family(family).build(basis, layers, options, space)
