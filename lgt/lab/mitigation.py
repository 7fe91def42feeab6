"""Mitigation of measured level strings: readout-confusion inversion and Gauss-law post-selection,
with bootstrap error bars.

Distributions over the register's level strings are arrays (B, d^K) in row-major code order
(qudit 0 most significant, ``docs/conventions.md §2``). Steps, for the counts at one time:

1. raw: the observables averaged over every shot as measured;
2. readout inversion: iterative Bayesian unfolding (D'Agostini, NIM A 362, 487 (1995); the
   EM algorithm of Shepp & Vardi, IEEE TMI 1, 113 (1982)) with the per-qudit response
   A[read, true] applied as a tensor product, p ← p ∘ Aᵀ(m / A p); it keeps p a probability
   distribution (non-negative, normalised) and converges to the maximum-likelihood estimate;
3. Gauss-law post-selection: strings whose implied occupations
   n_n = L_n − L_{n−1} − q_n + (1 − (−1)^n)/2 are not all in {0, 1} are removed and the rest
   renormalised;
4. error bars: the whole chain rerun on ``bootstrap`` multinomial resamples of the shots
   (Efron, Ann. Stat. 7, 1 (1979)); each error is the standard deviation over resamples.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from lgt.basis import occupations_from_levels
from lgt.model import ModelParams

__all__ = ["register_levels", "apply_response", "unfold", "StringObservables", "analyze_counts",
           "BOOTSTRAP_CHUNK"]

#: bootstrap resamples processed together (bounds memory at BOOTSTRAP_CHUNK × d^K floats)
BOOTSTRAP_CHUNK = 32


def register_levels(n_qudits: int, d: int) -> np.ndarray:
    """Level of every qudit in every register string, shape (d^K, K), row-major codes."""
    return np.indices((d,) * n_qudits).reshape(n_qudits, -1).T.astype(np.int16)


def apply_response(prob: np.ndarray, mats: Sequence[np.ndarray], transpose: bool = False) -> np.ndarray:
    """(⊗_q A_q) p for a batch p of shape (B, d^K) (Aᵀ with ``transpose``), one contraction per qudit."""
    K = len(mats)
    d = mats[0].shape[0]
    t = prob.reshape((prob.shape[0],) + (d,) * K)
    for q, a in enumerate(mats):
        m = a.T if transpose else a
        t = np.moveaxis(np.tensordot(m, t, axes=([1], [q + 1])), 0, q + 1)
    return np.ascontiguousarray(t).reshape(prob.shape)


def unfold(freq: np.ndarray, mats: Sequence[np.ndarray], iterations: int = 100, tol: float = 1e-10) -> np.ndarray:
    """Iterative Bayesian unfolding of measured frequencies (B, d^K) (rows sum to one)."""
    if all(np.allclose(a, np.eye(a.shape[0])) for a in mats):
        return freq.copy()
    p = 0.5 * freq + 0.5 / freq.shape[1]
    for _ in range(iterations):
        q = apply_response(p, mats)
        ratio = np.divide(freq, q, out=np.zeros_like(freq), where=q > 0)
        new = p * apply_response(ratio, mats, transpose=True)
        new /= new.sum(axis=1, keepdims=True)
        done = np.max(np.abs(new - p)) < tol
        p = new
        if done:
            break
    return p


@dataclass
class StringObservables:
    """Per-string values of the reported observables for one model.

    field : (K, d^K) electric field L_n of each string
    density : (d^K,) particle density ν of each string (from the implied occupations)
    physical : (d^K,) Gauss's law holds (every implied occupation in {0, 1})
    """

    field: np.ndarray
    density: np.ndarray
    physical: np.ndarray

    @classmethod
    def for_model(cls, params: ModelParams) -> "StringObservables":
        levels = register_levels(params.n_links, params.levels)
        occ = occupations_from_levels(levels, params).astype(float)
        odd = (np.arange(params.sites) % 2).astype(bool)
        density = np.where(odd[None, :], 1.0 - occ, occ).mean(axis=1)
        physical = np.all((occ == 0) | (occ == 1), axis=1)
        return cls((levels - params.spin).T.astype(float), density, physical)

    def values(self, prob: np.ndarray) -> dict[str, np.ndarray]:
        """Field (B, K) and density (B,) of distributions (B, d^K), each row renormalised."""
        norm = prob.sum(axis=1, keepdims=True)
        p = np.divide(prob, norm, out=np.zeros_like(prob), where=norm > 0)
        return {"electric_field": p @ self.field.T, "particle_density": p @ self.density}

    def postselect(self, prob: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(physical part of ``prob``, discarded weight per row)."""
        kept = prob * self.physical[None, :]
        return kept, prob.sum(axis=1) - kept.sum(axis=1)


def _chain(counts: np.ndarray, obs: StringObservables, mats, iterations: int) -> dict[str, np.ndarray]:
    total = counts.sum(axis=1, keepdims=True)
    freq = np.divide(counts, total, out=np.zeros_like(counts, dtype=float), where=total > 0)
    raw = obs.values(freq)
    kept, _ = obs.postselect(unfold(freq, mats, iterations))
    mitigated = obs.values(kept)
    _, discarded = obs.postselect(freq)
    return {"raw": raw, "mitigated": mitigated, "raw_discarded": discarded}


def analyze_counts(counts: np.ndarray, obs: StringObservables, mats: Sequence[np.ndarray], leaked: int = 0,
                   bootstrap: int = 200, iterations: int = 100, seed: int = 0) -> dict:
    """Raw and mitigated observables of one time's counts (d^K,), with bootstrap errors.

    ``leaked``: shots flagged as lost (heralded leakage), counted as discarded. Returns
    ``{"discarded_fraction", "shots", name: {"raw", "raw_error", "mitigated", "mitigated_error"}}``.
    """
    counts = np.asarray(counts, dtype=float)[None, :]
    n = int(counts.sum())
    point = _chain(counts, obs, mats, iterations)
    out: dict = {"shots": n + int(leaked),
                 "discarded_fraction": float((point["raw_discarded"][0] * n + leaked) / max(n + leaked, 1))}
    rng = np.random.default_rng(seed)
    support = np.flatnonzero(counts[0])
    samples: dict[str, list] = {"raw": [], "mitigated": []}
    if n > 0:
        pv = counts[0, support] / n
        for start in range(0, bootstrap, BOOTSTRAP_CHUNK):
            b = min(BOOTSTRAP_CHUNK, bootstrap - start)
            resampled = np.zeros((b, counts.shape[1]))
            resampled[:, support] = rng.multinomial(n, pv, size=b)
            res = _chain(resampled, obs, mats, iterations)
            samples["raw"].append(res["raw"])
            samples["mitigated"].append(res["mitigated"])
    for name in ("electric_field", "particle_density"):
        entry = {}
        for kind in ("raw", "mitigated"):
            entry[kind] = point[kind][name][0]
            draws = np.concatenate([s[name] for s in samples[kind]]) if samples[kind] else None
            entry[f"{kind}_error"] = (np.std(draws, axis=0, ddof=1) if draws is not None
                                      else np.full_like(np.asarray(entry[kind], float), np.nan))
        out[name] = entry
    return out
