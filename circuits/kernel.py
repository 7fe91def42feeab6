"""Compiled evaluation of register circuits (internal to :mod:`circuits.circuit`).

For the small registers of step-by-step fits the cost of a circuit is the number of numpy
calls, not the arithmetic: a 243-amplitude state through 192 gates costs a few hundred
floating-point operations per gate. This module lowers a gate list once to flat arrays and
runs it in one numba kernel per call:

* *pair* gates (two-level rotations, Mølmer–Sørensen): the same 2 × 2 rotation on pairs of
  amplitudes, ``(a, b) -> (c a - i s w b, -i s conj(w) a + c b)`` with ``c, s = cos, sin(freq t)``
  and generator ``gain [[0, w], [conj(w), 0]]`` on each pair (``|w| = 1``);
* *diagonal* gates: ``exp(-i t h)`` with the ``d**k`` table values indexed per amplitude;
* *dense* gates (any other local generator): ``V e^{-i t w} V^dag`` on gathered
  ``d**k``-amplitude groups.

The adjoint gradient runs the forward pass, then walks the gates backwards un-applying the
state and the costate together (two vectors in memory, one sweep per gate); the overlap of
gate ``i`` is ``<lam_i|G_i|psi_i>`` with both after the gate (``G`` commutes with ``U``).
Batches ``(B, dim)`` are summed (a trace), as everywhere in the engine.

Without numba (``HAVE_NUMBA`` False, or ``FLUXLINE_NO_NUMBA`` set) the engine keeps its numpy
paths.
"""
from __future__ import annotations

import importlib.util
import os
import threading
from typing import Sequence

import numpy as np

__all__ = ["HAVE_NUMBA", "KernelProgram"]

#: numba is a core dependency; without it (or with FLUXLINE_NO_NUMBA set) the numpy paths run.
HAVE_NUMBA = importlib.util.find_spec("numba") is not None and not os.environ.get("FLUXLINE_NO_NUMBA")

PAIR, DIAG, DENSE = 0, 1, 2

_COMPILED: dict = {}
_LOCK = threading.Lock()


def _jit(name: str):
    """The numba-compiled function ``name`` of this module (compiled or loaded from the on-disk
    cache on first use)."""
    with _LOCK:
        if name not in _COMPILED:
            import numba

            jitted = {}
            for fn in ("_apply_gate", "_overlap_unapply", "_forward_kernel", "_adjoint_kernel"):
                globals()[fn + "_jit"] = jitted[fn] = numba.njit(nogil=True, cache=True)(globals()[fn + "_py"])
            _COMPILED.update(jitted)
        return _COMPILED[name]


# The kernels below are written for numba (plain Python loops over amplitudes); ``*_py`` are the
# undecorated sources, ``*_jit`` their compiled forms (bound by :func:`_jit`).

def _apply_gate_py(g, t, x, kinds, freq, p_lo, p_hi, pa, pb, pw, d_lo, d_tab, didx, dtab,
                   e_lo, e_dim, i_lo, ew, ev, gidx, buf):  # pragma: no cover - jitted
    """``U_g(t)`` on every row of ``x`` (B, dim) in place."""
    nb = x.shape[0]
    kind = kinds[g]
    if kind == 0:
        c = np.cos(freq[g] * t)
        s = np.sin(freq[g] * t)
        for p in range(p_lo[g], p_hi[g]):
            ia, ib = pa[p], pb[p]
            mab = -1j * s * pw[p]
            mba = -1j * s * np.conj(pw[p])
            for b in range(nb):
                xa, xb = x[b, ia], x[b, ib]
                x[b, ia] = c * xa + mab * xb
                x[b, ib] = mba * xa + c * xb
    elif kind == 1:
        n_tab = d_tab[g + 1] - d_tab[g]
        for j in range(n_tab):
            v = dtab[d_tab[g] + j] * t
            buf[j] = np.cos(v) - 1j * np.sin(v)
        lo = d_lo[g]
        dim = x.shape[1]
        for b in range(nb):
            for i in range(dim):
                x[b, i] *= buf[didx[lo + i]]
    else:
        D = e_dim[g]
        lo = e_lo[g]
        # U = V diag(e^{-i t w}) V^dag into buf[:D*D]
        for a in range(D):
            for c2 in range(D):
                acc = 0j
                for k in range(D):
                    v = ew[lo + k] * t
                    acc += ev[lo + a * D + k] * (np.cos(v) - 1j * np.sin(v)) * np.conj(ev[lo + c2 * D + k])
                buf[a * D + c2] = acc
        R = x.shape[1] // D
        il = i_lo[g]
        tmp = buf[D * D: D * D + D]
        for b in range(nb):
            for r in range(R):
                for a in range(D):
                    acc = 0j
                    for c2 in range(D):
                        acc += buf[a * D + c2] * x[b, gidx[il + r * D + c2]]
                    tmp[a] = acc
                for a in range(D):
                    x[b, gidx[il + r * D + a]] = tmp[a]


def _overlap_unapply_py(g, t, psi, lam, unapply, kinds, freq, gain, p_lo, p_hi, pa, pb, pw, d_lo, d_tab,
                        didx, dtab, e_lo, e_dim, i_lo, ew, ev, eg, gidx, buf):  # pragma: no cover - jitted
    """``sum_b <lam_b|G_g|psi_b>``, then (``unapply``) ``U_g(-t)`` on ``psi`` and ``lam``."""
    nb = psi.shape[0]
    kind = kinds[g]
    ov = 0j
    if kind == 0:
        c = np.cos(freq[g] * t)
        s = np.sin(freq[g] * t)
        for p in range(p_lo[g], p_hi[g]):
            ia, ib = pa[p], pb[p]
            w = pw[p]
            wc = np.conj(w)
            mab = 1j * s * w
            mba = 1j * s * wc
            for b in range(nb):
                xa, xb = psi[b, ia], psi[b, ib]
                la, lb = lam[b, ia], lam[b, ib]
                ov += np.conj(la) * w * xb + np.conj(lb) * wc * xa
                if unapply:
                    psi[b, ia] = c * xa + mab * xb
                    psi[b, ib] = mba * xa + c * xb
                    lam[b, ia] = c * la + mab * lb
                    lam[b, ib] = mba * la + c * lb
        return gain[g] * ov
    if kind == 1:
        lo = d_lo[g]
        t0 = d_tab[g]
        n_tab = d_tab[g + 1] - t0
        for j in range(n_tab):
            v = dtab[t0 + j] * t
            buf[j] = np.cos(v) + 1j * np.sin(v)
        dim = psi.shape[1]
        for b in range(nb):
            for i in range(dim):
                j = didx[lo + i]
                x = psi[b, i]
                lv = lam[b, i]
                ov += np.conj(lv) * dtab[t0 + j] * x
                if unapply:
                    psi[b, i] = x * buf[j]
                    lam[b, i] = lv * buf[j]
        return ov
    D = e_dim[g]
    lo = e_lo[g]
    R = psi.shape[1] // D
    il = i_lo[g]
    for b in range(nb):
        for r in range(R):
            for a in range(D):
                acc = 0j
                for c2 in range(D):
                    acc += eg[lo + a * D + c2] * psi[b, gidx[il + r * D + c2]]
                ov += np.conj(lam[b, gidx[il + r * D + a]]) * acc
    if unapply:
        _apply_gate_jit(g, -t, psi, kinds, freq, p_lo, p_hi, pa, pb, pw, d_lo, d_tab, didx, dtab,
                        e_lo, e_dim, i_lo, ew, ev, gidx, buf)
        _apply_gate_jit(g, -t, lam, kinds, freq, p_lo, p_hi, pa, pb, pw, d_lo, d_tab, didx, dtab,
                        e_lo, e_dim, i_lo, ew, ev, gidx, buf)
    return ov


def _forward_kernel_py(angles, x, kinds, freq, p_lo, p_hi, pa, pb, pw, d_lo, d_tab, didx, dtab,
                       e_lo, e_dim, i_lo, ew, ev, gidx, buf):  # pragma: no cover - jitted
    for g in range(kinds.size):
        _apply_gate_jit(g, angles[g], x, kinds, freq, p_lo, p_hi, pa, pb, pw, d_lo, d_tab, didx, dtab,
                        e_lo, e_dim, i_lo, ew, ev, gidx, buf)


def _adjoint_kernel_py(angles, bound, first, psi, lam, ovs, kinds, freq, gain, p_lo, p_hi, pa, pb, pw,
                       d_lo, d_tab, didx, dtab, e_lo, e_dim, i_lo, ew, ev, eg, gidx,
                       buf):  # pragma: no cover - jitted
    """Backward pass from the final state ``psi`` and the target ``lam`` (both overwritten);
    ``ovs[g]`` receives ``<lam_g|G_g|psi_g>`` for the parameter-bound gates from ``first`` on."""
    for g in range(kinds.size - 1, first - 1, -1):
        more = g > first
        if bound[g]:
            ovs[g] = _overlap_unapply_jit(g, angles[g], psi, lam, more, kinds, freq, gain, p_lo, p_hi, pa, pb,
                                          pw, d_lo, d_tab, didx, dtab, e_lo, e_dim, i_lo, ew, ev, eg, gidx, buf)
        elif more:
            _apply_gate_jit(g, -angles[g], psi, kinds, freq, p_lo, p_hi, pa, pb, pw, d_lo, d_tab, didx, dtab,
                            e_lo, e_dim, i_lo, ew, ev, gidx, buf)
            _apply_gate_jit(g, -angles[g], lam, kinds, freq, p_lo, p_hi, pa, pb, pw, d_lo, d_tab, didx, dtab,
                            e_lo, e_dim, i_lo, ew, ev, gidx, buf)


def _pair_lowering(gate, shape: tuple[int, ...]):
    """(first members, second members, weights w, freq, gain) of a gate's pair form, or None."""
    form = gate._pair_form(shape)
    if form is None or any(abs(abs(w) - 1.0) > 1e-12 for _, _, w in form.pairs):
        return None  # the kernel's closed form needs unit weights
    dim = int(np.prod(shape, dtype=np.int64))
    flat = np.arange(dim).reshape(form.shape)
    first, second, weights = [], [], []
    for ia, ib, w in form.pairs:
        a, b = flat[ia].ravel(), flat[ib].ravel()
        first.append(a)
        second.append(b)
        weights.append(np.full(a.size, w, dtype=np.complex128))
    return np.concatenate(first), np.concatenate(second), np.concatenate(weights), form.freq, form.gain


class KernelProgram:
    """A register gate list lowered to the flat arrays of the compiled kernel.

    Parameters
    ----------
    gates
        Gates in application order (each ``exp(-i t G)`` with a local ``G``).
    shape
        Register shape ``(d,) * K``.
    """

    def __init__(self, gates: Sequence, shape: tuple[int, ...]) -> None:
        from .gates import DiagonalGate

        n, n_q, d = len(gates), len(shape), shape[0]
        dim = int(np.prod(shape, dtype=np.int64))
        levels = np.indices(shape).reshape(n_q, -1)
        self.dim = dim
        kinds = np.zeros(n, dtype=np.int64)
        freq, gain = np.zeros(n), np.zeros(n)
        p_lo, p_hi = np.zeros(n, dtype=np.int64), np.zeros(n, dtype=np.int64)
        d_lo, d_tab = np.zeros(n, dtype=np.int64), np.zeros(n + 1, dtype=np.int64)
        e_lo, e_dim, i_lo = (np.zeros(n, dtype=np.int64) for _ in range(3))
        pa, pb, pw, didx, dtab, ew, ev, eg, gidx = ([] for _ in range(9))
        n_pair = n_didx = n_tab = n_eig = n_gidx = 0
        widest = 1
        for g, gate in enumerate(gates):
            d_tab[g + 1] = n_tab
            if isinstance(gate, DiagonalGate):
                kinds[g] = DIAG
                tidx = np.ravel_multi_index(tuple(levels[q] for q in gate.qudits), gate.h.shape)
                d_lo[g] = n_didx
                didx.append(tidx)
                n_didx += dim
                dtab.append(gate.h.ravel())
                n_tab += gate.h.size
                d_tab[g + 1] = n_tab
                widest = max(widest, gate.h.size)
                continue
            lowered = _pair_lowering(gate, shape)
            if lowered is not None:
                a, b, w, freq[g], gain[g] = lowered
                kinds[g] = PAIR
                p_lo[g], p_hi[g] = n_pair, n_pair + a.size
                pa.append(a)
                pb.append(b)
                pw.append(w)
                n_pair += a.size
                continue
            kinds[g] = DENSE
            qs = list(gate.qudits)
            D = d ** len(qs)
            gen = np.asarray(gate.generator(), dtype=np.complex128)
            w, v = np.linalg.eigh(gen)
            e_lo[g], e_dim[g] = n_eig, D
            ew.append(np.concatenate([w, np.zeros(D * D - D)]))  # eigenvalues at n_eig // D .. + D
            ev.append(v.ravel())
            eg.append(gen.ravel())
            n_eig += D * D
            rest = [q for q in range(n_q) if q not in qs]
            loc = np.ravel_multi_index(tuple(levels[qs]), (d,) * len(qs))
            r = np.ravel_multi_index(tuple(levels[rest]), (d,) * len(rest)) if rest else np.zeros(dim, np.intp)
            table = np.empty((dim // D, D), dtype=np.int64)
            table[r, loc] = np.arange(dim)
            i_lo[g] = n_gidx
            gidx.append(table.ravel())
            n_gidx += dim
            widest = max(widest, D * D + D)

        def cat(parts, dtype):
            return np.concatenate(parts).astype(dtype) if parts else np.zeros(1, dtype=dtype)

        self.arrays = (kinds, freq, p_lo, p_hi, cat(pa, np.int64), cat(pb, np.int64), cat(pw, np.complex128),
                       d_lo, d_tab, cat(didx, np.int64), cat(dtab, np.float64), e_lo, e_dim, i_lo,
                       cat(ew, np.float64), cat(ev, np.complex128))
        self.gain = gain
        self.eg = cat(eg, np.complex128)
        self.gidx = cat(gidx, np.int64)
        self.widest = widest

    def _buf(self) -> np.ndarray:
        return np.empty(self.widest, dtype=np.complex128)

    def forward(self, angles: np.ndarray, flat: np.ndarray) -> np.ndarray:
        """Apply the gates at ``angles`` to ``flat`` ``(B, dim)`` (C-contiguous complex, in place)."""
        _jit("_forward_kernel")(np.ascontiguousarray(angles, dtype=np.float64), flat, *self.arrays, self.gidx,
                                self._buf())
        return flat

    def overlap_and_overlaps(self, angles: np.ndarray, bound: np.ndarray, first: int, psi: np.ndarray,
                             phi: np.ndarray) -> tuple[complex, np.ndarray]:
        """``f = sum_b <phi_b|C|psi_b>`` and ``<lam_g|G_g|psi_g>`` of every gate (0 for gates
        before ``first`` and gates not bound to a parameter); ``psi`` and ``phi`` (C-contiguous
        complex ``(B, dim)``) are overwritten."""
        angles = np.ascontiguousarray(angles, dtype=np.float64)
        buf = self._buf()
        _jit("_forward_kernel")(angles, psi, *self.arrays, self.gidx, buf)
        f = complex(np.vdot(phi, psi))
        lam = phi
        ovs = np.zeros(self.arrays[0].size, dtype=np.complex128)
        (kinds, freq, p_lo, p_hi, pa, pb, pw, d_lo, d_tab, didx, dtab, e_lo, e_dim, i_lo, ew, ev) = self.arrays
        _jit("_adjoint_kernel")(angles, bound, first, psi, lam, ovs, kinds, freq, self.gain, p_lo, p_hi, pa, pb,
                                pw, d_lo, d_tab, didx, dtab, e_lo, e_dim, i_lo, ew, ev, self.eg, self.gidx, buf)
        return f, ovs
