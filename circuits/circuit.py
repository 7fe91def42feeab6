"""Parameterised circuits and adjoint (reverse-mode) gradients.

A circuit is an ordered list of operations ``(gate, index, scale, offset)``.  The
gate angle is ``t = offset + scale * params[index]`` (``t = offset`` for a fixed gate,
``index = None``); parameters may be shared by several gates.  Each gate is
``U(t) = exp(-i t G)``, so ``dU/d params[index] = -i scale G U``.

The same code runs in register mode and in subspace mode: the circuit only knows
its :class:`~circuits.register.Space` and each gate knows how to act on the
canonical view.  States may be single vectors ``(dim,)`` or batches ``(B, dim)``;
overlaps of batches are summed, ``sum_b <phi_b|C|psi_b>`` (a trace for basis batches).
"""
from __future__ import annotations

import threading
from dataclasses import dataclass
from typing import NamedTuple, Sequence

import numpy as np

from fluxline_threads import single_threaded_blas
from .fused import FusedRegisterCircuit
from .kernel import HAVE_NUMBA, KernelProgram, NotLowerable
from .gates import Gate, pairs_apply, pairs_backward
from .register import Space, from_view, to_view

__all__ = ["Op", "ParametrizedCircuit"]

#: states with at most this many amplitudes (batch included) take the flat fast path:
#: per-gate index arrays precomputed once, gather / closed form / scatter per gate
SMALL_STATE = 8192
#: small register states are run block-fused (:mod:`circuits.fused`)
FUSE_REGISTER = True
#: states with at most this many amplitudes (batch included) run on the compiled kernel
#: (:mod:`circuits.kernel`) when numba is there and every gate has a kernel form; ``USE_KERNEL = False`` restores the numpy
#: paths above. Measured (native brickwork, d = 3, fidelity and gradient, CPU time): 2.8–2.9x
#: faster than block-fused at 243 and 729 amplitudes, 1.0–1.3x at 2187, 0.75x at 6561 (the
#: fused blocks' dense products win there; docs/circuits.md)
USE_KERNEL = True
KERNEL_STATE = 4096
#: large-state adjoint gradient: at most this many bytes of forward-pass states are
#: kept (the gates' touched slices, or whole states for gates without a pair form);
#: gates beyond the cap un-apply the state in the backward pass instead
MAX_KEPT_BYTES = 256 * 2**20


class _OpList(list):
    """The op list of a circuit: a list that counts its edits (``version``), so that the
    circuit's cached arrays are checked in O(1) instead of by walking the list."""

    version = 0

    def _edited(self) -> None:
        self.version += 1


def _counting(name: str):
    method = getattr(list, name)

    def edit(self, *args, **kwargs):
        self._edited()
        return method(self, *args, **kwargs)

    edit.__name__ = name
    return edit


for _name in ("__setitem__", "__delitem__", "__iadd__", "__imul__", "append", "extend", "insert", "pop",
              "remove", "clear", "sort", "reverse"):
    setattr(_OpList, _name, _counting(_name))


class _Compiled(NamedTuple):
    """Per-circuit arrays, rebuilt only when the op list or parameter count changes."""

    ops: tuple[Op, ...]
    version: tuple[int, int]  # (id of the op list, its edit count) when built
    n_params: int
    index: np.ndarray  # parameter index per gate (n_params for fixed gates)
    scale: np.ndarray  # 0 for fixed gates
    offset: np.ndarray
    first: int  # first parametrised gate (len(ops) if none)


class _Segment(NamedTuple):
    """A step of the small-state path: one gate (``table is None``) or a run of consecutive
    diagonal subspace gates ``start..stop-1`` merged into one phase multiplication, with
    ``table`` the (run length, dim) stack of their diagonals."""

    start: int
    stop: int
    table: np.ndarray | None


def _segments(ops: Sequence["Op"]) -> list[_Segment]:
    """Group consecutive diagonal subspace gates (they commute, and in the adjoint pass the
    product conj(costate) * state is the same for all of them, so one matrix-vector product
    gives every overlap of the run)."""
    out: list[_Segment] = []
    i = 0
    while i < len(ops):
        j = i
        while j < len(ops) and getattr(ops[j].gate, "is_diagonal", False) and hasattr(ops[j].gate, "h"):
            j += 1
        if j - i >= 2:
            out.append(_Segment(i, j, np.stack([ops[k].gate.h for k in range(i, j)])))
            i = j
        else:
            out.append(_Segment(i, i + 1, None))
            i += 1
    return out


@dataclass(frozen=True)
class Op:
    """One gate of a circuit with its parameter binding.

    ``t = offset + scale * params[index]``; ``index = None`` means a fixed gate.
    ``layer`` is a free tag used by accounting (-1 = none).
    """

    gate: Gate
    index: int | None = None
    scale: float = 1.0
    offset: float = 0.0
    layer: int = -1

    def angle(self, params: np.ndarray) -> float:
        """Resolved gate angle ``t``."""
        if self.index is None:
            return self.offset
        return self.offset + self.scale * float(params[self.index])


class ParametrizedCircuit:
    """Ordered gates on a :class:`Space` with shared real parameters.

    Parameters
    ----------
    space
        Register (``Space.qudits(K, d)``) or subspace (``Space.subspace(dim)``).
    n_params
        Minimum number of parameters (grows with the largest bound index).
    """

    def __init__(self, space: Space, n_params: int = 0) -> None:
        self.space = space
        self.ops = []
        self._n_params = int(n_params)

    @property
    def ops(self) -> list[Op]:
        """The gates in order (a list; edits are picked up by the next evaluation)."""
        return self._ops

    @ops.setter
    def ops(self, value: Sequence[Op]) -> None:
        self._ops = _OpList(value)

    # -- construction -------------------------------------------------------
    def _check(self, gate: Gate) -> None:
        if self.space.register:
            if gate.d != self.space.d or not gate.qudits:
                raise ValueError(f"gate {type(gate).__name__} does not fit a d={self.space.d} register")
            if max(gate.qudits) >= self.space.n_qudits or min(gate.qudits) < 0:
                raise ValueError(f"gate qudits {gate.qudits} outside register of {self.space.n_qudits}")
        elif gate.qudits or getattr(gate, "dim", None) != self.space.dim:
            raise ValueError(f"gate {type(gate).__name__} does not act on a space of dim {self.space.dim}")

    def append(
        self,
        gate: Gate,
        index: int | None = None,
        scale: float = 1.0,
        offset: float = 0.0,
        layer: int = -1,
    ) -> Op:
        """Add a gate; ``index=None`` makes it fixed at angle ``offset``."""
        self._check(gate)
        if index is not None and index < 0:
            raise ValueError("parameter index must be >= 0")
        op = Op(gate, None if index is None else int(index), float(scale), float(offset), int(layer))
        self.ops.append(op)
        return op

    def extend(self, other: "ParametrizedCircuit", shift: int = 0) -> None:
        """Append all of ``other``'s gates, shifting its parameter indices by ``shift``."""
        if other.space != self.space:
            raise ValueError("circuits act on different spaces")
        for op in other.ops:
            idx = None if op.index is None else op.index + shift
            self.ops.append(Op(op.gate, idx, op.scale, op.offset, op.layer))
        self._n_params = max(self._n_params, other.n_params + shift)

    def reserve(self, n_params: int) -> None:
        """Declare at least ``n_params`` parameters (some may be unused)."""
        self._n_params = max(self._n_params, int(n_params))

    @property
    def n_params(self) -> int:
        """Number of parameters (largest bound index + 1, at least the declared size)."""
        return self._compiled().n_params

    def _compiled(self) -> _Compiled:
        """Angle arrays of the current op list (cached; ``self.ops`` may be edited)."""
        cached = self.__dict__.get("_cache")
        ops = self._ops
        version = (id(ops), ops.version)
        if cached is not None and cached.version == version and cached.n_params >= self._n_params:
            return cached
        used = [op.index for op in ops if op.index is not None]
        n = max([self._n_params] + [i + 1 for i in used])
        index = np.array([n if op.index is None else op.index for op in ops], dtype=np.intp)
        scale = np.array([0.0 if op.index is None else op.scale for op in ops], dtype=np.float64)
        offset = np.array([op.offset for op in ops], dtype=np.float64)
        first = next((i for i, op in enumerate(ops) if op.index is not None), len(ops))
        self._cache = _Compiled(tuple(ops), version, n, index, scale, offset, first)
        return self._cache

    def __len__(self) -> int:
        return len(self.ops)

    def angles(self, params: Sequence[float] | None) -> np.ndarray:
        """Resolved angle of every gate, in order."""
        return self._angles(self._params(params))

    def _angles(self, p: np.ndarray) -> np.ndarray:
        comp = self._compiled()
        return comp.offset + comp.scale * np.append(p, 0.0)[comp.index]

    def _params(self, params: Sequence[float] | None) -> np.ndarray:
        p = np.zeros(0) if params is None else np.asarray(params, dtype=np.float64).ravel()
        if p.size != self.n_params:
            raise ValueError(f"expected {self.n_params} parameters, got {p.size}")
        return p

    # -- evaluation ---------------------------------------------------------
    def _fused(self, size: int) -> FusedRegisterCircuit | None:
        """Block-fused form for register states of ``size`` amplitudes (small only)."""
        if not (FUSE_REGISTER and self.space.register) or size > SMALL_STATE or not self.ops:
            return None
        comp = self._compiled()
        cached = self.__dict__.get("_fused_cache")
        if cached is None or cached[0] is not comp:
            cached = self._fused_cache = (comp, FusedRegisterCircuit([op.gate for op in comp.ops], self.space.shape))
        return cached[1]

    def _kernel(self, size: int) -> KernelProgram | None:
        """Compiled-kernel form for register states of ``size`` amplitudes (see :data:`USE_KERNEL`)."""
        if not (USE_KERNEL and HAVE_NUMBA) or size > KERNEL_STATE or not self.ops:
            return None
        comp = self._compiled()
        cached = self.__dict__.get("_kernel_cache")
        if cached is None or cached[0] is not comp:
            try:
                program = KernelProgram([op.gate for op in comp.ops], self.space.shape, self.space.register)
            except NotLowerable:
                program = None
            cached = self._kernel_cache = (comp, program)
        return cached[1]

    def _segments(self) -> list[_Segment]:
        """Small-state steps with merged diagonal runs (subspace mode; cached per op list)."""
        comp = self._compiled()
        cached = self.__dict__.get("_segment_cache")
        if cached is None or cached[0] is not comp:
            segs = _segments(comp.ops) if not self.space.register else [
                _Segment(i, i + 1, None) for i in range(len(comp.ops))]
            cached = self._segment_cache = (comp, segs)
        return cached[1]

    def _plans(self) -> list[object]:
        """Each gate's flat fast-path plan for this space (cached per op list)."""
        comp = self._compiled()
        cached = self.__dict__.get("_plan_cache")
        if cached is None or cached[0] is not comp:
            shape = self.space.shape
            cached = self._plan_cache = (comp, [op.gate._plan(shape) for op in comp.ops])
        return cached[1]

    def _forward(self, angles: np.ndarray, view: np.ndarray) -> np.ndarray:
        kernel = self._kernel(view.size)
        if kernel is not None:
            comp = self._compiled()
            flat = np.ascontiguousarray(view.reshape(view.shape[0], -1), dtype=np.complex128)
            kernel.run(angles, comp.index, comp.scale, comp.first, flat, None, comp.n_params)
            return flat.reshape(view.shape)
        fused = self._fused(view.size)
        if fused is not None:
            return fused.forward(angles, view.reshape(view.shape[0], -1))[0].reshape(view.shape)
        if view.size <= SMALL_STATE:
            flat = view.reshape(view.shape[0], -1)
            plans = self._plans()
            listed = angles.tolist()
            for seg in self._segments():
                if seg.table is None:
                    flat = self.ops[seg.start].gate._apply_flat(flat, listed[seg.start], plans[seg.start])
                else:
                    flat *= np.exp(-1j * (angles[seg.start:seg.stop] @ seg.table))
            return flat.reshape(view.shape)
        angles = angles.tolist()
        for op, t in zip(self.ops, angles):
            view = op.gate.apply(view, t)
        return view

    def apply(self, params: Sequence[float] | None, psi0: np.ndarray) -> np.ndarray:
        """``C(params) psi0`` for a flat state ``(dim,)`` or batch ``(B, dim)``."""
        view, batched = to_view(psi0, self.space)
        return from_view(self._forward(self.angles(params), view), batched)

    def overlap_and_gradient(
        self, params: Sequence[float] | None, psi0: np.ndarray, phi: np.ndarray
    ) -> tuple[complex, np.ndarray]:
        """``f = <phi|C(params)|psi0>`` and ``df/dparams`` (complex) by the adjoint method.

        One forward pass, then one backward pass that un-applies each gate to the
        costate ``C_{>i}^dag phi`` (and to the state, where the forward pass could not
        keep it); the gradient of gate ``i`` is ``-i scale <costate| G_i |state>``.
        Cost about 2.5-3 forward passes (see :data:`MAX_KEPT_BYTES`).
        """
        p = self._params(params)
        comp = self._compiled()
        angles = self._angles(p)
        psi, _ = to_view(psi0, self.space)
        lam, _ = to_view(phi, self.space)
        if lam.shape != psi.shape:
            raise ValueError(f"phi shape {lam.shape} differs from psi0 shape {psi.shape}")
        nb = psi.shape[0]
        kernel = self._kernel(psi.size)
        if kernel is not None:
            # psi and lam are fresh copies (to_view): the kernel may overwrite them
            return kernel.run(angles, comp.index, comp.scale, comp.first, psi.reshape(nb, -1), lam.reshape(nb, -1),
                              p.size)
        fused = self._fused(psi.size)
        if fused is not None:
            # block-fused forward; overlaps from one transition matrix per block
            flat, steps, kept = fused.forward(angles, psi.reshape(nb, -1), keep=True)
            f = complex(np.vdot(lam, flat))
            need = np.zeros(steps.shape[0], dtype=bool)
            need[fused.block_of[comp.index < p.size]] = True
            ovs = fused.overlaps(steps, kept, lam.reshape(nb, -1), need)
            return f, self._scatter_gradient(comp, ovs, p.size)
        angles = angles.tolist()
        first = comp.first
        if psi.size > SMALL_STATE:
            f, ovs = self._adjoint_kept(angles, psi, lam, first)
            return f, self._scatter_gradient(comp, ovs, p.size)
        psi = self._forward(np.asarray(angles), psi)
        f = complex(np.vdot(lam, psi))
        # state and costate stacked on the batch axis: one un-apply per gate
        work = np.concatenate([psi, lam])
        del psi, lam
        # per-gate overlaps <lam_i|G_i|psi_i>, scattered onto the parameters at the end
        ovs = np.zeros(len(self.ops), dtype=np.complex128)
        flat = work.reshape(work.shape[0], -1)
        plans = self._plans()
        angle_array = np.asarray(angles)
        for seg in reversed(self._segments()):
            if seg.stop <= first:
                break
            if seg.table is not None:
                # conj(lam) * psi is unchanged by the run's phases: one product gives all overlaps
                ovs[seg.start:seg.stop] = seg.table @ np.einsum("bi,bi->i", flat[nb:].conj(), flat[:nb])
                if seg.start > first:
                    flat *= np.exp(1j * (angle_array[seg.start:seg.stop] @ seg.table))
                continue
            i = seg.start
            gate, t = self.ops[i].gate, angles[i]
            if self.ops[i].index is not None:
                ovs[i], flat = gate._overlap_unapply(flat, nb, t, plans[i], i > first)
            elif i > first:
                flat = gate._apply_flat(flat, -t, plans[i])
        return f, self._scatter_gradient(comp, ovs, p.size)

    def _adjoint_kept(
        self, angles: list[float], psi: np.ndarray, lam: np.ndarray, first: int
    ) -> tuple[complex, np.ndarray]:
        """Large-state adjoint method: ``f`` and the per-gate overlaps ``<lam_i|G_i|psi_i>``.

        The forward pass keeps, for the parametrised gates from ``first`` on, the
        pre-gate state as far as :data:`MAX_KEPT_BYTES` allows (pair gates keep only the
        slices they touch: 2/d of the state for a two-level rotation, 4/d^2 for MS).
        The backward pass then un-applies the costate alone over the kept gates; over
        the gates past the cap it un-applies state and costate (one sweep per gate
        gathers both, takes the overlap and writes both back).
        """
        ops, n = self.ops, len(self.ops)
        shape = self.space.shape
        forms = [op.gate._pair_form(shape) if self.space.register else None for op in ops]
        # plan what to keep, then one arena for it (one allocation, huge pages if any)
        sizes = [0] * n
        budget, cut = MAX_KEPT_BYTES, n  # gates >= cut are not kept
        for i in range(first, n):
            if ops[i].index is None:
                continue
            form = forms[i]
            need = form.nbytes(psi) if form is not None else psi.nbytes
            if need > budget:
                cut = i
                break
            budget -= need
            sizes[i] = need // psi.itemsize
        lock = self.__dict__.setdefault("_arena_lock", threading.Lock())
        owned = lock.acquire(blocking=False)
        try:
            arena = self._arena(sum(sizes)) if owned else np.empty(sum(sizes), dtype=np.complex128)
            return self._adjoint_run(angles, psi, lam, first, forms, sizes, cut, arena)
        finally:
            if owned:
                lock.release()

    def _adjoint_run(
        self,
        angles: list[float],
        psi: np.ndarray,
        lam: np.ndarray,
        first: int,
        forms: list,
        sizes: list[int],
        cut: int,
        arena: np.ndarray,
    ) -> tuple[complex, np.ndarray]:
        """Forward pass keeping slices in ``arena``, then the backward pass (see above)."""
        ops, n = self.ops, len(self.ops)
        starts = np.concatenate([[0], np.cumsum(sizes)]).tolist()
        kept = [arena[starts[i] : starts[i + 1]] if sizes[i] else None for i in range(n)]
        slice_max = max([f.slice_size(psi) for f in forms if f is not None] + [1])
        tmp = np.empty(6 * slice_max, dtype=np.complex128)
        for i in range(n):
            op, t, form = ops[i], angles[i], forms[i]
            if kept[i] is not None:
                if form is not None:
                    psi = pairs_apply(form, psi, t, keep=kept[i], tmp=tmp)
                    continue
                np.copyto(kept[i], psi.reshape(-1))
            psi = op.gate.apply(psi, t) if form is None else pairs_apply(form, psi, t, tmp=tmp)
        f = complex(np.vdot(lam, psi))
        ovs = np.zeros(n, dtype=np.complex128)
        for i in range(n - 1, first - 1, -1):
            op, t, form = ops[i], angles[i], forms[i]
            unapply = i > first
            if i >= cut:
                live = i > cut  # state still needed below this gate
                if op.index is None:
                    if live:
                        psi = op.gate.apply(psi, -t) if form is None else pairs_apply(form, psi, -t, tmp=tmp)
                elif form is not None:
                    ovs[i] = pairs_backward(form, lam, t, unapply, tmp, psi=psi, unapply_psi=live)
                    continue
                else:
                    ovs[i] = op.gate.generator_overlap(lam, psi)
                    if live:
                        psi = op.gate.apply(psi, -t)
            elif form is not None and op.index is not None:
                ovs[i] = pairs_backward(form, lam, t, unapply, tmp, kept=kept[i])
                kept[i] = None
                continue
            elif op.index is not None:
                lam = np.ascontiguousarray(op.gate.apply(lam, -t))
                ovs[i] = op.gate.generator_overlap(lam, kept[i].reshape(lam.shape))
                kept[i] = None
                continue
            if unapply:
                lam = op.gate.apply(lam, -t) if form is None else pairs_apply(form, lam, -t, tmp=tmp)
                lam = np.ascontiguousarray(lam)
        return f, ovs

    def _arena(self, size: int) -> np.ndarray:
        """Buffer for the kept forward-pass slices, reused between calls (caller holds
        ``_arena_lock``).

        Touching fresh memory (page faults) costs about as much as a gate, so the
        buffer stays with the circuit (at most :data:`MAX_KEPT_BYTES`) until it is
        dropped or a call needs a larger one.  A call made while another holds the
        buffer (threads) uses a private one.
        """
        buf = self.__dict__.get("_arena_buf")
        if buf is None or buf.size < size:
            self._arena_buf = None
            buf = self._arena_buf = np.empty(size, dtype=np.complex128)
        return buf[:size]

    @staticmethod
    def _scatter_gradient(comp: _Compiled, ovs: np.ndarray, n: int) -> np.ndarray:
        """``df/dparams = sum_i -i scale_i ovs_i`` over the gates bound to each parameter."""
        w = -1j * comp.scale * ovs
        re = np.bincount(comp.index, weights=w.real, minlength=n + 1)
        im = np.bincount(comp.index, weights=w.imag, minlength=n + 1)
        return (re + 1j * im)[:n]

    def fidelity_and_gradient(
        self, params: Sequence[float] | None, psi0: np.ndarray, phi: np.ndarray
    ) -> tuple[float, np.ndarray]:
        """``F = |<phi|C(params)|psi0>|^2`` and its real gradient ``2 Re(conj(f) df)``."""
        f, df = self.overlap_and_gradient(params, psi0, phi)
        return abs(f) ** 2, 2.0 * np.real(np.conj(f) * df)

    def unitary(self, params: Sequence[float] | None) -> np.ndarray:
        """Dense ``dim x dim`` matrix of the circuit (small spaces only; tests)."""
        eye = np.eye(self.space.dim, dtype=np.complex128)
        with single_threaded_blas():  # many small products: threads only contend (see fluxline_threads)
            return self.apply(params, eye).T
