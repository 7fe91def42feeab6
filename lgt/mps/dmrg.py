"""Ground and low excited states by DMRG (White, PRL 69, 2863 (1992)) on physics-tenpy.

The MPO is :func:`lgt.mps.mpo.hamiltonian_mpo` of the model's own local terms. The register
Hamiltonian also acts on unphysical Gauss-law sectors (some implied occupation outside {0, 1}),
which can lie lower than the physical ground state, so DMRG minimises H + λ Σ_n (1 − P_n): the
penalty vanishes on the physical subspace and commutes with H, so physical levels are unchanged.
After every state its weight outside the physical subspace is measured with the projector MPO;
if it is not negligible λ is raised and the search repeated. Excited states come from
orthogonal DMRG (tenpy's ``orthogonal_to``: each new state is optimised orthogonal to the ones
found before); the MPO is shifted by a negative constant so every target energy is negative,
as tenpy's orthogonal projection requires.
"""

from __future__ import annotations

import logging
import warnings
from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

from fluxline_threads import single_threaded_blas
from lgt.config import as_choice, as_int, check_keys
from lgt.errors import ConfigError
from lgt.model import ModelParams
from lgt.mps import require_tenpy
from lgt.mps.chain import ChainMPS
from lgt.mps.mpo import hamiltonian_mpo, physical_projector_mpo, to_tenpy

#: Default DMRG settings (common practice, no source): bond-dimension cap, energy tolerance.
DEFAULT_DMRG_CHI = 128
DEFAULT_ENERGY_TOLERANCE = 1e-11
#: Schmidt values below this are dropped (weight < 1e-18 each; common practice, no source).
#: With 1e-12 the N = 100 ground state kept χ = 21 instead of 12 at the same energy (to 2e-12)
#: and each sweep cost twice as much (measured, benchmarks/bench_dmrg.py).
SCHMIDT_CUTOFF = 1e-9
#: Sweep caps: the ground state converges in 4 sweeps at N = 100 (measured); excited states are
#: refined by the Rayleigh–Ritz step afterwards, so their sweeps stop early.
GROUND_SWEEPS = 30
EXCITED_SWEEPS = 8
#: Largest tolerated weight outside the physical subspace before the penalty is raised.
LEAKAGE_LIMIT = 1e-6
PENALTY_ROUNDS = 4
#: Largest estimated energy error of a converged level, in units of the energy scale. The
#: estimate is min(variance / gap, √variance): the Kato–Temple bound variance / gap with the gap
#: to the nearest other returned level (1 lattice unit when only one level is asked for), capped
#: by the Krylov–Weinstein bound √variance (variance = ⟨H²⟩ − ⟨H⟩², lattice units²; textbook:
#: Parlett, The Symmetric Eigenvalue Problem, 1998). The gap is estimated from the returned
#: levels, so the flag is a diagnostic, not a guarantee. The limit is relative to the model's
#: energy scale (mean operator norm of one local term, :func:`energy_scale`: 0.89 for N = 10,
#: w = J = 1, m = 0.3; 7.0 in the continuum form at x = 16). Larger: a warning and a flag.
ERROR_LIMIT = 1e-6


@dataclass
class DMRGResult:
    """Energies (lattice units, ascending), states and diagnostics.

    ``energies`` are the Rayleigh–Ritz values in the span of the DMRG states and ``states`` the
    matching Ritz vectors; ``dmrg_energies`` are the energies of the raw orthogonal-DMRG states
    (search order); ``variance`` is ⟨H²⟩ − ⟨H⟩² of each returned state (lattice units²), a bound
    on its energy error: |E − E_exact| ≤ variance / (gap to the nearest other level).
    """

    energies: np.ndarray
    states: list[ChainMPS]
    max_bond: list[int]
    truncation_error: list[float]
    leakage: list[float]
    penalty: float
    sweeps: list[int] = field(default_factory=list)
    dmrg_energies: np.ndarray = field(default_factory=lambda: np.zeros(0))
    variance: list[float] = field(default_factory=list)
    #: Absolute error limit of this model (lattice units): ERROR_LIMIT × energy_scale(params).
    error_limit: float = ERROR_LIMIT

    @property
    def error_estimate(self) -> np.ndarray:
        """Estimated energy error of each level (lattice units; see :data:`ERROR_LIMIT`)."""
        var = np.maximum(np.asarray(self.variance, dtype=float), 0.0)
        E = np.asarray(self.energies, dtype=float)
        gaps = np.abs(E[:, None] - E[None, :]) + np.diag(np.full(len(E), np.inf))
        gap = gaps.min(axis=1) if len(E) > 1 else np.ones(len(E))
        return var / np.maximum(gap, np.sqrt(var) + 1e-300)

    @property
    def unconverged(self) -> list[int]:
        """Indices (ascending energy order) of levels whose error estimate exceeds ``error_limit``."""
        return [int(i) for i in np.flatnonzero(self.error_estimate > self.error_limit)]


def tenpy_sites(params: ModelParams) -> list:
    """K tenpy sites of dimension d without conserved charges."""
    require_tenpy()
    from tenpy.linalg.charges import LegCharge
    from tenpy.networks.site import Site

    site = Site(LegCharge.from_trivial(params.levels), state_labels=[str(j) for j in range(params.levels)])
    return [site] * params.n_links


def from_tenpy(psi) -> ChainMPS:
    """A tenpy finite MPS as a ChainMPS (right-canonical, center 0)."""
    tensors = []
    for i in range(psi.L):
        B = psi.get_B(i, form="B").copy()
        B.itranspose(["vL", "p", "vR"])
        tensors.append(B.to_ndarray())
    out = ChainMPS(tensors, 0)
    out.normalize()
    return out


def mps_to_tenpy(psi: ChainMPS, sites: list):
    """A ChainMPS as a tenpy MPS (via right-canonical tensors and their Schmidt values)."""
    from tenpy.networks.mps import MPS

    psi = psi.copy()
    _, schmidt = psi.sweep_measure()  # left-canonical now, center at K − 1
    psi.move_center(0)  # right-canonical with the norm on site 0
    Bs = [np.transpose(A, (1, 0, 2)) for A in psi.tensors]
    norm = np.linalg.norm(Bs[0])
    Bs[0] = Bs[0] / norm
    SVs = [np.ones(1)] + list(schmidt) + [np.ones(1)]
    return MPS.from_Bflat(sites, Bs, SVs=SVs, bc="finite", form="B", unit_cell_width=len(sites))


def penalty_scale(params: ModelParams) -> float:
    """λ: a few times the largest local energy scale (common practice, no source).

    Chosen once up front; the leakage of every state is measured and the search repeated with a
    larger λ only if it is not negligible (never needed in the tests and benchmarks).
    """
    window = params.spin + abs(params.theta) / (2 * np.pi) + 1
    return 4.0 * (2 * abs(params.hopping) + abs(params.mass) * params.levels
                  + abs(params.coupling) * window ** 2 + 1.0)


def local_term_norms(params: ModelParams) -> np.ndarray:
    """Operator norm of each local term of the register Hamiltonian (lattice units)."""
    from lgt.hamiltonian import local_terms

    return np.array([np.abs(np.linalg.eigvalsh(t.matrix)).max() for t in local_terms(params)])


def energy_bound(params: ModelParams) -> float:
    """An upper bound on |E| of the register Hamiltonian (Σ of local operator norms)."""
    return float(local_term_norms(params).sum())


def energy_scale(params: ModelParams) -> float:
    """Mean operator norm of one local term (lattice units): the scale of :data:`ERROR_LIMIT`."""
    norms = local_term_norms(params)
    return float(norms.mean()) if norms.size else 1.0


def start_state(params: ModelParams, sites: list):
    """The bare-vacuum (or string) product state as a tenpy MPS: physical, so DMRG starts inside."""
    from tenpy.networks.mps import MPS

    from lgt.states import initial_fields

    levels = np.rint(initial_fields(params, {"kind": "vacuum"}) + params.spin).astype(int)
    return MPS.from_product_state(sites, [int(j) for j in levels], bc="finite", unit_cell_width=len(sites))


def engine_options(chi: int, energy_tolerance: float, excited: bool) -> dict[str, Any]:
    """tenpy ``TwoSiteDMRGEngine`` options for the ground state or an excited state.

    No mixer: two-site DMRG grows the bond from the product start by itself, and the mixer's
    perturbation (amplitude 1e-5) kept χ at the cap for sweeps at no gain in energy (N = 100:
    98 s CPU with it, 9 s without, same energy to 2e-12; measured). Excited states get a χ ramp
    (their unconverged near-degenerate mixtures otherwise fill the cap at once), longer Lanczos
    runs and few sweeps; the Rayleigh–Ritz step corrects what is left (:func:`ritz_step`).
    tenpy's own truncation check (``max_trunc_err``, an exception after the run) is off: a too
    small cap is reported by each level's error estimate instead (:data:`ERROR_LIMIT`).
    """
    options = {"mixer": False, "max_trunc_err": float("inf"), "diag_method": "lanczos",
               "max_E_err": energy_tolerance, "max_S_err": 1e-5,
               "min_sweeps": 3, "max_sweeps": GROUND_SWEEPS, "combine": True,
               "trunc_params": {"chi_max": chi, "svd_min": SCHMIDT_CUTOFF},
               "lanczos_params": {"N_max": 20, "E_tol": 1e-13}}
    if excited:
        options.update(min_sweeps=2, max_sweeps=EXCITED_SWEEPS,
                       chi_list={0: min(16, chi), 2: min(48, chi), 4: chi},
                       lanczos_params={"N_max": 30, "E_tol": 1e-13})
    return options


def ritz_step(states: list, hamiltonian) -> tuple[np.ndarray, np.ndarray]:
    """Rayleigh–Ritz in the span of the MPS ``states`` (tenpy MPS) for the tenpy MPO ``hamiltonian``.

    Builds H_ij = ⟨ψ_i|H|ψ_j⟩ and S_ij = ⟨ψ_i|ψ_j⟩ and solves H c = E S c (the subspace step
    of e.g. Saad, *Numerical Methods for Large Eigenvalue Problems*, 2011, §4.3). Returns the
    Ritz values (ascending) and the coefficient matrix (column i: Ritz vector i).
    Orthogonal DMRG inside a nearly degenerate pair returns a mixture of the two levels, but
    the pair's span is right, so the Ritz values are the levels to second order in the span error.
    """
    import scipy.linalg as sla
    from tenpy.networks.mpo import MPOEnvironment

    k = len(states)
    H = np.array([[complex(MPOEnvironment(a, hamiltonian, b).full_contraction(0)) for b in states] for a in states])
    S = np.array([[complex(a.overlap(b)) for b in states] for a in states])
    H, S = (H + H.conj().T) / 2, (S + S.conj().T) / 2
    if k == 1:
        return np.array([H[0, 0].real / S[0, 0].real]), np.ones((1, 1))
    values, vectors = sla.eigh(H, S)
    return values, vectors


def rotate_states(states: list, coefficients: np.ndarray, chi: int) -> list:
    """Ritz vectors Σ_j c_ji ψ_j as tenpy MPS (exact sums, then SVD-truncated to ``chi``)."""
    out = []
    for i in range(coefficients.shape[1]):
        c = coefficients[:, i]
        j0 = int(np.argmax(np.abs(c)))
        if np.abs(np.delete(c, j0)).max(initial=0.0) < 1e-12:  # no mixing: keep the DMRG state
            out.append(states[j0])
            continue
        psi = states[j0].copy()
        psi.norm = 1.0
        total, weight = psi, c[j0]
        for j in np.argsort(-np.abs(c)):
            if j == j0 or abs(c[j]) < 1e-14:
                continue
            total = total.add(states[j], weight, c[j], cutoff=SCHMIDT_CUTOFF)
            weight = 1.0
        total.compress_svd({"chi_max": max(chi, max(total.chi)), "svd_min": SCHMIDT_CUTOFF})
        total.norm = 1.0
        out.append(total)
    return out


def lowest_states(params: ModelParams, count: int = 1, chi: int = DEFAULT_DMRG_CHI,
                  energy_tolerance: float = DEFAULT_ENERGY_TOLERANCE) -> DMRGResult:
    """The ``count`` lowest physical levels by (orthogonal) two-site DMRG and a Rayleigh–Ritz step.

    Parameters
    ----------
    chi : bond-dimension cap; ``energy_tolerance`` : sweep-to-sweep energy change to stop at
    (relative to max(|E|, 1), tenpy's ``max_E_err``).
    """
    require_tenpy()
    from tenpy.tools.optimization import OptimizationFlag, temporary_level

    logging.getLogger("tenpy").setLevel(logging.WARNING)
    # small dense algebra: BLAS threads only contend (measured 13x); tenpy's per-call sanity
    # checks took 12 % of a DMRG run (measured) and are skipped on our own, checked MPO
    with single_threaded_blas(), temporary_level(OptimizationFlag.skip_arg_checks):
        return _lowest_states(params, count, chi, energy_tolerance)


def _lowest_states(params: ModelParams, count: int, chi: int, energy_tolerance: float) -> DMRGResult:
    from tenpy.algorithms.dmrg import TwoSiteDMRGEngine
    from tenpy.models.lattice import Chain
    from tenpy.models.model import MPOModel

    sites = tenpy_sites(params)
    # orthogonal DMRG projects found states to eigenvalue 0: shift every target below zero
    shift = energy_bound(params) + 1.0 if count > 1 else 0.0
    projector = physical_projector_mpo(params)
    penalty = penalty_scale(params)
    for _ in range(PENALTY_ROUNDS):
        mpo = to_tenpy(hamiltonian_mpo(params, penalty=penalty, constant=-shift), sites)
        model = MPOModel(Chain(len(sites), sites[0], bc="open", bc_MPS="finite"), mpo)
        found, energies, info = [], [], {"chi": [], "err": [], "leak": [], "sweeps": []}
        leaked = False
        for k in range(count):
            engine = TwoSiteDMRGEngine(start_state(params, sites), model,
                                       engine_options(chi, energy_tolerance, excited=k > 0),
                                       orthogonal_to=list(found))
            E, psi = engine.run()
            leak = 1.0 - from_tenpy(psi).expectation(projector).real
            info["chi"].append(max(psi.chi))
            info["err"].append(float(engine.sweep_stats["max_trunc_err"][-1]))
            info["leak"].append(float(leak))
            info["sweeps"].append(int(engine.sweeps))
            if leak > LEAKAGE_LIMIT:
                leaked = True
                break
            found.append(psi)
            energies.append(float(E) + shift)
        if not leaked:
            break
        penalty *= 8.0
    else:
        raise RuntimeError(f"DMRG kept converging outside the physical subspace (penalty up to {penalty:g})")
    hamiltonian = to_tenpy(hamiltonian_mpo(params, penalty=penalty), sites)
    values, coefficients = ritz_step(found, hamiltonian)
    states = rotate_states(found, coefficients, chi)
    variance = [float(np.real(hamiltonian.variance(psi, exp_val=E))) for psi, E in zip(states, values)]
    result = DMRGResult(np.asarray(values, dtype=float), [from_tenpy(p) for p in states], info["chi"], info["err"],
                        info["leak"], penalty, info["sweeps"], np.asarray(energies), variance,
                        ERROR_LIMIT * energy_scale(params))
    if result.unconverged:
        worst = float(result.error_estimate.max())
        warnings.warn(f"DMRG levels {result.unconverged} not converged: estimated energy error up to {worst:.1e} "
                      f"(limit {result.error_limit:.1e}; variance up to {max(variance):.1e}); "
                      "raise bond_dimension or ask for fewer levels", RuntimeWarning, stacklevel=2)
    return result


def ground_state(params: ModelParams, chi: int = DEFAULT_DMRG_CHI) -> tuple[float, ChainMPS]:
    """Ground energy (lattice units) and the normalised ground MPS."""
    res = lowest_states(params, 1, chi)
    return float(res.energies[0]), res.states[0]


def lowest_levels(params: ModelParams, count: int, chi: int = DEFAULT_DMRG_CHI) -> np.ndarray:
    """The ``count`` lowest physical energies, sorted (lattice energy units)."""
    return np.sort(lowest_states(params, count, chi).energies)


def ground_energy(params: ModelParams, chi: int = DEFAULT_DMRG_CHI) -> float:
    """Lowest physical energy (lattice units)."""
    return float(lowest_states(params, 1, chi).energies[0])


def meson_masses(params: ModelParams, count: int = 3, chi: int = DEFAULT_DMRG_CHI) -> np.ndarray:
    """The ``count`` lowest gaps E_k − E₀ (lattice energy units)."""
    levels = lowest_levels(params, count + 1, chi)
    return levels[1:] - levels[0]




# ---------------------------------------------------------------------- task and command hooks
#: Keys a ``[spectrum]`` / ``[potential]`` section takes for the DMRG route.
SOLVER_KEYS = ("method", "bond_dimension")
SOLVER_METHODS = ("exact", "mps")


def resolve_solver(section: Mapping[str, Any], prefix: str) -> dict[str, Any]:
    """``method`` ("exact" | "mps", default exact) and, for mps, ``bond_dimension`` (default 128).

    Raises ConfigError naming ``<prefix>.method`` / ``<prefix>.bond_dimension``.
    """
    method = as_choice(section.get("method", "exact"), f"{prefix}.method", SOLVER_METHODS)
    if method == "exact":
        if "bond_dimension" in section:
            raise ConfigError(f"{prefix}.bond_dimension", section["bond_dimension"],
                              "only applies with method = \"mps\"")
        return {}
    chi = as_int(section.get("bond_dimension", DEFAULT_DMRG_CHI), f"{prefix}.bond_dimension", minimum=2)
    require_tenpy(f"{prefix}.method")  # before any work
    return {"method": "mps", "bond_dimension": chi}


def spectrum_result(params: ModelParams, count: int, chi: int) -> dict[str, Any]:
    """Lowest ``count`` levels by DMRG with the keys of the exact spectrum summary (+ diagnostics)."""
    import time

    from lgt.resources import count_physical_states

    t0 = time.perf_counter()
    res = lowest_states(params, count, chi)
    t1 = time.perf_counter()
    energies = np.sort(res.energies)
    dim = count_physical_states(params)
    return {"model": params.to_dict(), "dimension": dim if dim < 2 ** 62 else float(dim),
            "register_dimension": float(params.levels) ** params.n_links,
            "energies": [float(e) for e in energies], "gaps": [float(e - energies[0]) for e in energies],
            "build_seconds": 0.0, "solve_seconds": t1 - t0, "method": "mps", "bond_dimension": chi,
            "max_bond": [int(c) for c in res.max_bond], "truncation_error": [float(e) for e in res.truncation_error],
            "leakage": [float(x) for x in res.leakage], "variance": [float(v) for v in res.variance],
            "error_estimate": [float(e) for e in res.error_estimate], "unconverged_levels": res.unconverged}


def spectrum_summary(params: ModelParams, section: Mapping[str, Any], count: int | None = None) -> dict[str, Any]:
    """``fluxline spectrum`` with ``[spectrum] method = "mps"``: validate the section, run DMRG."""
    check_keys(section, ("count",) + SOLVER_KEYS, "spectrum")
    solver = resolve_solver(section, "spectrum")
    key, raw = ("--count", count) if count is not None else ("spectrum.count", section.get("count", 6))
    return spectrum_result(params, as_int(raw, key, minimum=1), solver["bond_dimension"])


def run_spectrum_task(resolved: Mapping[str, Any]):
    """The ``spectrum`` task's RunResult for ``method = "mps"`` (arrays energies, gaps)."""
    from lgt.results import RunResult

    spec = resolved["spectrum"]
    out = spectrum_result(ModelParams.from_dict(resolved["model"]), int(spec["count"]), int(spec["bond_dimension"]))
    return RunResult(task="spectrum", parameters=dict(resolved),
                     arrays={"energies": np.asarray(out["energies"]), "gaps": np.asarray(out["gaps"]),
                             "max_bond": np.asarray(out["max_bond"]),
                             "truncation_error": np.asarray(out["truncation_error"]),
                             "variance": np.asarray(out["variance"]),
                             "error_estimate": np.asarray(out["error_estimate"])},
                     attributes={"dimension": out["dimension"], "levels_returned": len(out["energies"]),
                                 "method": "mps", "max_leakage": max(out["leakage"]),
                                 "flag_unconverged": bool(out["unconverged_levels"])},
                     timings={"build": 0.0, "solve": out["solve_seconds"]})


__all__ = ["DMRGResult", "lowest_states", "ground_state", "lowest_levels", "ground_energy", "meson_masses", "tenpy_sites",
           "from_tenpy", "mps_to_tenpy", "penalty_scale", "energy_bound", "DEFAULT_DMRG_CHI",
           "resolve_solver", "ERROR_LIMIT", "spectrum_result", "spectrum_summary", "run_spectrum_task", "SOLVER_KEYS"]
