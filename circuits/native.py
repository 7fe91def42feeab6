"""Exact native decompositions of term exponentials ``exp(-i theta h)``, valid at every angle.

A *block* is a :class:`~circuits.circuit.ParametrizedCircuit` on ``k`` qudits with one
parameter ``theta``: every gate angle is ``scale * theta + offset``, so one compilation serves
every angle. Only native gates appear: two-level rotations, single-qudit (virtual) phases and
the gate set's two-qudit gates (:class:`NativeGateSet`).

Constructions (all exact; X, Y, Z^{jk} as in :mod:`circuits.gates`):

* diagonal ``h`` on one qudit: one phase gate; on two qudits: expanded in the product basis
  ``{1, Z^{rp}} (x) {1, Z^{rq}}``, each ``Z (x) Z`` term one native entangler (a light-shift
  gate after level permutations, an MS gate after local basis changes, or two controlled
  rotations), unless the gate set has a general two-qudit diagonal;
* one-qudit ``h``: ``V exp(-i theta Lambda) V^dag`` with ``V`` the eigenbasis (two-level
  rotations by Givens elimination) and a phase gate;
* ``h`` a direct sum of 2 x 2 blocks ``w|a><b| + h.c.`` on disjoint pairs of basis states that
  differ on one *target* qudit (hopping terms): on two qudits each pair is one controlled
  rotation; on three qudits the pairs, one per level of a control qudit ``x``, are moved by an
  angle-independent controlled permutation ``V`` onto one target level pair and one level of
  the other control ``y``; then ``V h V^dag = F(x) (x) P^{jk} (x) |t><t|_y`` is a controlled
  rotation multiplexed over ``x``, written as ``sum_i alpha_i sigma_i(x)`` with sign patterns
  ``sigma_i`` (sign flips are controlled pi-rotations about a perpendicular axis), so
  ``exp(-i theta h) = V^dag [prod_i S_i CR(2 alpha_i theta) S_i^dag] V``.

A controlled rotation ``exp(-i t |c><c| (x) P/2)`` without a native one is
``(1/2d)[1 (x) Z + sum_{e != c} Z^{ce} (x) Z]`` after a target basis change: ``d - 1``
entanglers and a phase. Runs of fixed single-qudit gates are fused and re-decomposed into at
most ``d(d-1)/2`` two-level rotations and one virtual phase (Givens elimination, Reck et al.,
Phys. Rev. Lett. 73, 58 (1994)).
"""
from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg as sla

from fluxline_threads import single_threaded_blas
from .circuit import ParametrizedCircuit
from .gates import ControlledRotation, DiagonalGate, Gate, MSGate, TwoLevelRotation
from .register import Space

__all__ = ["ENTANGLERS", "NativeGateSet", "NotDecomposable", "exponential_block", "gate_block",
           "is_native", "givens", "block_fidelity"]

#: two-qudit gates a decomposition can be built on, in order of preference
ENTANGLERS = ("controlled_rotation", "light_shift", "ms")
TOL = 1e-12


class NotDecomposable(ValueError):
    """The generator has no structure the exact constructions cover."""


@dataclass(frozen=True)
class NativeGateSet:
    """The two-qudit gates a machine has (single-qudit rotations and phases are always native).

    ``entangler`` is the one decompositions are built on; ``ms`` / ``light_shift`` are level
    pairs (None: absent); ``diagonal2``: any two-qudit diagonal phase table is native.
    """

    entangler: str
    levels: tuple[int, int] = (0, 1)
    diagonal2: bool = False
    ms: tuple[int, int] | None = None
    light_shift: tuple[int, int] | None = None
    controlled_rotation: bool = False

    def __post_init__(self) -> None:
        if self.entangler not in ENTANGLERS:
            raise ValueError(f"entangler must be one of {ENTANGLERS}, got {self.entangler!r}")
        if self.entangler == "ms" and self.ms is None:
            object.__setattr__(self, "ms", tuple(self.levels))
        if self.entangler == "light_shift" and self.light_shift is None:
            object.__setattr__(self, "light_shift", tuple(self.levels))
        if self.entangler == "controlled_rotation":
            object.__setattr__(self, "controlled_rotation", True)

    def identity(self) -> str:
        """Explicit text naming what the blocks of :func:`exponential_block` depend on (cache keys)."""
        return (f"entangler={self.entangler};levels={self.levels[0]},{self.levels[1]};"
                f"diagonal2={int(self.diagonal2)}")


def _pauli(j: int, k: int, d: int, phi: float) -> np.ndarray:
    p = np.zeros((d, d), dtype=np.complex128)
    p[j, k], p[k, j] = np.exp(-1j * phi), np.exp(1j * phi)
    return p


def _z_to_p(j: int, k: int, d: int, phi: float) -> np.ndarray:
    """Unitary ``W`` with ``W Z^{jk} W^dag = cos phi X^{jk} + sin phi Y^{jk}`` (identity elsewhere)."""
    w = np.eye(d, dtype=np.complex128)
    s = 1 / math.sqrt(2)
    w[j, j], w[j, k], w[k, j], w[k, k] = s, -s * np.exp(-1j * phi), s * np.exp(1j * phi), s
    return w


def _level_map(d: int, src: tuple[int, int], dst: tuple[int, int]) -> np.ndarray:
    """Permutation matrix sending level ``src[i]`` to ``dst[i]`` (others filled in order)."""
    perm = {src[0]: dst[0], src[1]: dst[1]}
    free = [x for x in range(d) if x not in perm.values()]
    for x in range(d):
        if x not in perm:
            perm[x] = free.pop(0)
    m = np.zeros((d, d))
    for x, y in perm.items():
        m[y, x] = 1.0
    return m


def givens(u: np.ndarray) -> tuple[list[tuple[int, int, float, float]], np.ndarray, float]:
    """Two-level rotations and phases whose product is ``u``: ``(rotations, phases, gamma)``.

    Apply ``diag(exp(i phases))`` (``phases[0] = 0``) first, then ``R^{jk}(t, phi)`` for each
    ``(j, k, t, phi)`` in order; the product is ``exp(-i gamma) u`` (``gamma`` the global phase
    left out).
    """
    d = u.shape[0]
    v = np.array(u, dtype=np.complex128)
    found = []
    for col in range(d - 1):
        for row in range(d - 1, col, -1):
            xk = v[row, col]
            if abs(xk) < TOL:
                continue
            xj = v[col, col]
            t = 2 * math.atan2(abs(xk), abs(xj))
            phi = np.angle(xk) - (np.angle(xj) if abs(xj) > TOL else 0.0) - math.pi / 2
            g = np.eye(d, dtype=np.complex128)
            c, s = math.cos(t / 2), math.sin(t / 2)
            g[col, col], g[col, row] = c, -1j * s * np.exp(-1j * phi)
            g[row, col], g[row, row] = -1j * s * np.exp(1j * phi), c
            v = g @ v
            found.append((col, row, t, phi))
    phases = np.angle(np.diagonal(v))
    # u = G_1^dag ... G_n^dag D: apply D, then G_n^dag ... G_1^dag (R(t)^dag = R(-t))
    return [(j, k, -t, phi) for j, k, t, phi in reversed(found)], phases - phases[0], float(phases[0])


@dataclass
class _Builder:
    """Items in application order: ``("u", q, U)`` fixed single-qudit unitaries, ``("g", gate,
    scale, offset)`` native gates at angle ``scale * theta + offset``."""

    k: int
    d: int
    gs: NativeGateSet
    items: list = field(default_factory=list)
    #: global phase exp(i (phase_scale * theta + phase_offset)) dropped by the items, restored at the end
    phase_scale: float = 0.0
    phase_offset: float = 0.0

    def u(self, q: int, mat: np.ndarray) -> None:
        self.items.append(("u", q, np.asarray(mat, dtype=np.complex128)))

    def gate(self, gate: Gate, scale: float, offset: float = 0.0) -> None:
        self.items.append(("g", gate, float(scale), float(offset)))

    def phase(self, q: int, table: np.ndarray, scale: float, offset: float = 0.0) -> None:
        if np.max(np.abs(table)) > TOL and (abs(scale) > TOL or abs(offset) > TOL):
            self.gate(DiagonalGate((q,), np.asarray(table, dtype=float), self.d), scale, offset)

    def zz(self, qa: int, ce: tuple[int, int], qb: int, jk: tuple[int, int], scale: float, offset: float = 0.0) -> None:
        """``exp(-i t Z^{ce}_a (x) Z^{jk}_b)``, ``Z^{ce} = |c><c| - |e><e|``."""
        d, gs = self.d, self.gs
        if gs.entangler == "controlled_rotation":
            # |c><c| (x) Z = (1 (x) W^dag)(|c><c| (x) X)(1 (x) W), W Z W^dag = X
            w = _z_to_p(min(jk), max(jk), d, 0.0)
            sign = 1.0 if jk[0] < jk[1] else -1.0
            self.u(qb, w)
            self.gate(ControlledRotation(qa, qb, ce[0], min(jk), max(jk), d), 2 * sign * scale, 2 * sign * offset)
            self.gate(ControlledRotation(qa, qb, ce[1], min(jk), max(jk), d), -2 * sign * scale, -2 * sign * offset)
            self.u(qb, w.conj().T)
            return
        a, b = gs.levels
        n = np.eye(d) if gs.entangler == "light_shift" else _z_to_p(a, b, d, 0.0)
        la = _level_map(d, (a, b), ce) @ n.conj().T
        lb = _level_map(d, (a, b), jk) @ n.conj().T
        self.u(qa, la.conj().T)
        self.u(qb, lb.conj().T)
        if gs.entangler == "light_shift":
            z = np.zeros(d)
            z[a], z[b] = 1.0, -1.0
            self.gate(DiagonalGate((qa, qb), np.outer(z, z), d), scale, offset)
        else:
            self.gate(MSGate((qa, qb), a, b, d), scale, offset)
        self.u(qa, la)
        self.u(qb, lb)

    def cr(self, qc: int, c: int, qt: int, j: int, k: int, phi: float, scale: float, offset: float = 0.0) -> None:
        """``exp(-i t |c><c| (x) P_phi^{jk} / 2)`` on control ``qc``, target ``qt``."""
        if self.gs.controlled_rotation:
            self.gate(ControlledRotation(qc, qt, c, j, k, self.d, phi), scale, offset)
            return
        d = self.d
        w = _z_to_p(j, k, d, phi)
        z = np.zeros(d)
        z[j], z[k] = 1.0, -1.0
        self.u(qt, w.conj().T)
        self.phase(qt, z, scale / (2 * d), offset / (2 * d))
        for e in range(d):
            if e != c:
                self.zz(qc, (c, e), qt, (j, k), scale / (2 * d), offset / (2 * d))
        self.u(qt, w)

    def ms(self, gate: MSGate, scale: float, offset: float) -> None:
        """A Molmer-Sorensen gate the machine lacks: ``P (x) P = (W (x) W) Z (x) Z (W (x) W)^dag``."""
        w = _z_to_p(gate.j, gate.k, self.d, gate.phi)
        for q in gate.qudits:
            self.u(q, w.conj().T)
        self.zz(gate.qudits[0], (gate.j, gate.k), gate.qudits[1], (gate.j, gate.k), scale, offset)
        for q in gate.qudits:
            self.u(q, w)

    def circuit(self, n_qudits: int | None = None) -> ParametrizedCircuit:
        """Lower to a one-parameter circuit, fusing runs of fixed single-qudit unitaries."""
        d = self.d
        out = ParametrizedCircuit(Space.qudits(n_qudits or self.k, d), 1)
        pending: dict[int, np.ndarray] = {}

        def flush(q: int) -> None:
            mat = pending.pop(q, None)
            if mat is None:
                return
            rotations, phases, gamma = givens(mat)
            self.phase_offset += gamma
            if np.max(np.abs(np.angle(np.exp(1j * phases)))) > 1e-10:
                out.append(DiagonalGate((q,), -phases, d), None, offset=1.0)
            for j, k, t, phi in rotations:
                out.append(TwoLevelRotation(q, j, k, d, phi), None, offset=t)

        for item in self.items:
            if item[0] == "u":
                _, q, mat = item
                pending[q] = mat @ pending.get(q, np.eye(d, dtype=np.complex128))
                continue
            _, gate, scale, offset = item
            for q in gate.qudits:
                flush(q)
            if abs(scale) > TOL:
                out.append(gate, 0, scale=scale, offset=offset)
            elif abs(offset) > TOL:
                out.append(gate, None, offset=offset)
        for q in sorted(pending):
            flush(q)
        scale, offset = self.phase_scale, math.remainder(self.phase_offset, 2 * math.pi)
        if abs(scale) > TOL or abs(offset) > 1e-12:  # a constant table: the global phase, exactly
            out.append(DiagonalGate((0,), -np.ones(d), d), 0 if abs(scale) > TOL else None, scale=scale or 1.0,
                       offset=offset)
        return out


def _diagonal2(b: _Builder, qa: int, qb: int, table: np.ndarray) -> None:
    """``exp(-i theta diag(table))`` for a ``d x d`` real table on ``(qa, qb)``."""
    d = b.d
    if b.gs.diagonal2:
        b.gate(DiagonalGate((qa, qb), table, d), 1.0)
        return
    best = None
    for ra in range(d):
        for rb in range(d):
            ba, bb = _basis(d, ra), _basis(d, rb)
            coef = np.linalg.solve(ba, np.linalg.solve(bb, table.T).T)  # table = ba coef bb^T
            n = int(np.count_nonzero(np.abs(coef[1:, 1:]) > TOL))
            if best is None or n < best[0]:
                best = (n, ra, rb, coef)
    _, ra, rb, coef = best
    b.phase_scale -= coef[0, 0]
    others_a = [p for p in range(d) if p != ra]
    others_b = [q for q in range(d) if q != rb]
    b.phase(qa, _basis(d, ra)[:, 1:] @ coef[1:, 0], 1.0)
    b.phase(qb, _basis(d, rb)[:, 1:] @ coef[0, 1:], 1.0)
    for i, p in enumerate(others_a):
        for jj, q in enumerate(others_b):
            c = coef[i + 1, jj + 1]
            if abs(c) > TOL:
                b.zz(qa, (ra, p), qb, (rb, q), c)


def _basis(d: int, r: int) -> np.ndarray:
    """Columns ``1, Z^{r p}`` (p != r) of the diagonal functions on ``d`` levels."""
    cols = [np.ones(d)]
    for p in range(d):
        if p != r:
            z = np.zeros(d)
            z[r], z[p] = 1.0, -1.0
            cols.append(z)
    return np.array(cols).T


def _pairs(h: np.ndarray, k: int, d: int) -> list[tuple[np.ndarray, np.ndarray, complex]]:
    rows, cols = np.nonzero(np.abs(np.triu(h, 1)) > TOL)
    used = np.concatenate([rows, cols])
    if used.size != np.unique(used).size:
        raise NotDecomposable("coupled basis states do not form disjoint pairs")
    shape = (d,) * k
    return [(np.array(np.unravel_index(a, shape)), np.array(np.unravel_index(b, shape)), complex(h[a, b]))
            for a, b in zip(rows, cols)]


def _pair_axis(w: complex, la: int, lb: int) -> tuple[int, int, float]:
    """``(j, k, phi)`` with ``w|la><lb| + h.c. = |w| P_phi^{jk}``."""
    if la < lb:
        return la, lb, -float(np.angle(w))
    return lb, la, float(np.angle(w))


def _multiplexed(b: _Builder, pairs, t: int, x: int, y: int) -> None:
    d = b.d
    cx = [int(a[x]) for a, _, _ in pairs]
    if len(set(cx)) != len(cx):
        raise NotDecomposable("several pairs share a control level")
    sets = [frozenset((int(a[t]), int(bb[t]))) for a, bb, _ in pairs]
    # common target pair: fewest controlled transpositions (2 - overlap per moved pair)
    j, k = min(((j, k) for j in range(d) for k in range(j + 1, d)),
               key=lambda jk: sum(0 if s == set(jk) else 2 - len(s & set(jk)) for s in sets))
    ty = Counter(int(a[y]) for a, _, _ in pairs).most_common(1)[0][0]
    plan = []  # (control level, qudit, (u, v), phi)
    phis = []
    for (a, bb, w) in pairs:
        c, la, lb = int(a[x]), int(a[t]), int(bb[t])
        s = {la, lb}
        if s == {j, k}:
            swaps = []
        elif len(s & {j, k}) == 1:
            swaps = [((s - {j, k}).pop(), ({j, k} - s).pop())]
        else:
            swaps = [(la, j), (lb, k)]
        hp = np.zeros((d, d), dtype=np.complex128)
        hp[la, lb], hp[lb, la] = w, np.conj(w)

        def effective(phis_: list[float]) -> complex:
            m = np.eye(d, dtype=np.complex128)
            for (u, v), ph in zip(swaps, phis_):
                r = np.eye(d, dtype=np.complex128)  # R^{uv}(pi, ph) = -i P_ph on the pair
                lo, hi = min(u, v), max(u, v)
                r[lo, lo] = r[hi, hi] = 0.0
                r[lo, hi], r[hi, lo] = -1j * np.exp(-1j * ph), -1j * np.exp(1j * ph)
                m = r @ m
            return complex((m @ hp @ m.conj().T)[j, k])

        sw_phis = [0.0] * len(swaps)
        if swaps:
            w0, w1 = effective(sw_phis), effective(sw_phis[:-1] + [math.pi / 2])
            sigma = round(float(np.angle(w1 / w0)) / (math.pi / 2))
            if abs(sigma) != 1:
                raise NotDecomposable("controlled permutation phase")
            phis.append(("fix", c, swaps, sw_phis, w0, sigma))
        else:
            phis.append(("free", c, swaps, sw_phis, effective(sw_phis), 0))
        if int(a[y]) != ty:
            plan.append((c, y, (int(a[y]), ty), 0.0))
    free = [-float(np.angle(w0)) for tag, _, _, _, w0, _ in phis if tag == "free"]
    phi0 = free[0] if free else 0.0
    if any(abs(np.angle(np.exp(1j * (f - phi0)))) > 1e-9 for f in free):
        raise NotDecomposable("pairs on the common level pair have different phases")
    for tag, c, swaps, sw_phis, w0, sigma in phis:
        if tag == "fix":
            sw_phis[-1] = sigma * (-phi0 - float(np.angle(w0)))
        plan[:0] = [(c, t, uv, ph) for uv, ph in zip(swaps, sw_phis)]
    for c, q, (u, v), ph in plan:
        b.cr(x, c, q, min(u, v), max(u, v), ph, 0.0, math.pi)
    # multiplexed rotation: F(x) = |w| on pair levels, 0 elsewhere
    f = np.zeros(d)
    for (a, _, w) in pairs:
        f[int(a[x])] = abs(w)
    values = []
    for v in f:
        if not any(abs(v - u) < 1e-12 for u in values):
            values.append(float(v))
    groups = {v: [c for c in range(d) if abs(f[c] - v) < 1e-12] for v in values}
    vm = max(values, key=lambda v: (len(groups[v]), v == 0.0))
    rest = [v for v in values if v != vm]
    alpha0 = vm + sum((v - vm) / 2 for v in rest)
    if abs(alpha0) > TOL:
        b.cr(y, ty, t, j, k, phi0, 2 * alpha0)
    for v in rest:
        # sigma_L = -sigma_(complement of L): flip the smaller set
        flip, sign = groups[v], 1.0
        if 2 * len(flip) > d:
            flip, sign = [c for c in range(d) if c not in groups[v]], -1.0
        for c in flip:
            b.cr(x, c, t, j, k, phi0 + math.pi / 2, 0.0, math.pi)
        b.cr(y, ty, t, j, k, phi0, -sign * (v - vm))
        for c in flip:
            b.cr(x, c, t, j, k, phi0 + math.pi / 2, 0.0, -math.pi)
    for c, q, (u, v), ph in reversed(plan):
        b.cr(x, c, q, min(u, v), max(u, v), ph, 0.0, -math.pi)


def _check_levels(gs: NativeGateSet, d: int) -> None:
    if gs.entangler != "controlled_rotation" and max(gs.levels) >= d:
        raise NotDecomposable(f"the {gs.entangler} gate acts on levels {tuple(gs.levels)}, which qudits of "
                              f"d = {d} do not have")


def exponential_block(h: np.ndarray, k: int, d: int, gs: NativeGateSet) -> ParametrizedCircuit:
    """Native circuit ``C(theta) = exp(-i theta h)`` (global phase included) for a ``k``-qudit
    Hermitian ``h`` (``d**k x d**k``, row-major over qudits ``0..k-1``).

    Raises :class:`NotDecomposable` for a structure the constructions do not cover.
    """
    h = np.asarray(h, dtype=np.complex128)
    if h.shape != (d**k, d**k):
        raise ValueError(f"generator shape {h.shape} does not fit {k} qudits of d={d}")
    _check_levels(gs, d)
    b = _Builder(k, d, gs)
    diag = np.real(np.diagonal(h))
    offdiag = np.count_nonzero(np.abs(h - np.diag(np.diagonal(h))) > TOL)
    if k == 1 and offdiag:
        lam, vec = np.linalg.eigh(h)
        b.u(0, vec.conj().T)
        b.phase(0, lam, 1.0)
        b.u(0, vec)
        return b.circuit()
    if not offdiag:
        if k == 1:
            b.phase(0, diag, 1.0)
        elif k == 2:
            _diagonal2(b, 0, 1, diag.reshape(d, d))
        else:
            raise NotDecomposable("diagonal generators on more than two qudits")
        return b.circuit()
    if np.max(np.abs(diag - diag[0])) > TOL:
        raise NotDecomposable("pair generators with a non-constant diagonal")
    b.phase_scale -= diag[0]
    pairs = _pairs(h, k, d)
    targets = {int(np.flatnonzero(a != bb)[0]) for a, bb, _ in pairs if np.count_nonzero(a != bb) == 1}
    if len(targets) != 1 or any(np.count_nonzero(a != bb) != 1 for a, bb, _ in pairs):
        raise NotDecomposable("pairs do not differ on one common target qudit")
    t = targets.pop()
    controls = [q for q in range(k) if q != t]
    if k == 2:
        (qc,) = controls
        for a, bb, w in pairs:
            j, kk, phi = _pair_axis(w, int(a[t]), int(bb[t]))
            b.cr(qc, int(a[qc]), t, j, kk, phi, 2 * abs(w))
        return b.circuit()
    if k == 3:
        for x, y in (controls, controls[::-1]):
            trial = _Builder(k, d, gs, phase_scale=b.phase_scale)
            try:
                _multiplexed(trial, pairs, t, x, y)
            except NotDecomposable:
                continue
            return trial.circuit()
    raise NotDecomposable("no exact construction for this pair structure")


def is_native(gate: Gate, gs: NativeGateSet) -> bool:
    """Whether the machine runs ``gate`` as one gate (asks the gate its hardware key and levels)."""
    key = gate.hardware_key
    if key in ("rotation", "phase"):
        return True
    levels = tuple(gate.export().get("levels", ()))
    return {"controlled_rotation": gs.controlled_rotation,
            "ms": gs.ms is not None and levels == tuple(gs.ms),
            "light_shift": gs.diagonal2 or (gs.light_shift is not None and levels == tuple(gs.light_shift)),
            "diagonal2": gs.diagonal2}.get(key, False)


def gate_block(gate: Gate, gs: NativeGateSet) -> ParametrizedCircuit:
    """Native one-parameter block of ``gate`` on its own qudits renumbered ``0..k-1``."""
    k, d = gate.locality, gate.d
    if k == 0:
        raise NotDecomposable("subspace-mode gates act on no register")
    _check_levels(gs, d)
    if gate.hardware_key == "ms":  # P (x) P pairs differ on both qudits: its own construction
        entry = gate.export()
        b = _Builder(2, d, gs)
        b.ms(MSGate((0, 1), *entry["levels"], d, entry["phase"]), 1.0, 0.0)
        return b.circuit()
    return exponential_block(gate.generator(), k, d, gs)


def block_fidelity(block: ParametrizedCircuit, h: np.ndarray, angles: tuple[float, ...] = (0.37, -1.91, 2.6)) -> float:
    """Least process fidelity ``|Tr(U^dag C)|^2 / D^2`` of ``block`` against ``expm(-i theta h)``."""
    dim = h.shape[0]
    fids = []
    with single_threaded_blas():  # small dense products: BLAS threads only contend
        for th in angles:
            u = sla.expm(-1j * th * np.asarray(h, dtype=np.complex128))
            c = block.unitary(np.array([th]))
            fids.append(abs(np.trace(u.conj().T @ c)) ** 2 / dim**2)
    return float(min(fids))
