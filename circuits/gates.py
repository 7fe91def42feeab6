"""Native gate set on a qudit register, and exponentials of local generators.

Every gate is ``U(t) = exp(-i t G)`` for a fixed Hermitian generator ``G``; the
circuit decides ``t`` (a fixed angle, or ``scale * params[index] + offset``).  The
adjoint gradient uses ``dU/dt = -i G U``.

Two-level operators on levels ``j < k`` of one qudit::

    X^{jk} = |j><k| + |k><j|,   Y^{jk} = -i|j><k| + i|k><j|,   Z^{jk} = |j><j| - |k><k|

* :class:`TwoLevelRotation` ``R^{jk}(t, phi) = exp(-i t/2 (cos phi X^{jk} + sin phi Y^{jk}))``,
  so ``R^{jk}(pi, 0)|j> = -i|k>``.
* :class:`MSGate` ``exp(-i t P (x) P)`` with ``P = cos phi X^{jk} + sin phi Y^{jk}`` on each
  of two qudits (Molmer-Sorensen type); at ``t = pi/4``, ``|jj> -> (|jj> - i e^{2i phi}|kk>)/sqrt 2``.
* :class:`DiagonalGate` ``exp(-i t diag(h))`` for a ``k``-local real table ``h`` of shape
  ``(d,)*k`` (single-qudit phases, light-shift / controlled-phase type two-qudit gates).
* :class:`GeneratorGate` ``exp(-i t G)`` for any dense ``k``-local Hermitian ``G``.

Gates act on canonical views ``(B, d, ..., d)`` (see :mod:`circuits.register`).
``apply`` may work in place and returns the result.
"""
from __future__ import annotations

import cmath
import math
from abc import ABC, abstractmethod
from typing import Sequence

import numpy as np

from .register import apply_diagonal, apply_local, local_transition

__all__ = [
    "Gate",
    "two_level_ops",
    "TwoLevelRotation",
    "MSGate",
    "DiagonalGate",
    "GeneratorGate",
    "local_gate",
]


def two_level_ops(j: int, k: int, d: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Embedded Pauli-type matrices ``(X^{jk}, Y^{jk}, Z^{jk})`` of size ``d x d``."""
    if not (0 <= j < k < d):
        raise ValueError(f"need 0 <= j < k < d, got j={j}, k={k}, d={d}")
    x = np.zeros((d, d), dtype=np.complex128)
    y = np.zeros((d, d), dtype=np.complex128)
    z = np.zeros((d, d), dtype=np.complex128)
    x[j, k] = x[k, j] = 1.0
    y[j, k], y[k, j] = -1j, 1j
    z[j, j], z[k, k] = 1.0, -1.0
    return x, y, z


def _idx(ndim: int, assign: dict[int, int]) -> tuple:
    """Index tuple selecting fixed levels on some canonical-view axes."""
    return tuple(assign.get(ax, slice(None)) for ax in range(ndim))


def _flat_levels(shape: tuple[int, ...]) -> np.ndarray:
    """``(K, dim)`` level of every qudit in every flat basis index (row-major)."""
    return np.indices(shape).reshape(len(shape), -1)


def _where_levels(levels: np.ndarray, assign: dict[int, int]) -> np.ndarray:
    """Sorted flat indices whose qudit ``q`` is at level ``assign[q]`` for every key."""
    mask = np.ones(levels.shape[1], dtype=bool)
    for q, lev in assign.items():
        mask &= levels[q] == lev
    return np.flatnonzero(mask)


def _pair_rotate(
    x: np.ndarray, ia: np.ndarray, ib: np.ndarray, c: complex, m_ab: object, m_ba: object
) -> tuple[np.ndarray, np.ndarray]:
    """``(x_a, x_b) <- (c x_a + m_ab x_b, m_ba x_a + c x_b)`` on gathered pairs; returns
    the gathered (old) ``x_a, x_b``."""
    a = x[:, ia]
    b = x[:, ib]
    x[:, ia] = c * a + m_ab * b
    x[:, ib] = m_ba * a + c * b
    return a, b


class Gate(ABC):
    """Unitary ``exp(-i t G)`` with a fixed Hermitian generator ``G``.

    Attributes
    ----------
    kind
        ``"single"``, ``"two"`` (native one-/two-qudit gates) or ``"generator"``.
    qudits
        Qudits acted on (register mode); ``()`` in subspace mode (acts on everything).
    d
        Levels per qudit (0 in subspace mode).
    """

    kind: str = "generator"
    qudits: tuple[int, ...] = ()
    d: int = 0

    @property
    def locality(self) -> int:
        """Number of qudits acted on (0 in subspace mode)."""
        return len(self.qudits)

    @abstractmethod
    def apply(self, view: np.ndarray, t: float) -> np.ndarray:
        """Return ``U(t) view`` (may overwrite ``view``)."""

    @abstractmethod
    def generator_overlap(self, lam: np.ndarray, psi: np.ndarray) -> complex:
        """``sum_b <lam_b| G |psi_b>`` over the batch axis."""

    @abstractmethod
    def generator(self) -> np.ndarray:
        """Dense generator: local ``d**k x d**k`` (register) or ``dim x dim`` (subspace)."""

    def unitary(self, t: float) -> np.ndarray:
        """Dense ``exp(-i t G)`` of :meth:`generator` (by eigendecomposition)."""
        w, v = np.linalg.eigh(self.generator())
        return (v * np.exp(-1j * t * w)) @ v.conj().T

    # -- flat fast path (small states; used by the circuit engine) ------------
    def _plan(self, shape: tuple[int, ...]) -> object:
        """Per-space precomputation for :meth:`_apply_flat`, cached by ``shape``."""
        cache = self.__dict__.setdefault("_plans", {})
        plan = cache.get(shape)
        if plan is None:
            plan = cache[shape] = self._make_plan(shape)
        return plan

    def _make_plan(self, shape: tuple[int, ...]) -> object:
        return tuple(shape)

    def _apply_flat(self, x: np.ndarray, t: float, plan: object) -> np.ndarray:
        """``U(t)`` on a flat ``(B, dim)`` array (may overwrite it); returns the result."""
        shape = (x.shape[0],) + plan  # default plan: the space shape
        return self.apply(x.reshape(shape), t).reshape(x.shape)

    def _overlap_unapply(
        self, work: np.ndarray, nb: int, t: float, plan: object, unapply: bool
    ) -> tuple[complex, np.ndarray]:
        """``<lam|G|psi>`` for ``work = [psi; lam]`` (flat, ``nb`` rows each), then
        optionally ``U(-t)`` on all rows."""
        shape = (work.shape[0],) + plan
        view = work.reshape(shape)
        ov = complex(self.generator_overlap(view[nb:], view[:nb]))
        if unapply:
            work = self.apply(view, -t).reshape(work.shape)
        return ov, work


class TwoLevelRotation(Gate):
    """``R^{jk}(t, phi)`` on one qudit; ``G = (cos phi X^{jk} + sin phi Y^{jk}) / 2``.

    Applied on the two-level slice only (touches 2/d of the amplitudes).
    """

    kind = "single"

    def __init__(self, qudit: int, j: int, k: int, d: int, phi: float = 0.0) -> None:
        two_level_ops(j, k, d)  # validates
        self.qudits = (int(qudit),)
        self.j, self.k, self.d, self.phi = int(j), int(k), int(d), float(phi)

    def generator(self) -> np.ndarray:
        x, y, _ = two_level_ops(self.j, self.k, self.d)
        return 0.5 * (np.cos(self.phi) * x + np.sin(self.phi) * y)

    def apply(self, view: np.ndarray, t: float) -> np.ndarray:
        ax = self.qudits[0] + 1
        ij, ik = _idx(view.ndim, {ax: self.j}), _idx(view.ndim, {ax: self.k})
        c, s = np.cos(0.5 * t), np.sin(0.5 * t)
        m_jk = -1j * s * np.exp(-1j * self.phi)
        m_kj = -1j * s * np.exp(1j * self.phi)
        a = view[ij].copy()
        view[ij] *= c
        view[ij] += m_jk * view[ik]
        view[ik] *= c
        view[ik] += m_kj * a
        return view

    def generator_overlap(self, lam: np.ndarray, psi: np.ndarray) -> complex:
        ax = self.qudits[0] + 1
        ij, ik = _idx(psi.ndim, {ax: self.j}), _idx(psi.ndim, {ax: self.k})
        e = np.exp(1j * self.phi)
        return 0.5 * (np.vdot(lam[ij], psi[ik]) / e + np.vdot(lam[ik], psi[ij]) * e)

    def _make_plan(self, shape: tuple[int, ...]) -> tuple[np.ndarray, np.ndarray]:
        lv = _flat_levels(shape)
        q = self.qudits[0]
        return _where_levels(lv, {q: self.j}), _where_levels(lv, {q: self.k})

    def _coeffs(self, t: float) -> tuple[float, complex, complex]:
        c, s = math.cos(0.5 * t), math.sin(0.5 * t)
        e = cmath.exp(1j * self.phi)
        return c, -1j * s / e, -1j * s * e

    def _apply_flat(self, x: np.ndarray, t: float, plan: object) -> np.ndarray:
        ij, ik = plan
        _pair_rotate(x, ij, ik, *self._coeffs(t))
        return x

    def _overlap_unapply(
        self, work: np.ndarray, nb: int, t: float, plan: object, unapply: bool
    ) -> tuple[complex, np.ndarray]:
        ij, ik = plan
        if unapply:
            a, b = _pair_rotate(work, ij, ik, *self._coeffs(-t))
        else:
            a, b = work[:, ij], work[:, ik]
        e = cmath.exp(1j * self.phi)
        ov = 0.5 * (np.vdot(a[nb:], b[:nb]) / e + np.vdot(b[nb:], a[:nb]) * e)
        return complex(ov), work


class MSGate(Gate):
    """Molmer-Sorensen-type ``exp(-i t P (x) P)``, ``P = cos phi X^{jk} + sin phi Y^{jk}``.

    Acts only on the four amplitudes with both qudits in ``{j, k}``.
    """

    kind = "two"

    def __init__(self, qudits: Sequence[int], j: int, k: int, d: int, phi: float = 0.0) -> None:
        two_level_ops(j, k, d)
        q = tuple(int(x) for x in qudits)
        if len(q) != 2 or q[0] == q[1]:
            raise ValueError(f"MS gate needs two distinct qudits, got {qudits}")
        self.qudits = q
        self.j, self.k, self.d, self.phi = int(j), int(k), int(d), float(phi)

    def generator(self) -> np.ndarray:
        x, y, _ = two_level_ops(self.j, self.k, self.d)
        p = np.cos(self.phi) * x + np.sin(self.phi) * y
        return np.kron(p, p)

    def _slices(self, ndim: int) -> tuple[tuple, tuple, tuple, tuple]:
        a1, a2 = self.qudits[0] + 1, self.qudits[1] + 1
        j, k = self.j, self.k
        return (
            _idx(ndim, {a1: j, a2: j}),
            _idx(ndim, {a1: j, a2: k}),
            _idx(ndim, {a1: k, a2: j}),
            _idx(ndim, {a1: k, a2: k}),
        )

    def apply(self, view: np.ndarray, t: float) -> np.ndarray:
        jj, jk, kj, kk = self._slices(view.ndim)
        c, s = np.cos(t), np.sin(t)
        e2 = np.exp(2j * self.phi)
        # P|j> = e^{i phi}|k>, P|k> = e^{-i phi}|j>
        a_jj, a_jk = view[jj].copy(), view[jk].copy()
        view[jj] *= c
        view[jj] += (-1j * s / e2) * view[kk]
        view[kk] *= c
        view[kk] += (-1j * s * e2) * a_jj
        view[jk] *= c
        view[jk] += (-1j * s) * view[kj]
        view[kj] *= c
        view[kj] += (-1j * s) * a_jk
        return view

    def _make_plan(self, shape: tuple[int, ...]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        # pairs (jj, kk) and (jk, kj) stacked; weight 1/e2 resp. 1 on the first member
        lv = _flat_levels(shape)
        q1, q2 = self.qudits
        j, k = self.j, self.k
        first = np.concatenate([_where_levels(lv, {q1: j, q2: j}), _where_levels(lv, {q1: j, q2: k})])
        second = np.concatenate([_where_levels(lv, {q1: k, q2: k}), _where_levels(lv, {q1: k, q2: j})])
        n = first.size // 2
        w = np.ones(first.size, dtype=np.complex128)
        w[:n] = np.exp(-2j * self.phi)
        return first, second, w

    def _apply_flat(self, x: np.ndarray, t: float, plan: object) -> np.ndarray:
        first, second, w = plan
        ms = -1j * math.sin(t)
        _pair_rotate(x, first, second, math.cos(t), ms * w, ms * w.conj())
        return x

    def _overlap_unapply(
        self, work: np.ndarray, nb: int, t: float, plan: object, unapply: bool
    ) -> tuple[complex, np.ndarray]:
        first, second, w = plan
        if unapply:
            ms = 1j * math.sin(t)
            a, b = _pair_rotate(work, first, second, math.cos(t), ms * w, ms * w.conj())
        else:
            a, b = work[:, first], work[:, second]
        # <lam|G|psi> = sum conj(lam_a) w psi_b + conj(lam_b) conj(w) psi_a
        ov = np.vdot(a[nb:], w * b[:nb]) + np.vdot(b[nb:], w.conj() * a[:nb])
        return complex(ov), work

    def generator_overlap(self, lam: np.ndarray, psi: np.ndarray) -> complex:
        jj, jk, kj, kk = self._slices(psi.ndim)
        e2 = np.exp(2j * self.phi)
        return (
            np.vdot(lam[kk], psi[jj]) * e2
            + np.vdot(lam[jj], psi[kk]) / e2
            + np.vdot(lam[kj], psi[jk])
            + np.vdot(lam[jk], psi[kj])
        )


class DiagonalGate(Gate):
    """``exp(-i t diag(h))`` for a real table ``h`` of shape ``(d,)*k`` over ``qudits``.

    ``h[l_0, ..., l_{k-1}]`` multiplies the basis states where qudit ``qudits[i]`` is at
    level ``l_i``.  A product ``A (x) B`` of diagonal operators is ``np.outer(a, b)``; a
    fixed phase table ``p`` is ``h = -p`` at ``t = 1``.  Kind ``single``/``two`` for
    ``k = 1, 2``, else ``generator``.
    """

    def __init__(self, qudits: Sequence[int], h: np.ndarray, d: int) -> None:
        q = tuple(int(x) for x in qudits)
        table = np.asarray(h)
        if np.iscomplexobj(table):
            if np.max(np.abs(table.imag), initial=0.0) > 1e-12:
                raise ValueError("diagonal generator must be real")
            table = table.real
        table = np.asarray(table, dtype=np.float64).reshape((d,) * len(q))
        self.qudits, self.d, self.h = q, int(d), table
        self.kind = {1: "single", 2: "two"}.get(len(q), "generator")

    def generator(self) -> np.ndarray:
        return np.diag(self.h.ravel()).astype(np.complex128)

    def unitary(self, t: float) -> np.ndarray:
        return np.diag(np.exp(-1j * t * self.h.ravel()))

    def apply(self, view: np.ndarray, t: float) -> np.ndarray:
        return apply_diagonal(view, np.exp(-1j * t * self.h), self.qudits)

    def generator_overlap(self, lam: np.ndarray, psi: np.ndarray) -> complex:
        rho = local_transition(lam, psi, self.qudits)
        return complex(np.dot(np.diagonal(rho), self.h.ravel()))

    def _make_plan(self, shape: tuple[int, ...]) -> tuple[np.ndarray, np.ndarray]:
        lv = _flat_levels(shape)
        tidx = np.ravel_multi_index(tuple(lv[q] for q in self.qudits), self.h.shape)
        return tidx, self.h.ravel()[tidx]

    def _apply_flat(self, x: np.ndarray, t: float, plan: object) -> np.ndarray:
        x *= np.exp(-1j * t * self.h.ravel()).take(plan[0])
        return x

    def _overlap_unapply(
        self, work: np.ndarray, nb: int, t: float, plan: object, unapply: bool
    ) -> tuple[complex, np.ndarray]:
        ov = complex(np.vdot(work[nb:], work[:nb] * plan[1]))
        if unapply:
            work = self._apply_flat(work, -t, plan)
        return ov, work


class GeneratorGate(Gate):
    """``exp(-i t G)`` for a dense ``k``-local Hermitian ``G`` (``d**k x d**k``).

    ``G``'s index is row-major over ``qudits`` in the order given.  The
    eigendecomposition ``G = V diag(w) V^dag`` is computed once, so each
    ``U(t) = V e^{-i t w} V^dag`` costs one small matrix product.
    """

    kind = "generator"

    def __init__(self, qudits: Sequence[int], g: np.ndarray, d: int, atol: float = 1e-10) -> None:
        q = tuple(int(x) for x in qudits)
        mat = np.asarray(g, dtype=np.complex128)
        if mat.shape != (d ** len(q),) * 2:
            raise ValueError(f"generator shape {mat.shape} does not fit {len(q)} qudits of d={d}")
        if np.max(np.abs(mat - mat.conj().T)) > atol:
            raise ValueError("generator is not Hermitian")
        self.qudits, self.d, self.g = q, int(d), mat
        self.w, self.v = np.linalg.eigh(mat)

    def generator(self) -> np.ndarray:
        return self.g

    def unitary(self, t: float) -> np.ndarray:
        return (self.v * np.exp(-1j * t * self.w)) @ self.v.conj().T

    def apply(self, view: np.ndarray, t: float) -> np.ndarray:
        return apply_local(view, self.unitary(t), self.qudits)

    def generator_overlap(self, lam: np.ndarray, psi: np.ndarray) -> complex:
        return complex(np.sum(self.g * local_transition(lam, psi, self.qudits)))


def local_gate(qudits: Sequence[int], g: np.ndarray, d: int) -> Gate:
    """Gate for a dense local generator, using the diagonal fast path when possible."""
    mat = np.asarray(g)
    if np.count_nonzero(mat - np.diag(np.diagonal(mat))) == 0:
        return DiagonalGate(qudits, np.diagonal(mat), d)
    return GeneratorGate(qudits, mat, d)
