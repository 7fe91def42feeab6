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

__all__ = ["HAVE_NUMBA", "KernelProgram", "NotLowerable"]

#: numba is a core dependency; without it (or with FLUXLINE_NO_NUMBA set) the numpy paths run.
HAVE_NUMBA = importlib.util.find_spec("numba") is not None and not os.environ.get("FLUXLINE_NO_NUMBA")

PAIR, DIAG, DENSE, PAIRGEN = 0, 1, 2, 3

_COMPILED: dict = {}
_LOCK = threading.Lock()


def _jit(name: str):
    """The numba-compiled function ``name`` of this module (compiled or loaded from the on-disk
    cache on first use)."""
    with _LOCK:
        if name not in _COMPILED:
            import numba

            jitted = {}
            for fn in ("_apply_gate", "_overlap_unapply", "_entry"):
                globals()[fn + "_jit"] = jitted[fn] = numba.njit(nogil=True, cache=True)(globals()[fn + "_py"])
            _COMPILED.update(jitted)
        return _COMPILED[name]


# The kernels below are written for numba (plain Python loops over amplitudes); ``*_py`` are the
# undecorated sources, ``*_jit`` their compiled forms (bound by :func:`_jit`). ``prog`` is the
# tuple :attr:`KernelProgram.arrays`.

def _apply_gate_py(g, t, x, prog, buf):  # pragma: no cover - jitted
    """``U_g(t)`` on every row of ``x`` (B, dim) in place."""
    (kinds, freq, gain, p_lo, p_hi, pa, pb, pw, pf, d_lo, d_tab, didx, dtab, e_lo, e_dim, i_lo,
     ew, ev, eg, gidx) = prog
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
    elif kind == 3:
        for p in range(p_lo[g], p_hi[g]):
            i0, i1 = pa[p], pb[p]
            mu, r, nz, no = pf[3 * p], pf[3 * p + 1], pf[3 * p + 2], pw[p]
            ph = np.cos(t * mu) - 1j * np.sin(t * mu)
            q = -1j * np.sin(t * r) * ph
            pc = np.cos(t * r) * ph
            qz = q * nz
            m00, m01, m10, m11 = pc + qz, q * no, q * np.conj(no), pc - qz
            for b in range(nb):
                x0, x1 = x[b, i0], x[b, i1]
                x[b, i0] = m00 * x0 + m01 * x1
                x[b, i1] = m10 * x0 + m11 * x1
        lo, t0 = d_lo[g], d_tab[g]
        for j in range(d_tab[g + 1] - t0):
            v = dtab[t0 + j] * t
            ph = np.cos(v) - 1j * np.sin(v)
            i = didx[lo + j]
            for b in range(nb):
                x[b, i] *= ph
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


def _overlap_unapply_py(g, t, psi, lam, unapply, prog, buf):  # pragma: no cover - jitted
    """``sum_b <lam_b|G_g|psi_b>``, then (``unapply``) ``U_g(-t)`` on ``psi`` and ``lam``."""
    (kinds, freq, gain, p_lo, p_hi, pa, pb, pw, pf, d_lo, d_tab, didx, dtab, e_lo, e_dim, i_lo,
     ew, ev, eg, gidx) = prog
    nb = psi.shape[0]
    kind = kinds[g]
    ov = 0j
    if kind == 0:  # overlap and un-apply in one sweep
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
    if kind == 3:
        for p in range(p_lo[g], p_hi[g]):
            i0, i1 = pa[p], pb[p]
            mu, r, nz = pf[3 * p], pf[3 * p + 1], pf[3 * p + 2]
            h00, h11, h01 = mu + r * nz, mu - r * nz, r * pw[p]
            for b in range(nb):
                x0, x1 = psi[b, i0], psi[b, i1]
                ov += (np.conj(lam[b, i0]) * (h00 * x0 + h01 * x1)
                       + np.conj(lam[b, i1]) * (np.conj(h01) * x0 + h11 * x1))
        lo, t0 = d_lo[g], d_tab[g]
        for j in range(d_tab[g + 1] - t0):
            i = didx[lo + j]
            for b in range(nb):
                ov += np.conj(lam[b, i]) * dtab[t0 + j] * psi[b, i]
    else:
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
        _apply_gate_jit(g, -t, psi, prog, buf)
        _apply_gate_jit(g, -t, lam, prog, buf)
    return ov


def _entry_py(gradient, angles, index, scale, first, psi, lam, grad, ints, oi, floats, of, cplx, oc,
              buf):  # pragma: no cover - jitted
    """One call per evaluation (numba's dispatch costs per argument): the forward pass on ``psi``;
    with ``gradient`` also ``f = sum <lam|psi>`` (returned) and the backward pass, the overlaps
    scattered onto ``grad[index[g]] += -i scale[g] <lam_g|G_g|psi_g>`` (fixed gates have
    ``index = len(grad) - 1``, a dump slot)."""
    prog = (ints[oi[0]:oi[1]], floats[of[0]:of[1]], floats[of[1]:of[2]], ints[oi[1]:oi[2]], ints[oi[2]:oi[3]],
            ints[oi[3]:oi[4]], ints[oi[4]:oi[5]], cplx[oc[0]:oc[1]], floats[of[2]:of[3]], ints[oi[5]:oi[6]],
            ints[oi[6]:oi[7]], ints[oi[7]:oi[8]], floats[of[3]:of[4]], ints[oi[8]:oi[9]], ints[oi[9]:oi[10]],
            ints[oi[10]:oi[11]], floats[of[4]:of[5]], cplx[oc[1]:oc[2]], cplx[oc[2]:oc[3]], ints[oi[11]:oi[12]])
    n = prog[0].size
    for g in range(n):
        _apply_gate_jit(g, angles[g], psi, prog, buf)
    if not gradient:
        return 0j
    f = 0j
    for b in range(psi.shape[0]):
        for i in range(psi.shape[1]):
            f += np.conj(lam[b, i]) * psi[b, i]
    dump = grad.size - 1
    for g in range(n - 1, first - 1, -1):
        more = g > first
        if index[g] != dump:
            ov = _overlap_unapply_jit(g, angles[g], psi, lam, more, prog, buf)
            grad[index[g]] += -1j * scale[g] * ov
        elif more:
            _apply_gate_jit(g, -angles[g], psi, prog, buf)
            _apply_gate_jit(g, -angles[g], lam, prog, buf)
    return f


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


def _pack(arrays: list[np.ndarray], dtype) -> tuple[np.ndarray, np.ndarray]:
    """``arrays`` concatenated (as ``dtype``) and their boundaries."""
    bounds = np.zeros(len(arrays) + 1, dtype=np.int64)
    bounds[1:] = np.cumsum([a.size for a in arrays])
    return np.concatenate([np.asarray(a, dtype=dtype) for a in arrays]), bounds


class NotLowerable(ValueError):
    """A gate the kernel has no form for (the circuit keeps its numpy paths)."""


class KernelProgram:
    """A gate list lowered to the flat arrays of the compiled kernel.

    Parameters
    ----------
    gates
        Gates in application order (each ``exp(-i t G)``).
    shape
        Register shape ``(d,) * K``, or ``(dim,)`` in subspace mode (``register=False``), where
        only gates with a diagonal or two-state generator (:meth:`SparseGeneratorGate.two_state_form`)
        are lowered.

    Raises
    ------
    NotLowerable
        For a gate without a kernel form.
    """

    def __init__(self, gates: Sequence, shape: tuple[int, ...], register: bool = True) -> None:
        from .gates import DiagonalGate

        n = len(gates)
        dim = int(np.prod(shape, dtype=np.int64))
        levels = np.indices(shape).reshape(len(shape), -1) if register else None
        self.dim = dim
        kinds = np.zeros(n, dtype=np.int64)
        freq, gain = np.zeros(n), np.zeros(n)
        p_lo, p_hi = np.zeros(n, dtype=np.int64), np.zeros(n, dtype=np.int64)
        d_lo, d_tab = np.zeros(n, dtype=np.int64), np.zeros(n + 1, dtype=np.int64)
        e_lo, e_dim, i_lo = (np.zeros(n, dtype=np.int64) for _ in range(3))
        parts: dict[str, list] = {k: [] for k in ("pa", "pb", "pw", "pf", "didx", "dtab", "ew", "ev", "eg", "gidx")}
        count = dict(pair=0, didx=0, tab=0, eig=0, gidx=0)
        widest = 1

        def pairs(a, b, w, f=None) -> None:
            p_lo[g], p_hi[g] = count["pair"], count["pair"] + a.size
            parts["pa"].append(a)
            parts["pb"].append(b)
            parts["pw"].append(w)
            parts["pf"].append(np.zeros(3 * a.size) if f is None else f)
            count["pair"] += a.size

        def table(idx, values) -> None:
            d_lo[g] = count["didx"]
            parts["didx"].append(idx)
            count["didx"] += idx.size
            parts["dtab"].append(values)
            count["tab"] += values.size

        for g, gate in enumerate(gates):
            d_tab[g] = count["tab"]
            if not register:
                form = getattr(gate, "two_state_form", lambda: None)()
                if getattr(gate, "is_diagonal", False) and hasattr(gate, "h"):
                    kinds[g] = DIAG
                    table(np.arange(dim), np.asarray(gate.h, dtype=np.float64))
                    widest = max(widest, dim)
                elif form is not None:
                    kinds[g] = PAIRGEN
                    single, h, first, second, h00, h11, h01 = form
                    mu, half = 0.5 * (h00 + h11), 0.5 * (h00 - h11)
                    r = np.sqrt(half ** 2 + np.abs(h01) ** 2)
                    pairs(first, second, h01 / r, np.column_stack([mu, r, half / r]).ravel())
                    table(single, h)
                else:
                    raise NotLowerable(f"{type(gate).__name__} in subspace mode")
                d_tab[g + 1] = count["tab"]
                continue
            if isinstance(gate, DiagonalGate):
                kinds[g] = DIAG
                table(np.ravel_multi_index(tuple(levels[q] for q in gate.qudits), gate.h.shape), gate.h.ravel())
                d_tab[g + 1] = count["tab"]
                widest = max(widest, gate.h.size)
                continue
            d_tab[g + 1] = count["tab"]
            lowered = _pair_lowering(gate, shape)
            if lowered is not None:
                a, b, w, freq[g], gain[g] = lowered
                kinds[g] = PAIR
                pairs(a, b, w)
                continue
            kinds[g] = DENSE
            qs, d = list(gate.qudits), shape[0]
            D = d ** len(qs)
            gen = np.asarray(gate.generator(), dtype=np.complex128)
            w, v = np.linalg.eigh(gen)
            e_lo[g], e_dim[g] = count["eig"], D
            parts["ew"].append(np.concatenate([w, np.zeros(D * D - D)]))  # eigenvalues at e_lo .. e_lo + D
            parts["ev"].append(v.ravel())
            parts["eg"].append(gen.ravel())
            count["eig"] += D * D
            rest = [q for q in range(len(shape)) if q not in qs]
            loc = np.ravel_multi_index(tuple(levels[qs]), (d,) * len(qs))
            rr = np.ravel_multi_index(tuple(levels[rest]), (d,) * len(rest)) if rest else np.zeros(dim, np.intp)
            groups = np.empty((dim // D, D), dtype=np.int64)
            groups[rr, loc] = np.arange(dim)
            i_lo[g] = count["gidx"]
            parts["gidx"].append(groups.ravel())
            count["gidx"] += dim
            widest = max(widest, D * D + D)

        def cat(name, dtype):
            return np.concatenate(parts[name]).astype(dtype) if parts[name] else np.zeros(1, dtype=dtype)

        self.arrays = (kinds, freq, gain, p_lo, p_hi, cat("pa", np.int64), cat("pb", np.int64),
                       cat("pw", np.complex128), cat("pf", np.float64), d_lo, d_tab, cat("didx", np.int64),
                       cat("dtab", np.float64), e_lo, e_dim, i_lo, cat("ew", np.float64), cat("ev", np.complex128),
                       cat("eg", np.complex128), cat("gidx", np.int64))
        self.widest = widest
        (kinds_, freq_, gain_, p_lo_, p_hi_, pa_, pb_, pw_, pf_, d_lo_, d_tab_, didx_, dtab_, e_lo_, e_dim_, i_lo_,
         ew_, ev_, eg_, gidx_) = self.arrays
        self.packed = (_pack([kinds_, p_lo_, p_hi_, pa_, pb_, d_lo_, d_tab_, didx_, e_lo_, e_dim_, i_lo_, gidx_], np.int64)
                       + _pack([freq_, gain_, pf_, dtab_, ew_], np.float64) + _pack([pw_, ev_, eg_], np.complex128))

    def run(self, angles: np.ndarray, index: np.ndarray, scale: np.ndarray, first: int, psi: np.ndarray,
            lam: np.ndarray | None, n_params: int) -> tuple[complex, np.ndarray | None]:
        """Forward pass on ``psi`` (``(B, dim)`` C-contiguous complex, in place); with a target
        ``lam`` (overwritten) also ``f = sum_b <lam_b|C|psi_b>`` and the complex gradient
        ``df/dparams`` (``index``: parameter of each gate, ``n_params`` for fixed gates;
        ``scale``: the gates' parameter scales; ``first``: first parameter-bound gate)."""
        gradient = lam is not None
        grad = np.zeros(n_params + 1, dtype=np.complex128)
        f = _jit("_entry")(gradient, np.ascontiguousarray(angles, dtype=np.float64), index, scale, first, psi,
                           psi if lam is None else lam, grad, *self.packed, self._buf())
        return complex(f), (grad[:n_params] if gradient else None)

    def _buf(self) -> np.ndarray:
        return np.empty(self.widest, dtype=np.complex128)
