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
* :class:`ControlledRotation` ``exp(-i t |c><c| (x) P/2)``: a two-level rotation on the target
  qudit when the control qudit is at level ``c``.

Taxonomy (one place): every gate class states its ``kind`` (count class ``single`` / ``two`` /
``generator``), its ``hardware_key`` (profile entry, see :mod:`circuits.hardware`) and
``export()`` (its JSON entry without the angle, see :mod:`circuits.export`);
:func:`gate_from_export` is the inverse.

Gates act on canonical views ``(B, d, ..., d)`` (see :mod:`circuits.register`).
``apply`` may work in place and returns the result.
"""
from __future__ import annotations

import cmath
import functools
import math
from abc import ABC, abstractmethod
from typing import NamedTuple, Sequence

import numpy as np

from .register import apply_diagonal, apply_local, local_transition

__all__ = [
    "Gate",
    "two_level_ops",
    "TwoLevelRotation",
    "MSGate",
    "DiagonalGate",
    "GeneratorGate",
    "ControlledRotation",
    "local_gate",
    "pairs_apply",
    "pairs_backward",
    "gate_from_export",
    "zz_levels",
]


def complex_matrix(mat: np.ndarray) -> dict[str, list]:
    """``{"real": ..., "imag": ...}`` nested lists of a complex matrix (JSON)."""
    return {"real": np.real(mat).tolist(), "imag": np.imag(mat).tolist()}


def zz_levels(table: np.ndarray) -> tuple[int, int] | None:
    """Levels ``(j, k)`` if a ``d x d`` table is ``Z^{jk} (x) Z^{jk}`` (a light-shift phase), else None."""
    t = np.asarray(table, dtype=float)
    if t.ndim != 2 or t.shape[0] != t.shape[1]:
        return None
    nz = np.flatnonzero(np.abs(np.diagonal(t)) > 1e-12)
    if nz.size != 2:
        return None
    z = np.zeros(t.shape[0])
    z[nz[0]], z[nz[1]] = 1.0, -1.0
    return (int(nz[0]), int(nz[1])) if np.allclose(t, np.outer(z, z), atol=1e-12) else None


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


class _PairForm(NamedTuple):
    """A gate acting as the same 2 x 2 rotation on pairs of strided slices.

    The canonical view is reshaped to ``shape`` (batch folded into the first axis);
    ``pairs`` lists ``(slice_a, slice_b, w)``.  ``U(t)`` maps each pair
    ``(a, b) -> (c a - i s w b, -i s conj(w) a + c b)`` with ``c, s = cos, sin(freq t)``,
    and the generator is ``gain * [[0, w], [conj(w), 0]]`` on each pair.
    """

    shape: tuple[int, ...]
    pairs: tuple[tuple[tuple, tuple, complex], ...]
    freq: float
    gain: float

    def coeffs(self, t: float) -> tuple[float, complex]:
        return math.cos(self.freq * t), -1j * math.sin(self.freq * t)

    def nbytes(self, view: np.ndarray) -> int:
        """Bytes kept by :func:`pairs_apply` with ``keep`` for this view."""
        return 2 * len(self.pairs) * self.slice_size(view) * view.itemsize

    def slice_size(self, view: np.ndarray) -> int:
        """Amplitudes in one slice of ``view``."""
        return view.size // int(np.prod(self.shape[1::2]))


def pairs_apply(
    form: _PairForm, view: np.ndarray, t: float, keep: np.ndarray | None = None, tmp: np.ndarray | None = None
) -> np.ndarray:
    """``U(t)`` on a canonical view in place, slice by slice; returns the view.

    ``keep`` (flat complex buffer of :meth:`_PairForm.nbytes`) receives the pre-gate
    slices ``a_0, b_0, a_1, b_1, ...``; ``tmp`` (flat, at least three slices) is scratch."""
    if not view.flags.c_contiguous:
        view = np.ascontiguousarray(view)
    x = view.reshape(form.shape)
    c, ms = form.coeffs(t)
    for n, (ia, ib, w) in enumerate(form.pairs):
        xa, xb = x[ia], x[ib]
        size = xa.size
        if keep is not None:
            a = keep[2 * n * size : (2 * n + 1) * size].reshape(xa.shape)
            b = keep[(2 * n + 1) * size : (2 * n + 2) * size].reshape(xa.shape)
            np.copyto(a, xa)
            np.copyto(b, xb)
        else:
            a = xa.copy() if tmp is None else tmp[size : 2 * size].reshape(xa.shape)
            if tmp is not None:
                np.copyto(a, xa)
            b = xb
        scratch = None if tmp is None else tmp[:size].reshape(xa.shape)
        if keep is not None and tmp is not None:
            new = tmp[2 * size : 3 * size].reshape(xa.shape)
            np.multiply(a, c, out=new)
            new += np.multiply(b, ms * w, out=scratch)
            np.copyto(xa, new)
            np.multiply(b, c, out=new)
            new += np.multiply(a, ms * w.conjugate(), out=scratch)
            np.copyto(xb, new)
            continue
        xa *= c
        xa += np.multiply(b, ms * w, out=scratch)
        xb *= c
        xb += np.multiply(a, ms * w.conjugate(), out=scratch)
    return view


def _pairs_overlap(form: _PairForm, lam: np.ndarray, psi: np.ndarray) -> complex:
    """``sum_b <lam_b|G|psi_b>`` from the pair slices."""
    xl, xp = lam.reshape(form.shape), psi.reshape(form.shape)
    ov = 0j
    for ia, ib, w in form.pairs:
        la, lb = np.ascontiguousarray(xl[ia]), np.ascontiguousarray(xl[ib])
        ov += w * np.vdot(la, xp[ib].copy()) + w.conjugate() * np.vdot(lb, xp[ia].copy())
    return form.gain * complex(ov)


def pairs_backward(
    form: _PairForm,
    lam: np.ndarray,
    t: float,
    unapply: bool,
    tmp: np.ndarray,
    kept: np.ndarray | None = None,
    psi: np.ndarray | None = None,
    unapply_psi: bool = False,
) -> complex:
    """One backward step of the adjoint gradient for a pair gate, one sweep per pair.

    ``lam`` is the costate after the gate (contiguous canonical view, un-applied in
    place when ``unapply``); ``tmp`` is flat scratch of at least six slices.  The state
    comes either as ``kept`` (pre-gate slices from :func:`pairs_apply`) or as the
    post-gate view ``psi`` (un-applied in place when ``unapply_psi``).  Returns
    ``<lam|G|psi>`` (with ``kept``: ``<lam_post|U G|psi_pre>``, the same number since
    ``G`` commutes with ``U``).
    """
    xl = lam.reshape(form.shape)
    xp = None if psi is None else psi.reshape(form.shape)
    c, ms = form.coeffs(t)
    ov = 0j
    for n, (ia, ib, w) in enumerate(form.pairs):
        ya, yb = xl[ia], xl[ib]
        size = ya.size
        la, lb, scratch, pa, pb, new = (tmp[m * size : (m + 1) * size].reshape(ya.shape) for m in range(6))
        np.copyto(la, ya)
        np.copyto(lb, yb)
        wc = w.conjugate()
        if kept is not None:
            a = kept[2 * n * size : (2 * n + 1) * size]
            b = kept[(2 * n + 1) * size : (2 * n + 2) * size]
            if not unapply:
                lf, lg = la.reshape(-1), lb.reshape(-1)
                # U G = gain * [[ms, c w], [c conj(w), ms]] on the pair
                ov += ms * (np.vdot(lf, a) + np.vdot(lg, b)) + c * (w * np.vdot(lf, b) + wc * np.vdot(lg, a))
                continue
            # pre-gate costate computed contiguously, paired with the pre-gate state
            np.multiply(la, c, out=pa)
            pa -= np.multiply(lb, ms * w, out=scratch)
            np.multiply(lb, c, out=pb)
            pb -= np.multiply(la, ms * wc, out=scratch)
            np.copyto(ya, pa)
            np.copyto(yb, pb)
            ov += w * np.vdot(pa.reshape(-1), b) + wc * np.vdot(pb.reshape(-1), a)
            continue
        za, zb = xp[ia], xp[ib]
        np.copyto(pa, za)
        np.copyto(pb, zb)
        ov += w * np.vdot(la, pb) + wc * np.vdot(lb, pa)
        # un-apply computed contiguously, then written back to the strided slices
        for ok, (za, zb, pa, pb) in ((unapply_psi, (za, zb, pa, pb)), (unapply, (ya, yb, la, lb))):
            if ok:
                np.multiply(pa, c, out=new)
                new -= np.multiply(pb, ms * w, out=scratch)
                np.copyto(za, new)
                np.multiply(pb, c, out=new)
                new -= np.multiply(pa, ms * wc, out=scratch)
                np.copyto(zb, new)
    return form.gain * complex(ov)


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
    def hardware_key(self) -> str:
        """Hardware-profile entry of this gate (``generator`` for non-native exponentials)."""
        return "generator"

    def export(self) -> dict:
        """JSON entry of the gate without its angle (see :mod:`circuits.export`)."""
        return {"kind": "generator", "qudits": list(self.qudits), "generator": complex_matrix(self.generator())}

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

    def _pair_form(self, shape: tuple[int, ...]) -> _PairForm | None:
        """Pair-slice form on a register of ``shape`` (cached), or None if the gate has none."""
        cache = self.__dict__.setdefault("_pair_forms", {})
        if shape not in cache:
            cache[shape] = self._make_pair_form(shape)
        return cache[shape]

    def _make_pair_form(self, shape: tuple[int, ...]) -> _PairForm | None:
        return None

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
    hardware_key = "rotation"

    def __init__(self, qudit: int, j: int, k: int, d: int, phi: float = 0.0) -> None:
        two_level_ops(j, k, d)  # validates
        self.qudits = (int(qudit),)
        self.j, self.k, self.d, self.phi = int(j), int(k), int(d), float(phi)

    def generator(self) -> np.ndarray:
        x, y, _ = two_level_ops(self.j, self.k, self.d)
        return 0.5 * (np.cos(self.phi) * x + np.sin(self.phi) * y)

    def export(self) -> dict:
        return {"kind": "two_level_rotation", "qudits": list(self.qudits), "levels": [self.j, self.k],
                "phase": self.phi}

    def _make_pair_form(self, shape: tuple[int, ...]) -> _PairForm:
        q = self.qudits[0]
        rest = int(np.prod(shape[q + 1 :], dtype=np.int64))
        w = cmath.exp(-1j * self.phi)  # <j|G|k> = w / 2
        return _PairForm((-1, self.d, rest), (((slice(None), self.j), (slice(None), self.k), w),), 0.5, 0.5)

    def apply(self, view: np.ndarray, t: float) -> np.ndarray:
        return pairs_apply(self._pair_form(view.shape[1:]), view, t)

    def generator_overlap(self, lam: np.ndarray, psi: np.ndarray) -> complex:
        return _pairs_overlap(self._pair_form(psi.shape[1:]), np.ascontiguousarray(lam), np.ascontiguousarray(psi))

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
    hardware_key = "ms"

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

    def export(self) -> dict:
        return {"kind": "molmer_sorensen", "qudits": list(self.qudits), "levels": [self.j, self.k],
                "phase": self.phi}

    def _make_pair_form(self, shape: tuple[int, ...]) -> _PairForm:
        q1, q2 = sorted(self.qudits)
        mid = int(np.prod(shape[q1 + 1 : q2], dtype=np.int64))
        rest = int(np.prod(shape[q2 + 1 :], dtype=np.int64))
        j, k, sl = self.j, self.k, slice(None)
        # P|j> = e^{i phi}|k>, P|k> = e^{-i phi}|j>: <jj|G|kk> = e^{-2i phi}, <jk|G|kj> = 1
        pairs = (
            ((sl, j, sl, j), (sl, k, sl, k), cmath.exp(-2j * self.phi)),
            ((sl, j, sl, k), (sl, k, sl, j), 1.0 + 0j),
        )
        return _PairForm((-1, self.d, mid, self.d, rest), pairs, 1.0, 1.0)

    def apply(self, view: np.ndarray, t: float) -> np.ndarray:
        return pairs_apply(self._pair_form(view.shape[1:]), view, t)

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
        return _pairs_overlap(self._pair_form(psi.shape[1:]), np.ascontiguousarray(lam), np.ascontiguousarray(psi))


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

    @functools.cached_property
    def _light_shift_levels(self) -> tuple[int, int] | None:
        """:func:`zz_levels` of a two-qudit table (None otherwise); computed once per gate (the
        table is fixed), since pricing asks for every gate's key."""
        return zz_levels(self.h) if self.locality == 2 else None

    @functools.cached_property
    def hardware_key(self) -> str:
        """``phase`` (virtual single-qudit phase), ``light_shift`` (``Z^{jk} (x) Z^{jk}`` table),
        ``diagonal2`` (any other two-qudit table) or ``generator``."""
        if self.locality == 1:
            return "phase"
        if self.locality == 2:
            return "light_shift" if self._light_shift_levels is not None else "diagonal2"
        return "generator"

    def export(self) -> dict:
        if self.locality == 1:
            return {"kind": "virtual_phase", "qudits": list(self.qudits), "table": self.h.tolist()}
        levels = self._light_shift_levels
        if levels is not None:
            return {"kind": "light_shift_phase", "qudits": list(self.qudits), "levels": list(levels)}
        return {"kind": "diagonal", "qudits": list(self.qudits), "table": self.h.tolist()}

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


class ControlledRotation(GeneratorGate):
    """``exp(-i t |c><c| (x) (cos phi X^{jk} + sin phi Y^{jk})/2)`` on ``(control, target)``.

    At ``t = pi`` with the control at level ``c`` the target's levels ``j, k`` are swapped
    (``|j> -> -i e^{i phi}|k>``); other control levels leave the target alone.
    """

    kind = "two"
    hardware_key = "controlled_rotation"

    def __init__(self, control: int, target: int, c: int, j: int, k: int, d: int, phi: float = 0.0) -> None:
        x, y, _ = two_level_ops(j, k, d)
        if not 0 <= c < d:
            raise ValueError(f"control level {c} outside 0..{d - 1}")
        proj = np.zeros((d, d))
        proj[c, c] = 1.0
        super().__init__((control, target), np.kron(proj, 0.5 * (np.cos(phi) * x + np.sin(phi) * y)), d)
        self.c, self.j, self.k, self.phi = int(c), int(j), int(k), float(phi)

    def export(self) -> dict:
        return {"kind": "controlled_rotation", "qudits": list(self.qudits), "control_level": self.c,
                "levels": [self.j, self.k], "phase": self.phi}


def gate_from_export(entry: dict, d: int) -> Gate:
    """Gate of an :meth:`Gate.export` entry on qudits of ``d`` levels (``KeyError``/``ValueError``
    on a malformed entry). Kinds of format version 1 (``rotation``, ``ms``) are accepted."""
    kind = entry["kind"]
    qudits = [int(q) for q in entry["qudits"]]
    phase = float(entry.get("phase", 0.0))
    if kind in ("two_level_rotation", "rotation", "molmer_sorensen", "ms", "controlled_rotation",
                "light_shift_phase"):
        j, k = (int(x) for x in entry["levels"])
    if kind in ("two_level_rotation", "rotation"):
        if len(qudits) != 1:
            raise ValueError("a two-level rotation needs one qudit")
        return TwoLevelRotation(qudits[0], j, k, d, phase)
    if kind in ("molmer_sorensen", "ms"):
        return MSGate(qudits, j, k, d, phase)
    if kind == "controlled_rotation":
        if len(qudits) != 2:
            raise ValueError("a controlled rotation needs two qudits")
        return ControlledRotation(qudits[0], qudits[1], int(entry["control_level"]), j, k, d, phase)
    if kind == "light_shift_phase":
        z = np.zeros(d)
        z[j], z[k] = 1.0, -1.0
        return DiagonalGate(qudits, np.outer(z, z), d)
    if kind in ("virtual_phase", "diagonal"):
        return DiagonalGate(qudits, np.asarray(entry["table"], dtype=float), d)
    if kind == "generator":
        g = entry["generator"]
        return GeneratorGate(qudits, np.asarray(g["real"], float) + 1j * np.asarray(g["imag"], float), d)
    raise ValueError(f"unknown gate kind {kind!r}")


def local_gate(qudits: Sequence[int], g: np.ndarray, d: int) -> Gate:
    """Gate for a dense local generator, using the diagonal fast path when possible."""
    mat = np.asarray(g)
    if np.count_nonzero(mat - np.diag(np.diagonal(mat))) == 0:
        return DiagonalGate(qudits, np.diagonal(mat), d)
    return GeneratorGate(qudits, mat, d)
