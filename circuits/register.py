"""State spaces and vectorised application of local operators.

Conventions
-----------
A register of ``K`` qudits with ``d`` levels each holds a complex128 state vector of
length ``d**K`` in row-major order: qudit 0 is the most significant digit, so
``psi.reshape((d,) * K)`` has axis ``q`` = qudit ``q``.

Inside the engine every state is kept as a *canonical view* of shape
``(B,) + space.shape``: a leading batch axis (``B = 1`` for a single vector) followed
by one axis per qudit (register mode) or a single axis of length ``dim``
(subspace mode).  Local operators never become ``d**K x d**K`` matrices: they are
contracted on the relevant axes only.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

__all__ = [
    "Space",
    "product_state",
    "basis_index",
    "to_view",
    "from_view",
    "apply_local",
    "apply_diagonal",
    "local_transition",
    "embed_local",
]


@dataclass(frozen=True)
class Space:
    """Shape of the state space.

    Parameters
    ----------
    shape
        ``(d,) * K`` for a register of ``K`` qudits with ``d`` levels, or ``(dim,)``
        for a plain vector space (subspace mode).
    register
        True for a qudit register, False for subspace mode.
    """

    shape: tuple[int, ...]
    register: bool

    @classmethod
    def qudits(cls, n_qudits: int, d: int) -> "Space":
        """Register of ``n_qudits`` qudits with ``d`` levels each."""
        if n_qudits < 1 or d < 2:
            raise ValueError(f"need n_qudits >= 1 and d >= 2, got {n_qudits}, {d}")
        return cls((int(d),) * int(n_qudits), True)

    @classmethod
    def subspace(cls, dim: int) -> "Space":
        """Plain vector space of dimension ``dim`` (no tensor structure)."""
        if dim < 1:
            raise ValueError(f"dim must be positive, got {dim}")
        return cls((int(dim),), False)

    @property
    def dim(self) -> int:
        """Total dimension."""
        return int(np.prod(self.shape, dtype=np.int64))

    @property
    def n_qudits(self) -> int:
        """Number of qudits (0 in subspace mode)."""
        return len(self.shape) if self.register else 0

    @property
    def d(self) -> int:
        """Levels per qudit (0 in subspace mode)."""
        return self.shape[0] if self.register else 0


def basis_index(levels: Sequence[int], d: int) -> int:
    """Row-major index of the product basis state ``|levels[0], levels[1], ...>``."""
    idx = 0
    for lev in levels:
        if not 0 <= lev < d:
            raise ValueError(f"level {lev} outside 0..{d - 1}")
        idx = idx * d + int(lev)
    return idx


def product_state(levels: Sequence[int], d: int) -> np.ndarray:
    """Computational-basis product state ``|l_0 l_1 ... l_{K-1}>`` as a flat vector."""
    psi = np.zeros(d ** len(levels), dtype=np.complex128)
    psi[basis_index(levels, d)] = 1.0
    return psi


def to_view(psi: np.ndarray, space: Space) -> tuple[np.ndarray, bool]:
    """Copy a flat state ``(dim,)`` or batch ``(B, dim)`` into a canonical view.

    Returns the view ``(B,) + space.shape`` (a fresh complex128 array owned by the
    caller) and whether the input was batched.
    """
    arr = np.asarray(psi)
    batched = arr.ndim == 2
    if arr.ndim not in (1, 2) or arr.shape[-1] != space.dim:
        raise ValueError(f"state of shape {arr.shape} does not fit dimension {space.dim}")
    out = np.array(arr, dtype=np.complex128, copy=True, order="C")
    return out.reshape((-1,) + space.shape), batched


def from_view(view: np.ndarray, batched: bool) -> np.ndarray:
    """Inverse of :func:`to_view`: flat ``(dim,)`` or ``(B, dim)``."""
    flat = view.reshape(view.shape[0], -1)
    return flat if batched else flat[0]


def _axes(qudits: Sequence[int], ndim: int) -> list[int]:
    """Canonical-view axes of the given qudits (axis 0 is the batch axis)."""
    axes = [int(q) + 1 for q in qudits]
    if len(set(axes)) != len(axes) or min(axes) < 1 or max(axes) >= ndim:
        raise ValueError(f"invalid qudit indices {tuple(qudits)} for {ndim - 1} qudits")
    return axes


def apply_local(view: np.ndarray, mat: np.ndarray, qudits: Sequence[int]) -> np.ndarray:
    """Apply a dense ``k``-local operator to a canonical view.

    Parameters
    ----------
    view
        Canonical view ``(B, d, ..., d)``.
    mat
        ``d**k x d**k`` matrix; its row/column index is row-major over ``qudits`` in the
        order given (first listed qudit most significant).
    qudits
        Target qudits, any order, need not be adjacent.

    Returns
    -------
    A new array of the same shape (the input is not modified).
    """
    k = len(qudits)
    d = view.shape[1]
    axes = _axes(qudits, view.ndim)
    if axes == list(range(axes[0], axes[0] + k)):
        # contiguous block in the given order: (N, d**k, R) view and one contraction
        n_left = int(np.prod(view.shape[: axes[0]]))
        blk = view.reshape(n_left, d**k, -1)
        if blk.shape[2] == 1:
            out = blk[:, :, 0] @ mat.T
        elif n_left == 1:
            out = mat @ blk[0]
        elif blk.shape[2] >= 256:
            out = np.matmul(mat, blk)  # few large products
        else:
            # one large product instead of many tiny ones
            out = np.tensordot(mat, blk, axes=([1], [1])).transpose(1, 0, 2)
        return np.ascontiguousarray(out).reshape(view.shape)
    tens = mat.reshape((d,) * (2 * k))
    res = np.tensordot(tens, view, axes=(list(range(k, 2 * k)), axes))
    return np.ascontiguousarray(np.moveaxis(res, list(range(k)), axes))


def _broadcast_shape(qudits: Sequence[int], ndim: int, d: int) -> tuple[list[int], tuple[int, ...]]:
    axes = _axes(qudits, ndim)
    shape = [1] * ndim
    for ax in axes:
        shape[ax] = d
    return axes, tuple(shape)


def apply_diagonal(view: np.ndarray, diag: np.ndarray, qudits: Sequence[int]) -> np.ndarray:
    """Multiply in place by a diagonal ``k``-local operator.

    ``diag`` has shape ``(d,) * k`` (or ``d**k``), axes ordered as ``qudits``.
    Returns ``view`` (modified in place).
    """
    d = view.shape[1]
    k = len(qudits)
    axes, shape = _broadcast_shape(qudits, view.ndim, d)
    table = np.asarray(diag).reshape((d,) * k)
    order = np.argsort(axes)
    view *= np.transpose(table, order).reshape(shape)
    return view


def local_transition(lam: np.ndarray, psi: np.ndarray, qudits: Sequence[int]) -> np.ndarray:
    """Reduced transition matrix ``rho[a, b] = sum_rest conj(lam[a, rest]) psi[b, rest]``.

    Summed over the batch axis too, so ``<lam|O|psi> = sum(O * rho)`` for a local
    ``O`` (``d**k x d**k``, index order as ``qudits``).
    """
    k = len(qudits)
    d = psi.shape[1]
    axes = _axes(qudits, psi.ndim)
    lt = np.moveaxis(lam, axes, list(range(k))).reshape(d**k, -1)
    pt = np.moveaxis(psi, axes, list(range(k))).reshape(d**k, -1)
    return lt.conj() @ pt.T


def embed_local(mat: np.ndarray, qudits: Sequence[int], n_qudits: int, d: int) -> np.ndarray:
    """Dense ``d**K x d**K`` embedding of a local operator (small registers, tests only)."""
    dim = d**n_qudits
    eye = np.eye(dim, dtype=np.complex128).reshape((dim,) + (d,) * n_qudits)
    cols = apply_local(eye, np.asarray(mat, dtype=np.complex128), qudits)
    return cols.reshape(dim, dim).T
