"""Fused evaluation of small register circuits (internal to :mod:`circuits.circuit`).

For small registers the cost of a circuit is the number of numpy calls, not the
arithmetic.  Consecutive gates are therefore grouped into *blocks* acting on ``kb``
qudits (``kb = 2`` unless a gate is wider), and every block is applied as one dense
``D x D`` matrix, ``D = d**kb``:

* grouping (once per op list): a gate joins the most recent block if the union of
  qudits fits in ``kb``, else the most recent block among its qudits' last blocks if
  that fits, else it opens a new block.  A gate moved into an earlier block only
  commutes past blocks on other qudits, so the product is unchanged;
* each gate's generator is embedded into its block (``D x D``) and diagonalised once,
  so all gate matrices ``V e^{-i t w} V^dag`` come from one batched product per call;
* prefix products ``P_i = E_i ... E_1`` of every block are formed position by position,
  vectorised over the blocks (blocks padded with identities);
* the adjoint gradient needs one transition matrix per block:
  with ``X_b = sum_rest psi_in lam_in^dag`` (state and costate before the block),
  ``<lam_i|G_i|psi_i> = Tr(G_i P_i X_b P_i^dag)`` for every gate ``i`` of block ``b``.
  The block inputs ``psi_in`` are kept from the forward pass (small states only), so the
  backward pass un-applies the costate alone.
"""
from __future__ import annotations

from typing import Sequence

import numpy as np

from .gates import Gate
from .register import embed_local

__all__ = ["FusedRegisterCircuit"]


def _group(gates: Sequence[Gate], kb: int) -> list[tuple[list[int], list[int]]]:
    """Blocks ``(qudits, gate positions)`` in application order (see module docstring)."""
    blocks: list[tuple[list[int], list[int]]] = []
    latest: dict[int, int] = {}
    for pos, gate in enumerate(gates):
        qs = list(gate.qudits)
        touched = [latest[q] for q in qs if q in latest]
        target = -1
        for cand in ([len(blocks) - 1] if blocks else []) + ([max(touched)] if touched else []):
            if len(set(blocks[cand][0]) | set(qs)) <= kb:
                target = cand
                break
        if target < 0:
            blocks.append(([], []))
            target = len(blocks) - 1
        bq, bg = blocks[target]
        bq += [q for q in qs if q not in bq]
        bg.append(pos)
        for q in qs:
            latest[q] = target
    return blocks


class FusedRegisterCircuit:
    """Block-fused form of a list of register gates on ``(d,) * K``.

    Parameters
    ----------
    gates
        Gates in application order (each ``exp(-i t G)`` with a local ``G``).
    shape
        Register shape ``(d,) * K``.
    """

    def __init__(self, gates: Sequence[Gate], shape: tuple[int, ...]) -> None:
        n_q, d = len(shape), shape[0]
        width = max((len(g.qudits) for g in gates), default=1)
        kb = min(n_q, max(2, width))
        self.n_gates, self.D = len(gates), d**kb
        blocks = _group(gates, kb)
        levels = np.indices(shape).reshape(n_q, -1)
        dim = levels.shape[1]
        n_b = len(blocks)
        maxlen = max((len(bg) for _, bg in blocks), default=1)
        gens = np.zeros((self.n_gates + 1, self.D, self.D), dtype=np.complex128)  # last: identity pad
        self.block_of = np.zeros(self.n_gates, dtype=np.intp)
        self.slot_of = np.zeros(self.n_gates, dtype=np.intp)
        self.pad = np.full((n_b, maxlen), self.n_gates, dtype=np.intp)
        self.idx: list[np.ndarray] = []
        for b, (bq, bg) in enumerate(blocks):
            bq = bq + [q for q in range(n_q) if q not in bq][: kb - len(bq)]  # pad to kb qudits
            rest = [q for q in range(n_q) if q not in bq]
            a = np.ravel_multi_index(tuple(levels[bq]), (d,) * kb)
            r = np.ravel_multi_index(tuple(levels[rest]), (d,) * len(rest)) if rest else np.zeros(dim, np.intp)
            idx = np.empty((self.D, dim // self.D), dtype=np.intp)
            idx[a, r] = np.arange(dim)
            self.idx.append(idx)
            for slot, pos in enumerate(bg):
                g = gates[pos]
                where = [bq.index(q) for q in g.qudits]
                gens[pos] = embed_local(np.asarray(g.generator(), dtype=np.complex128), where, kb, d)
                self.block_of[pos], self.slot_of[pos] = b, slot
                self.pad[b, slot] = pos
        self.gens = gens[:-1]
        self.w, self.v = np.linalg.eigh(gens)
        self.vh = np.ascontiguousarray(np.conj(np.swapaxes(self.v, 1, 2)))

    def prefix(self, angles: np.ndarray) -> np.ndarray:
        """Prefix products ``(n_blocks, maxlen, D, D)``; ``[:, -1]`` are the block unitaries."""
        t = np.append(angles, 0.0)
        mats = np.matmul(self.v * np.exp(-1j * t[:, None] * self.w)[:, None, :], self.vh)
        steps = mats[self.pad]
        for p in range(1, steps.shape[1]):
            np.matmul(steps[:, p], steps[:, p - 1], out=steps[:, p])
        return steps

    def forward(
        self, angles: np.ndarray, flat: np.ndarray, keep: bool = False
    ) -> tuple[np.ndarray, np.ndarray, list[np.ndarray]]:
        """Apply all blocks to ``flat`` ``(B, dim)`` in place.

        Returns it, the prefixes and (``keep=True``) each block's input state gathered in
        block layout ``(B, D, R)``, which the gradient reuses instead of un-applying.
        """
        steps = self.prefix(angles)
        kept: list[np.ndarray] = []
        for u, idx in zip(steps[:, -1], self.idx):
            g = flat[:, idx]
            flat[:, idx] = np.matmul(u, g)
            if keep:
                kept.append(g)
        return flat, steps, kept

    def overlaps(
        self, steps: np.ndarray, kept: list[np.ndarray], lam: np.ndarray, need: np.ndarray
    ) -> np.ndarray:
        """``<lam_i|G_i|psi_i>`` of every gate; ``lam`` ``(B, dim)`` is the target (overwritten).

        ``kept`` are the block inputs from :meth:`forward`; ``need[b]`` is False for blocks
        whose gates need no overlap.  The costate is un-applied block by block from the
        last down to the first block that needs an overlap.
        """
        todo = np.flatnonzero(need)
        if todo.size == 0:
            return np.zeros(self.n_gates, dtype=np.complex128)
        xs = np.zeros((len(self.idx), self.D, self.D), dtype=np.complex128)
        for b in range(len(self.idx) - 1, todo[0] - 1, -1):
            idx = self.idx[b]
            y = np.matmul(steps[b, -1].conj().T, lam[:, idx])
            lam[:, idx] = y
            if need[b]:
                # X_b = sum_{batch, rest} psi_in lam_in^dag
                g = kept[b]
                if g.shape[0] == 1:
                    xs[b] = g[0] @ y[0].conj().T
                else:
                    n = g.shape[0] * g.shape[2]
                    xs[b] = g.transpose(1, 0, 2).reshape(self.D, n) @ y.transpose(1, 0, 2).reshape(self.D, n).conj().T
        p = steps[self.block_of, self.slot_of]
        y = np.matmul(np.matmul(p, xs[self.block_of]), np.conj(np.swapaxes(p, 1, 2)))
        return np.einsum("gab,gba->g", self.gens, y)
