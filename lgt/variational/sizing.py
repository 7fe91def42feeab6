"""Depth sizing: the least number of layers whose fitted trajectory meets the tolerance over
[0, T], the gate-error budget of each depth, and the Trotter baseline in native gates."""

from __future__ import annotations

import time
from dataclasses import asdict, dataclass, field, fields
from typing import Callable

import numpy as np
from scipy.sparse.linalg import expm_multiply

from circuits.register import Space
from circuits.trotter import trotter_circuit, trotter_schedule
from lgt.basis import PhysicalBasis
from lgt.hamiltonian import build_hamiltonian
from lgt.results import Table
from lgt.variational.ansatz import LayerOptions, ModelAnsatz, ordered_terms
from lgt.variational.budget import CircuitCost, Costing
from lgt.variational.comparison import compare_to_exact, make_observer
from lgt.variational.families import get_family
from lgt.variational.native_cost import TermCost, summed_cost
from lgt.variational.settings import VariationalSettings
from lgt.variational.stepper import VariationalTrajectory, fit_trajectory
from lgt.variational.trotter_baseline import least_trotter_steps, trotter_groups, trotter_max_infidelity

#: Offer depth D + 1 the angles of depth D plus an identity layer as warm starts (fast path only).
#: Off by default: measured on the 6-site chain to T = 2 it saves no time and finds shallower
#: depths meeting the tolerance than the plain fits (symmetric 3 instead of 4, hardware 7 instead
#: of 8; those fits are verified against the exact state), so the chosen depths would differ.
WARM_STARTS = False
#: Observables whose errors decide the ``observables`` criterion.
CRITERION_OBSERVABLES = ("electric_field", "particle_density")
#: Units of the result columns that have one (the others are counts or dimensionless).
COLUMN_UNITS = {"duration_us": "us", "fit_seconds": "s", "reached_time": "lattice time", "time": "lattice time",
                "step_seconds": "s"}
#: Stored in integer columns for "none" (no Trotter step count met the tolerance, no depth chosen),
#: and in the noise-simulation columns of a depth that was not simulated.
NONE = -1
#: Largest register (d^K strings) that ``size`` simulates under noise, and the largest simulated
#: with an exact density matrix (beyond it NOISE_TRAJECTORIES Monte-Carlo wave functions). Bounds
#: of our choosing that keep it to seconds per depth: a density matrix costs 16 d^{2K} bytes per
#: event swept (K = 7 qutrits: minutes per circuit, docs/lab.md "Performance"), a trajectory
#: 16 d^K.
NOISE_SIZING_MAX_STRINGS = 3 ** 8
NOISE_DENSITY_MAX_STRINGS = 3 ** 6
#: Trajectories per depth beyond the density-matrix limit (statistical error about 1/√128 ≈ 0.09
#: on the fidelities; common practice, no source).
NOISE_TRAJECTORIES = 128


@dataclass
class CostColumns:
    """Native gates, duration (µs), predicted noise fidelity and total fidelity of a circuit."""

    single_qudit_gates: int
    two_qudit_gates: int
    other_gates: int
    duration_us: float
    noise_fidelity: float
    total_fidelity: float

    @staticmethod
    def of(cost: CircuitCost | None, algorithmic_fidelity: float) -> dict:
        """Column values for ``cost`` (zeros when there is no circuit)."""
        if cost is None:
            return dict(single_qudit_gates=0, two_qudit_gates=0, other_gates=0, duration_us=0.0,
                        noise_fidelity=0.0, total_fidelity=0.0)
        return dict(single_qudit_gates=cost.single_qudit, two_qudit_gates=cost.two_qudit,
                    other_gates=cost.other, duration_us=cost.duration_us, noise_fidelity=cost.fidelity,
                    total_fidelity=algorithmic_fidelity * cost.fidelity)


@dataclass
class DepthRow(CostColumns):
    """One depth D of the sizing table (fidelities over the whole window [0, T]).

    With the fidelity criterion a depth's fit stops as soon as it can no longer win;
    ``reached_time`` is then where it stopped (< T) and ``final_fidelity`` is taken there.
    The last four columns come from the noisy simulation of the native circuit at
    ``reached_time`` (:func:`noise_columns`; :data:`NONE` when not simulated).
    """

    layers: int
    parameters: int
    max_infidelity: float
    final_fidelity: float
    sum_step_infidelity: float
    max_leakage: float
    max_observable_error: float
    fit_seconds: float
    meets_tolerance: bool
    reached_time: float
    noisy_fidelity: float = NONE
    post_selected_fidelity: float = NONE
    discard_rate: float = NONE
    predicted_observable_error: float = NONE


@dataclass
class TrotterRow(CostColumns):
    """Least Trotter steps of one order meeting the tolerance, with the native cost at T; the
    errors are those of that step count (of ``trotter_max_steps`` when none was enough)."""

    order: int
    steps: int | None
    max_infidelity: float
    max_observable_error: float


@dataclass
class SizingResult:
    rows: list[DepthRow]
    chosen: int | None
    best_under_noise: int | None
    trotter: list[TrotterRow]
    shots: dict[str, int]
    trajectories: dict[int, VariationalTrajectory] = field(default_factory=dict)
    best_under_noise_simulated: int | None = None

    def table(self) -> list[dict]:
        return [asdict(r) for r in self.rows]


def depth_ansatz(basis: PhysicalBasis, settings: VariationalSettings, layers: int):
    """D = ``layers`` layers of the configured family on its fit space."""
    return get_family(settings.family).build(basis, layers, LayerOptions.from_settings(settings))


def depth_cost(ansatz, costing: Costing) -> CircuitCost:
    """Native cost of a family's D-layer circuit."""
    return get_family(ansatz.family).native_cost(ansatz, costing)


def meets(settings: VariationalSettings, max_infidelity: float, max_observable_error: float) -> bool:
    """The one acceptance rule: ``criterion = "fidelity"`` needs max_t (1 − F(t)) ≤ ``tolerance``;
    ``"observables"`` needs the largest error of ⟨L_n⟩ and ν over the window ≤ ``observable_tolerance``
    (for the depth search and the Trotter baseline alike)."""
    if settings.criterion == "fidelity":
        return max_infidelity <= settings.tolerance
    return max_observable_error <= settings.observable_tolerance


def evaluate_depth(basis: PhysicalBasis, psi0: np.ndarray, settings: VariationalSettings, layers: int,
                   costing: Costing, progress: Callable[[int], None] | None = None,
                   abort: float | Callable[[], float | None] | None = None, fast: bool = True,
                   shallower: tuple[ModelAnsatz, VariationalTrajectory] | None = None,
                   ) -> tuple[DepthRow, VariationalTrajectory, ModelAnsatz]:
    """Fit D = ``layers`` over the window and summarise it (``abort``, ``fast``: see
    :func:`fit_trajectory`; ``shallower``: a fitted shallower depth whose angles, padded with
    identity layers, are offered as warm starts)."""
    traj, seconds, ansatz = fit_depth(basis, psi0, settings, layers, progress, abort, fast, shallower)
    return depth_row(basis, settings, ansatz, traj, seconds, costing), traj, ansatz


def fit_depth(basis: PhysicalBasis, psi0: np.ndarray, settings: VariationalSettings, layers: int,
              progress: Callable[[int], None] | None = None,
              abort: float | Callable[[], float | None] | None = None, fast: bool = True,
              shallower: tuple[ModelAnsatz, VariationalTrajectory] | None = None,
              ) -> tuple[VariationalTrajectory, float, ModelAnsatz]:
    """The fitted trajectory of D = ``layers``, its fit time (s) and the ansatz (see
    :func:`evaluate_depth`)."""
    ansatz = depth_ansatz(basis, settings, layers)
    warm = None
    if shallower is not None:
        family = get_family(settings.family)
        warm = np.array([family.deepen(row, shallower[0], ansatz) for row in shallower[1].params])
    t0 = time.perf_counter()
    traj = fit_trajectory(ansatz, psi0, settings.dt, settings.n_steps, settings.step_tolerance,
                          settings.maxiter, settings.mode, settings.restarts, settings.seed, progress,
                          abort_infidelity=abort, fast=fast, warm=warm)
    return traj, time.perf_counter() - t0, ansatz


def depth_row(basis: PhysicalBasis, settings: VariationalSettings, ansatz: ModelAnsatz,
              traj: VariationalTrajectory, seconds: float, costing: Costing) -> DepthRow:
    """The sizing-table row of a fitted depth (``seconds``: its fit time)."""
    comparison = compare_to_exact(make_observer(traj, basis), traj)
    obs_err = max(comparison[name]["max_error"] for name in CRITERION_OBSERVABLES)
    cost = depth_cost(ansatz, costing)
    return DepthRow(layers=ansatz.layers, parameters=ansatz.n_params, max_infidelity=traj.max_infidelity,
                    final_fidelity=float(traj.fidelity[-1]), sum_step_infidelity=float(traj.step_infidelity.sum()),
                    max_leakage=float(traj.leakage.max()), max_observable_error=obs_err, fit_seconds=seconds,
                    meets_tolerance=meets(settings, traj.max_infidelity, obs_err), reached_time=float(traj.times[-1]),
                    **CostColumns.of(cost, float(np.min(traj.fidelity))))


def trotter_cost(basis: PhysicalBasis, term_costs: dict[str, TermCost], steps: int, order: int) -> CircuitCost:
    """Native cost of ``steps`` Trotter steps (groups diagonal / hop-even / hop-odd, fused halves)."""
    groups: dict[str, list[TermCost]] = {}
    for kind, index, group in ordered_terms(basis.params):
        groups.setdefault(group, []).append(term_costs[f"{kind}{index}"])
    names = list(groups)
    per_group = [summed_cost(groups[g], g) for g in names]
    total = summed_cost([per_group[g] for g, _, _ in trotter_schedule(len(names), steps, order, fuse=True)], "trotter")
    return CircuitCost(total.counts, total.fidelity, total.duration_us)


def trotter_observable_error(basis: PhysicalBasis, psi0: np.ndarray, t_final: float, n_steps: int,
                             order: int) -> float:
    """Largest |⟨O⟩_Trotter − ⟨O⟩_exact| over t_k = k T/n and the components of the criterion
    observables (diagonal in the field basis, so ⟨O⟩ = Σ_i |ψ_i|² O_i)."""
    from lgt.variational.shots import diagonal_observable_tables

    tables = diagonal_observable_tables(basis)
    table = np.hstack([tables[name] for name in CRITERION_OBSERVABLES])
    dt = t_final / n_steps
    step = trotter_circuit(Space.subspace(basis.dimension), trotter_groups(basis), dt, 1, order)
    A = (-1j * dt) * build_hamiltonian(basis)
    exact = approx = np.asarray(psi0, dtype=np.complex128)
    worst = 0.0
    for _ in range(n_steps):
        exact, approx = expm_multiply(A, exact), step.apply(None, approx)
        worst = max(worst, float(np.max(np.abs((np.abs(exact) ** 2 - np.abs(approx) ** 2) @ table))))
    return worst


def trotter_rows(basis: PhysicalBasis, psi0: np.ndarray, settings: VariationalSettings,
                 term_costs: dict[str, TermCost]) -> list[TrotterRow]:
    """Least Trotter steps meeting the tolerance for each configured order, with native costs.

    The acceptance rule is the depth search's (:func:`meets`): max infidelity ≤ ``tolerance``, or
    with ``criterion = "observables"`` max error of ⟨L_n⟩ and ν ≤ ``observable_tolerance``.
    """
    rows = []
    T = settings.t_final
    for order in settings.trotter_orders:
        if settings.criterion == "fidelity":
            res = least_trotter_steps(basis, psi0, T, settings.tolerance, order, settings.trotter_max_steps)
        else:
            res = least_trotter_steps(basis, psi0, T, settings.observable_tolerance, order, settings.trotter_max_steps,
                                      measure=lambda n: trotter_observable_error(basis, psi0, T, n, order))
        n = res.steps or settings.trotter_max_steps  # errors of the last count tried when none was enough
        infidelity = trotter_max_infidelity(basis, psi0, T, n, order)[0]
        cost = None if res.steps is None else trotter_cost(basis, term_costs, res.steps, order)
        rows.append(TrotterRow(order=order, steps=res.steps, max_infidelity=infidelity,
                               max_observable_error=trotter_observable_error(basis, psi0, T, n, order),
                               **CostColumns.of(cost, 1 - infidelity)))
    return rows


def noise_fidelities(basis: PhysicalBasis, settings: VariationalSettings, costing: Costing) -> dict[int, float]:
    """Predicted noise fidelity F_noise(D) of the configured family for D = 1 … max_layers."""
    return {D: depth_cost(depth_ansatz(basis, settings, D), costing).fidelity
            for D in range(1, settings.max_layers + 1)}


def abort_thresholds(basis: PhysicalBasis, settings: VariationalSettings,
                     costing: Costing) -> dict[int, float | None]:
    """Infidelity above which the fit of depth D can stop: it then neither meets the tolerance
    nor can maximise the predicted total fidelity F_alg(D) F_noise(D).

    D can only beat a depth C ≤ max_layers meeting the tolerance if
    F_alg(D) > (1 − tol) F_noise(C) / F_noise(D) ≥ (1 − tol) F_noise(max_layers) / F_noise(D)
    (F_noise falls with depth), so D stops once 1 − F(t) exceeds
    max(tol, 1 − (1 − tol) F_noise(max_layers) / F_noise(D)). Only with the fidelity criterion.

    The fast path of :func:`size_depth` also uses the best total B found so far among the
    shallower depths: D can only win if F_alg(D) > B / F_noise(D), and F_alg is the minimum of
    F(t) over the window, so D stops once 1 − F(t) > max(tol, 1 − B / F_noise(D)) as well. Neither
    rule changes the chosen depth (an aborted depth has 1 − F > tol) or the best depth under
    noise (an aborted depth's total is below B); aborted rows report their window up to
    ``reached_time``.
    """
    if settings.criterion != "fidelity":
        return {D: None for D in range(1, settings.max_layers + 1)}
    noise = noise_fidelities(basis, settings, costing)
    deepest = noise[settings.max_layers]
    tol = settings.tolerance
    return {D: max(tol, 1.0 - (1.0 - tol) * deepest / noise[D]) if noise[D] > 0 else tol for D in noise}


def sizing_shots(settings: VariationalSettings) -> int:
    """Shots per circuit assumed by the noise sizing: ⌈1 / shots_error²⌉ (the shots that give a
    standard error ``shots_error`` on an observable of unit variance)."""
    return int(np.ceil(1.0 / settings.shots_error ** 2 - 1e-9))


def noise_columns(basis: PhysicalBasis, settings: VariationalSettings, profile, noise, layers: int,
                  traj: VariationalTrajectory, shots: int) -> dict[str, float]:
    """Noisy fidelity, post-selected fidelity, discard rate and predicted observable error of
    depth ``layers`` at its last fitted time (``docs/variational.md``, "Sizing with noise").

    The fitted angles are exported as the family's native register circuit (what a lab runs)
    and simulated under ``noise`` (a :class:`~lgt.lab.noise.LabNoise`); fidelities are with the
    exact state; the error is :func:`lgt.lab.sizing.predicted_observable_error` at ``shots``.
    """
    from circuits.export import from_dict
    from lgt.lab.mitigation import StringObservables
    from lgt.lab.sizing import noisy_outcome, predicted_observable_error

    family = get_family(settings.family)
    doc = family.export(basis, layers, LayerOptions.from_settings(settings), traj.params[-1], profile, "native")[0]
    obs = StringObservables.for_model(basis.params)
    target = basis.to_register(traj.exact_states[-1])
    out = noisy_outcome(from_dict(doc), noise, basis.to_register(traj.exact_states[0]), obs.physical,
                        target=target, trajectories=NOISE_TRAJECTORIES, seed=settings.seed,
                        density_limit=NOISE_DENSITY_MAX_STRINGS)
    error = predicted_observable_error(out.probabilities, np.abs(target) ** 2, obs, shots)[0]
    return dict(noisy_fidelity=out.fidelity, post_selected_fidelity=out.post_selected_fidelity,
                discard_rate=out.discard_rate, predicted_observable_error=error)


def best_simulated(rows: list[DepthRow], t_final: float) -> int | None:
    """Depth of least predicted observable error among the simulated rows that reached ``t_final``
    (an aborted fit's error is taken before T and cannot compete); ties go to the shallower."""
    done = [r for r in rows if r.predicted_observable_error != NONE and r.reached_time >= t_final * (1 - 1e-9)]
    return min(done, key=lambda r: r.predicted_observable_error).layers if done else None


def simulates_noise(basis: PhysicalBasis, settings: VariationalSettings,
                    log: Callable[[str], None] | None = None) -> bool:
    """Whether ``size`` simulates this family's depths under noise (``noise_sizing`` and a
    register of at most :data:`NOISE_SIZING_MAX_STRINGS` strings; a log line says when not)."""
    if not settings.noise_sizing or basis.register_dimension > NOISE_SIZING_MAX_STRINGS:
        if settings.noise_sizing and log:
            log(f"noise sizing skipped: register of {basis.register_dimension:,} strings exceeds "
                f"{NOISE_SIZING_MAX_STRINGS:,}")
        return False
    return True


def depth_noise_columns(basis: PhysicalBasis, settings: VariationalSettings, profile, layers: int,
                        traj: VariationalTrajectory) -> dict[str, float]:
    """:func:`noise_columns` of one depth under the profile's noise model, at
    :func:`sizing_shots` shots (raises ``NotDecomposable`` when the family has no native export)."""
    from lgt.lab.noise import lab_noise

    return noise_columns(basis, settings, profile, lab_noise(settings.hardware_profile), layers, traj,
                         sizing_shots(settings))


def add_noise_sizing(basis: PhysicalBasis, settings: VariationalSettings, profile, rows: list[DepthRow],
                     trajectories: dict[int, VariationalTrajectory],
                     log: Callable[[str], None] | None = None,
                     columns: Callable[[int], dict[str, float]] | None = None) -> int | None:
    """Fill the noise columns of ``rows`` (when :func:`simulates_noise`) and return
    :func:`best_simulated`. ``columns(layers)`` gives a depth's columns (default: simulated here
    by :func:`depth_noise_columns`; parallel sizing passes results computed by its workers)."""
    if not simulates_noise(basis, settings, log):
        return None
    from circuits.native import NotDecomposable

    if columns is None:
        columns = (lambda layers: depth_noise_columns(basis, settings, profile, layers, trajectories[layers]))
    shots = sizing_shots(settings)
    for row in rows:
        try:
            values = columns(row.layers)
        except NotDecomposable as exc:  # a lab could not run it either: leave the columns empty
            if log:
                log(f"noise sizing of {settings.family} layers skipped: no native export ({exc})")
            return None
        for name, value in values.items():
            setattr(row, name, value)
        if log:
            log(f"{settings.family} D = {row.layers} under noise: F {row.noisy_fidelity:.4f}, post-selected "
                f"{row.post_selected_fidelity:.4f}, discarded {row.discard_rate:.3f}, "
                f"predicted error {row.predicted_observable_error:.3e} at {shots} shots")
    return best_simulated(rows, settings.t_final)


class DepthScan:
    """The depth search of one family (:func:`size_depth`), fed with fitted depths in order.

    :meth:`next_depth` is the depth the search fits next (None once it is finished: one depth
    past the first meeting the tolerance, or ``max_layers``); :meth:`abort` is that depth's
    abort bound given the shallower depths (:func:`abort_thresholds` and, with ``fast``, the best
    total fidelity B so far); :meth:`add` takes a fitted depth, cut at its bound
    (:func:`~lgt.variational.stepper.truncated`, so a fit run with a looser bound gives the same
    row), and returns its row and log line.
    """

    def __init__(self, basis: PhysicalBasis, settings: VariationalSettings, costing: Costing,
                 fast: bool = True) -> None:
        self.basis, self.settings, self.costing, self.fast = basis, settings, costing, fast
        self.thresholds = abort_thresholds(basis, settings, costing)
        self.noise = noise_fidelities(basis, settings, costing)
        self.rows: list[DepthRow] = []
        self.trajectories: dict[int, VariationalTrajectory] = {}
        self.chosen: int | None = None
        self.best_total = 0.0
        self.finished = False

    def next_depth(self) -> int | None:
        if self.finished:
            return None
        return len(self.rows) + 1

    def abort(self, layers: int, best_total: float | None = None) -> float | None:
        """Abort bound of depth ``layers`` when the best total fidelity of the shallower depths
        is ``best_total`` (default: of the depths added so far)."""
        best = self.best_total if best_total is None else best_total
        abort = self.thresholds[layers]
        if self.fast and abort is not None and self.noise[layers] > 0:
            abort = max(self.settings.tolerance, min(abort, 1.0 - best / self.noise[layers]))
        return abort

    def add(self, layers: int, traj: VariationalTrajectory, seconds: float,
            ansatz: ModelAnsatz | None = None) -> tuple[DepthRow, str]:
        from lgt.variational.stepper import truncated

        if layers != self.next_depth():
            raise ValueError(f"depth {layers} added out of order (expected {self.next_depth()})")
        traj = truncated(traj, self.abort(layers))
        ansatz = ansatz or depth_ansatz(self.basis, self.settings, layers)
        row = depth_row(self.basis, self.settings, ansatz, traj, seconds, self.costing)
        self.best_total = max(self.best_total, row.total_fidelity)
        self.rows.append(row)
        self.trajectories[layers] = traj
        if self.chosen is not None:
            self.finished = True  # one layer past the chosen depth shows the budget trend
        elif row.meets_tolerance:
            self.chosen = layers
        self.finished = self.finished or layers == self.settings.max_layers
        message = (f"{self.settings.family} D = {layers}: max infidelity {row.max_infidelity:.2e}, "
                   f"{row.two_qudit_gates} two-qudit gates, {row.fit_seconds:.1f} s")
        return row, message

    def result(self, psi0: np.ndarray, baselines: bool, log: Callable[[str], None] | None = None,
               columns: Callable[[int], dict[str, float]] | None = None) -> SizingResult:
        """The family's :class:`SizingResult`: noise sizing (``columns``: see
        :func:`add_noise_sizing`) and, with ``baselines``, the Trotter baseline and shots."""
        from lgt.variational.shots import shots_needed

        basis, settings, rows = self.basis, self.settings, self.rows
        best = max(rows, key=lambda r: r.total_fidelity).layers if rows else None
        simulated = add_noise_sizing(basis, settings, self.costing.profile, rows, self.trajectories, log, columns)
        if not baselines:
            return SizingResult(rows, self.chosen, best, [], {}, self.trajectories, simulated)
        trotter = trotter_rows(basis, psi0, settings, self.costing.terms())
        reference = self.trajectories[self.chosen if self.chosen is not None else rows[-1].layers]
        shots = shots_needed(basis, reference.exact_states, settings.shots_error)
        return SizingResult(rows, self.chosen, best, trotter, shots, self.trajectories, simulated)


def size_depth(basis: PhysicalBasis, psi0: np.ndarray, settings: VariationalSettings,
               costing: Costing, log: Callable[[str], None] | None = None,
               baselines: bool = True, fast: bool = True, warm_starts: bool | None = None) -> SizingResult:
    """Scan D = 1 … max_layers until the tolerance is met (plus one deeper for the budget), in
    this process (:mod:`lgt.variational.parallel` runs the same search on worker processes).

    ``baselines=False`` skips the Trotter baseline and the shot counts (used when further
    layer families are sized for comparison). ``fast``: the fast step fits; with
    ``warm_starts`` (default :data:`WARM_STARTS`) depth D + 1 is also offered depth D's angles
    plus an identity layer.
    """
    warm_starts = WARM_STARTS if warm_starts is None else warm_starts
    scan = DepthScan(basis, settings, costing, fast)
    shallower = None
    while (layers := scan.next_depth()) is not None:
        traj, seconds, ansatz = fit_depth(basis, psi0, settings, layers, getattr(log, "step", None),
                                          scan.abort(layers), fast, shallower if fast and warm_starts else None)
        shallower = (ansatz, traj)
        _, message = scan.add(layers, traj, seconds, ansatz)
        if log:
            log(message)
    return scan.result(psi0, baselines, log)


def rows_table(row_type: type, rows: list, description: str) -> Table:
    """A :class:`~lgt.results.Table` with one column per field of the dataclass ``row_type``
    (``None`` stored as :data:`NONE`)."""
    names = [f.name for f in fields(row_type)]
    columns = {n: np.array([NONE if getattr(r, n) is None else getattr(r, n) for r in rows]) for n in names}
    return Table(columns, {n: u for n, u in COLUMN_UNITS.items() if n in columns}, description)


def trajectory_table(trajectories: dict[int, VariationalTrajectory], family: str) -> Table:
    """Fit diagnostics of every depth in long form: one row per (layers, stored time)."""
    trajs = [(D, t) for D, t in sorted(trajectories.items())]
    cat = (lambda get: np.concatenate([get(D, t) for D, t in trajs]) if trajs else np.zeros(0))
    columns = {"layers": cat(lambda D, t: np.full(t.times.size, D)), "time": cat(lambda D, t: t.times),
               "fidelity": cat(lambda D, t: t.fidelity), "step_infidelity": cat(lambda D, t: t.step_infidelity),
               "leakage": cat(lambda D, t: t.leakage), "optimizer_iterations": cat(lambda D, t: t.iterations),
               "step_seconds": cat(lambda D, t: t.wall_time)}
    return Table(columns, {n: u for n, u in COLUMN_UNITS.items() if n in columns},
                 f"{family} layers: accumulated fidelity with the exact state, step fits and leakage per depth and time")
