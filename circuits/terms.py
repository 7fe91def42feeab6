"""Local Hermitian terms and their conversion to gates.

A *term* is a Hermitian operator used as a gate generator:

* register mode: :class:`LocalTerm` ``(qudits, matrix)`` with a dense ``d**k x d**k``
  matrix, index row-major over ``qudits`` in the order given;
* subspace mode: a ``dim x dim`` ``scipy.sparse`` matrix.

Already built :class:`~circuits.gates.Gate` objects are accepted wherever a term is,
so expensive preprocessing (eigendecompositions) is shared between layers.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence, Union

import numpy as np
import scipy.sparse as sp

from .gates import Gate, local_gate
from .register import Space
from .sparse_gates import SparseGeneratorGate

__all__ = ["LocalTerm", "Term", "term_gate", "term_gates"]


@dataclass(frozen=True)
class LocalTerm:
    """Dense local Hermitian operator on ``qudits``."""

    qudits: tuple[int, ...]
    matrix: np.ndarray


Term = Union[LocalTerm, sp.spmatrix, sp.sparray, Gate]


def term_gate(term: Term, space: Space) -> Gate:
    """Gate ``exp(-i t term)`` for ``space`` (diagonal fast path where possible)."""
    if isinstance(term, Gate):
        return term
    if space.register:
        if not isinstance(term, LocalTerm):
            raise TypeError("register mode needs LocalTerm(qudits, matrix) terms")
        return local_gate(term.qudits, term.matrix, space.d)
    if isinstance(term, LocalTerm):
        raise TypeError("subspace mode needs sparse dim x dim terms")
    return SparseGeneratorGate(term)


def term_gates(terms: Sequence[Term], space: Space) -> list[Gate]:
    """:func:`term_gate` for each term."""
    return [term_gate(t, space) for t in terms]
