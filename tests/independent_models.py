"""Independent constructions of the lattice Schwinger model for cross-checks (no production code).

(a) ``fermion_link_spectrum``: fermions (Jordan–Wigner, via qutip's ``fdestroy``) ⊗ link qudits,
    the original hopping −i w Σ(φ†Uφ − h.c.) form, restricted to Gauss's law.
(c) ``spin_only_hamiltonian``: gauge field eliminated, L_n = ε + Σ_{k≤n}(Q_k + q_k); configurations
    whose fields leave the window are dropped (or kept, ``window=None``: the untruncated model).
"""

from __future__ import annotations

import itertools

import numpy as np
import qutip
import scipy.sparse as sp


def link_operators(link: str, d: int) -> tuple[np.ndarray, np.ndarray]:
    """(L, U) as d×d arrays for a link of the given type (textbook definitions)."""
    S = (d - 1) / 2
    L = np.diag(np.arange(d) - S)
    if link == "truncated":
        U = np.diag(np.ones(d - 1), -1)  # U|L> = |L+1>, U|S> = 0
    else:
        m = np.arange(d - 1) - S  # S^+|S,m> = sqrt(S(S+1) - m(m+1)) |S,m+1>
        U = np.diag(np.sqrt(S * (S + 1) - m * (m + 1)), -1) / np.sqrt(S * (S + 1))
    return L, U


def fermion_link_spectrum(N: int, d: int, w: float, m: float, J: float, theta: float = 0.0,
                          link: str = "truncated", charges: dict[int, int] | None = None,
                          eps: float | None = None) -> np.ndarray:
    """All eigenvalues of formulation (a), built with qutip tensor products (qutip 5)."""
    charges = charges or {}
    eps = (0.0 if d % 2 else -0.5) if eps is None else eps
    K = N - 1
    Lm, Um = link_operators(link, d)
    fid = qutip.qeye([2] * N)
    lid = [qutip.qeye(d)] * K

    def on_link(op: np.ndarray, n: int) -> qutip.Qobj:
        ops = list(lid)
        ops[n] = qutip.Qobj(op)
        return qutip.tensor(fid, *ops) if K > 1 else qutip.tensor(fid, ops[0])

    def on_fermions(op: qutip.Qobj) -> qutip.Qobj:
        return qutip.tensor(op, *lid)

    c = [qutip.fdestroy(N, n) for n in range(N)]
    H = 0
    for n in range(K):
        hop = -1j * w * on_fermions(c[n].dag()) * on_link(Um, n) * on_fermions(c[n + 1])
        H = H + hop + hop.dag()
    for n in range(N):
        H = H + m * (-1) ** n * on_fermions(c[n].dag() * c[n])
    for n in range(K):
        H = H + J * on_link((Lm + theta / (2 * np.pi) * np.eye(d)) @ (Lm + theta / (2 * np.pi) * np.eye(d)), n)
    # Gauss's law as a mask over the product basis (fermion occupations ⊗ link levels, row-major)
    # occupation of each fermion basis state, read off qutip's own number operators
    num_diag = np.array([(c[n].dag() * c[n]).diag().real for n in range(N)]).T
    occ = np.rint(num_diag).astype(int)
    fields = np.array(list(itertools.product(np.arange(d) - (d - 1) / 2, repeat=K)))
    Q = occ - (np.arange(N) % 2)[None, :]
    q = np.zeros(N)
    for site, charge in charges.items():
        q[site] = charge
    ok = np.ones((occ.shape[0], fields.shape[0]), dtype=bool)
    padded = np.concatenate([np.full((fields.shape[0], 1), eps), fields, np.full((fields.shape[0], 1), eps)], axis=1)
    dL = np.diff(padded, axis=1)  # (F, N): L_n - L_{n-1}
    for n in range(N):
        ok &= np.isclose(dL[None, :, n], Q[:, None, n] + q[n])
    keep = np.flatnonzero(ok.ravel())
    Hs = H.data.as_scipy().tocsr() if hasattr(H.data, "as_scipy") else sp.csr_matrix(H.full())
    Hp = Hs[keep][:, keep].toarray()
    assert np.allclose(Hp, Hp.conj().T)
    return np.linalg.eigvalsh(Hp)


def spin_only_hamiltonian(N: int, d: int | None, w: float, m: float, J: float, theta: float = 0.0,
                          link: str = "truncated", charges: dict[int, int] | None = None,
                          eps: float | None = None) -> sp.csr_matrix:
    """Formulation (c) on the occupation basis (2^N strings), sparse.

    ``d=None`` means no truncation (untruncated Wilson links, U|L> = |L+1> always).
    """
    charges = charges or {}
    if eps is None:
        eps = 0.0 if (d is None or d % 2) else -0.5
    S = None if d is None else (d - 1) / 2
    q = np.zeros(N)
    for site, charge in charges.items():
        q[site] = charge
    occ = np.array(list(itertools.product([0, 1], repeat=N)), dtype=int)
    Q = occ - (np.arange(N) % 2)[None, :]
    L = eps + np.cumsum(Q + q[None, :], axis=1)  # L_0 .. L_{N-1}
    keep = np.isclose(L[:, -1], eps)
    if S is not None:
        keep &= np.all(np.abs(L[:, :-1]) <= S + 1e-9, axis=1)
    occ, L = occ[keep], L[keep, :-1]
    index = {tuple(o): i for i, o in enumerate(occ)}
    dim = len(occ)
    diag = m * (occ * (-1.0) ** np.arange(N)).sum(axis=1) + J * ((L + theta / (2 * np.pi)) ** 2).sum(axis=1)
    rows, cols, vals = list(range(dim)), list(range(dim)), list(diag)
    for i, o in enumerate(occ):
        for n in range(N - 1):
            if o[n] == 0 and o[n + 1] == 1:  # phi†_n U_n phi_{n+1}: raises L_n
                t = o.copy()
                t[n], t[n + 1] = 1, 0
                j = index.get(tuple(t))
                if j is None:
                    continue
                Ln = L[i, n]
                if S is None or link == "truncated":
                    amp = 1.0
                else:
                    amp = np.sqrt(S * (S + 1) - Ln * (Ln + 1)) / np.sqrt(S * (S + 1))
                rows += [i, j]
                cols += [j, i]
                vals += [w * amp, w * amp]
    return sp.csr_matrix((vals, (rows, cols)), shape=(dim, dim))
