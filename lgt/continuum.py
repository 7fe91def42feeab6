"""Continuum limit of the Schwinger model from DMRG on long chains (docs/continuum.md).

Dimensionless form (Banks, Kogut & Susskind, PRD 13, 1043 (1976); docs/conventions.md §1):
W = Σ L² + μ Σ (−1)^n n_n + x Σ hop, i.e. the lattice model with J = 1, w = x = 1/(ga)² and
m = μ = 2 m_lat / (g² a). With the mass shift of Dempsey, Klebanov, Pufu & Zan (PRL 128,
031603 (2022)), m_lat = m − g²a/8, so μ = 2 (m/g) √x − 1/4 (the leading lattice correction
to the mass cancels). Measured at each (x, N), N = number of staggered sites:

* vector-meson mass M/g = (E₁ − E₀) / (2√x) (first excited state by orthogonal DMRG);
* ground-state energy density ω = E₀ / (2 N x), whose continuum value is the free-fermion
  −1/π (Bañuls, Cichy, Cirac & Jansen, JHEP 11 (2013) 158, same normalisation);
* chiral condensate Σ/g = (√x / n) Σ_{n in the bulk} (−1)^n ⟨n_n⟩, averaged over the central
  ``bulk_fraction`` of the chain to keep the open ends out (Bañuls et al., PRD 93, 094512 (2016)
  use the same lattice operator).

Extrapolations, in this order. N → ∞ at fixed x: M/g from the lowest level of a relativistic
particle in a box, (E/g)² = (M/g)² + (π √x / (N + δ))² (box length (N + δ) a, lowest momentum
π/L; M and δ fitted — for the massless model the meson is exactly a free boson, Coleman, Jackiw
& Susskind, Ann. Phys. 93, 267 (1975)); Σ: the value at the largest N, with the change from
the next-largest N as its error (the bulk average converges exponentially; common practice,
no source); ω: the slope of E₀ against N, which removes the surface energy. Then x → ∞ by a
least-squares polynomial (degree ``x_degree``, weighted by the N-extrapolation errors) in
1/x for M/g (the mass shift removes the O(a) term) and ω (the electric and mass energies per
site enter ω = E₀/(2Nx) divided by x; the free-fermion part is exactly −1/π at every x), and
in 1/√x = ga for Σ. Uncertainties are the fits' standard errors
(covariance of the least-squares coefficients); they do not include the window truncation d
or the DMRG truncation, which are reported per point.

Run as ``python -m lgt.continuum CONFIG.toml [--plot out.png] [--json]`` with a ``[continuum]``
section (keys: :data:`CONTINUUM_KEYS`), or as the ``continuum`` task.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np

from lgt.config import as_float, as_int, check_keys
from lgt.errors import ConfigError
from lgt.model import ModelParams
from lgt.resolved import ResolvedConfig
from lgt.results import RunResult, Table

CONTINUUM_KEYS = ("x", "volumes", "sites", "mass_over_g", "mass_shift", "levels", "bond_dimension",
                  "bulk_fraction", "x_degree")
DEFAULTS: dict[str, Any] = {"x": [4.0, 9.0, 16.0], "volumes": [6.0, 8.0, 10.0], "mass_over_g": 0.0,
                            "mass_shift": True, "levels": 5, "bond_dimension": 40, "bulk_fraction": 0.5,
                            "x_degree": 1}
#: Continuum values of the massless model, for reports and tests.
SCHWINGER_BOSON_MASS = 1.0 / np.sqrt(np.pi)  # Schwinger, Phys. Rev. 128, 2425 (1962)
MASSLESS_CONDENSATE = -np.exp(np.euler_gamma) / (2 * np.pi ** 1.5)  # Hetrick & Hosotani, PRD 38, 2621 (1988)
FREE_ENERGY_DENSITY = -1.0 / np.pi


# ---------------------------------------------------------------------- the lattice model
def lattice_mass(mass_over_g: float, x: float, mass_shift: bool = True) -> float:
    """μ = 2 (m/g) √x, minus 1/4 with the mass shift m_lat = m − g²a/8."""
    return 2.0 * mass_over_g * np.sqrt(x) - (0.25 if mass_shift else 0.0)


def dimensionless_params(x: float, sites: int, mass_over_g: float = 0.0, mass_shift: bool = True,
                         levels: int = 5, theta: float = 0.0) -> ModelParams:
    """The lattice model of W at x = 1/(ga)²: J = 1, w = x, m = μ (docs/conventions.md §1)."""
    return ModelParams(sites=sites, hopping=x, mass=lattice_mass(mass_over_g, x, mass_shift), coupling=1.0,
                       theta=theta, levels=levels)


def sites_for_volume(x: float, volume: float) -> int:
    """Even N closest to the box length L·g = N / √x (= N a g)."""
    return max(4, 2 * int(round(volume * np.sqrt(x) / 2)))


def condensate(occupation: np.ndarray, x: float, bulk_fraction: float = 0.5) -> float:
    """Σ/g = (√x / n) Σ (−1)^n ⟨n_n⟩ over the central ``bulk_fraction`` of the chain (n even)."""
    N = len(occupation)
    n_bulk = max(2, 2 * int(round(bulk_fraction * N / 2)))
    start = (N - n_bulk) // 2
    start -= start % 2  # begin on an even site so the bulk holds whole unit cells
    sites = np.arange(start, start + n_bulk)
    return float(np.sqrt(x) * np.mean((-1.0) ** sites * np.asarray(occupation)[sites]))


# ---------------------------------------------------------------------- fits
def weighted_fit(u: np.ndarray, y: np.ndarray, degree: int, sigma: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Least-squares polynomial y ≈ Σ c_k u^k (c_0 first) and its covariance.

    With ``sigma`` the covariance is scaled by the reduced χ² when it exceeds 1 (so scatter
    beyond the quoted errors shows); without, by the residual variance (needs a spare point).
    """
    u, y = np.asarray(u, float), np.asarray(y, float)
    A = np.vander(u, degree + 1, increasing=True)
    w = np.ones_like(y) if sigma is None else 1.0 / np.maximum(np.asarray(sigma, float), 1e-15)
    Aw, yw = A * w[:, None], y * w
    coef, *_ = np.linalg.lstsq(Aw, yw, rcond=None)
    dof = len(y) - degree - 1
    cov = np.linalg.pinv(Aw.T @ Aw)
    chi2 = float(np.sum((Aw @ coef - yw) ** 2))
    if sigma is None:
        cov = cov * (chi2 / dof if dof > 0 else np.nan)
    elif dof > 0:
        cov = cov * max(1.0, chi2 / dof)
    return coef, cov


def extrapolate(u: Sequence[float], y: Sequence[float], degree: int = 1,
                sigma: Sequence[float] | None = None) -> tuple[float, float]:
    """Value at u = 0 of the polynomial fit and its standard error."""
    coef, cov = weighted_fit(np.asarray(u), np.asarray(y), degree, None if sigma is None else np.asarray(sigma))
    return float(coef[0]), float(np.sqrt(cov[0, 0])) if np.isfinite(cov[0, 0]) else float("nan")


# ---------------------------------------------------------------------- configuration
@dataclass(frozen=True)
class ContinuumConfig(ResolvedConfig):
    """Task ``continuum``: the resolved ``[continuum]`` section (canonical form)."""

    section: Mapping[str, Any]

    def to_dict(self) -> dict[str, Any]:
        return {"continuum": dict(self.section)}


def resolve_continuum(config: Mapping[str, Any]) -> ContinuumConfig:
    """Validate ``[continuum]`` (no heavy work); a resolved config is returned as is."""
    if isinstance(config, ContinuumConfig):
        return config
    section = config.get("continuum")
    if not isinstance(section, Mapping):
        raise ConfigError("continuum", section, "section (a table) is required by the continuum task")
    check_keys(section, CONTINUUM_KEYS, "continuum")
    p = "continuum."
    out = {**DEFAULTS, **dict(section)}
    xs = out["x"]
    if not isinstance(xs, (list, tuple)) or len(xs) < 2:
        raise ConfigError(p + "x", xs, "must be a list of at least two values of x = 1/(ga)²")
    out["x"] = sorted(as_float(v, p + "x", positive=True) for v in xs)
    if "sites" in section and "volumes" in section:
        raise ConfigError(p + "sites", section["sites"], "give either sites or volumes, not both")
    key = "sites" if "sites" in section else "volumes"
    raw = out[key]
    if not isinstance(raw, (list, tuple)) or len(raw) < 2:
        raise ConfigError(p + key, raw, "must be a list of at least two chain sizes")
    if key == "sites":
        out["sites"] = sorted(as_int(v, p + "sites", minimum=4) for v in raw)
        if any(n % 2 for n in out["sites"]):
            raise ConfigError(p + "sites", raw, "must be even")
        out.pop("volumes", None)
    else:
        out["volumes"] = sorted(as_float(v, p + "volumes", positive=True) for v in raw)
    out["mass_over_g"] = as_float(out["mass_over_g"], p + "mass_over_g")
    if not isinstance(out["mass_shift"], bool):
        raise ConfigError(p + "mass_shift", out["mass_shift"], "must be true or false")
    out["levels"] = as_int(out["levels"], p + "levels", minimum=3)
    if out["levels"] % 2 == 0:
        raise ConfigError(p + "levels", out["levels"], "must be odd (truncated links, integer window)")
    out["bond_dimension"] = as_int(out["bond_dimension"], p + "bond_dimension", minimum=2)
    out["bulk_fraction"] = as_float(out["bulk_fraction"], p + "bulk_fraction", positive=True)
    if out["bulk_fraction"] > 1:
        raise ConfigError(p + "bulk_fraction", out["bulk_fraction"], "must be at most 1")
    out["x_degree"] = as_int(out["x_degree"], p + "x_degree", minimum=0)
    if out["x_degree"] >= len(out["x"]):
        raise ConfigError(p + "x_degree", out["x_degree"], f"needs more than {out['x_degree']} values of x")
    return ContinuumConfig(out)


def chain_sizes(section: Mapping[str, Any], x: float) -> list[int]:
    """N values at ``x`` (explicit ``sites``, or one per box length in ``volumes``)."""
    if "sites" in section:
        return list(section["sites"])
    return sorted({sites_for_volume(x, v) for v in section["volumes"]})


# ---------------------------------------------------------------------- the workflow
def measure_point(x: float, sites: int, section: Mapping[str, Any]) -> dict[str, float]:
    """E₀, E₁, M/g, ω and Σ/g at one (x, N) by DMRG."""
    from lgt.mps.dmrg import lowest_states
    from lgt.mps.evolve import MPSObserver

    params = dimensionless_params(x, sites, section["mass_over_g"], section["mass_shift"], section["levels"])
    t0 = time.perf_counter()
    res = lowest_states(params, 2, int(section["bond_dimension"]), energy_tolerance=1e-10)
    seconds = time.perf_counter() - t0
    ground = res.states[0]
    occ = MPSObserver(params, ground, 1, ["occupation"]).measure(ground.copy())["occupation"]
    e0, e1 = float(res.energies[0]), float(res.energies[1])
    return {"x": x, "sites": sites, "volume": sites / np.sqrt(x), "E0": e0, "E1": e1,
            "meson_mass": (e1 - e0) / (2 * np.sqrt(x)), "energy_density": e0 / (2 * sites * x),
            "condensate": condensate(occ, x, section["bulk_fraction"]),
            "max_bond": int(max(res.max_bond)), "truncation_error": float(max(res.truncation_error)),
            "seconds": seconds}


def extrapolate_volume(points: list[dict[str, float]]) -> dict[str, float]:
    """N → ∞ at one x: M/g in 1/N², Σ/g in 1/N, ω from the slope of E₀ against N."""
    N = np.array([p["sites"] for p in points], float)
    x = points[0]["x"]
    M, dM = box_mass(N, np.array([p["meson_mass"] for p in points]), x)
    order = np.argsort(N)
    cond = np.array([p["condensate"] for p in points])[order]
    S, dS = float(cond[-1]), float(abs(cond[-1] - cond[-2]))
    coef, cov = weighted_fit(N, [p["E0"] for p in points], 1)
    w, dw = coef[1] / (2 * x), np.sqrt(cov[1, 1]) / (2 * x) if np.isfinite(cov[1, 1]) else np.nan
    return {"x": x, "meson_mass": M, "meson_mass_err": dM, "condensate": S, "condensate_err": dS,
            "energy_density": float(w), "energy_density_err": float(dw)}


def box_mass(N: np.ndarray, mass: np.ndarray, x: float) -> tuple[float, float]:
    """Fit (M_N/g)² = (M/g)² + (π √x / (N + δ))²; returns M/g and its standard error (NaN without spare points)."""
    from scipy.optimize import least_squares

    def residual(p: np.ndarray) -> np.ndarray:
        return np.sqrt(p[0] ** 2 + np.pi ** 2 * x / (N + p[1]) ** 2) - mass

    fit = least_squares(residual, [float(mass.min()), 1.0])
    dof = len(N) - 2
    if dof <= 0:
        return float(abs(fit.x[0])), float("nan")
    J = fit.jac
    cov = np.linalg.pinv(J.T @ J) * float(np.sum(fit.fun ** 2)) / dof
    return float(abs(fit.x[0])), float(np.sqrt(cov[0, 0]))


#: Variable of the x → ∞ fit per quantity (see the module docstring).
SPACING_POWER = {"meson_mass": 1.0, "energy_density": 1.0, "condensate": 0.5}


def _sigma(errors: np.ndarray) -> np.ndarray | None:
    """Fit weights from N-extrapolation errors, or None when some are unknown (two sizes)."""
    errors = np.asarray(errors, float)
    if not np.all(np.isfinite(errors)) or np.any(errors <= 0):
        return None
    return errors


def extrapolate_spacing(per_x: list[dict[str, float]], degree: int) -> dict[str, float]:
    """x → ∞: polynomial in x^(−power) (:data:`SPACING_POWER`) through the N-extrapolated values."""
    out = {}
    for name, power in SPACING_POWER.items():
        u = np.asarray([p["x"] for p in per_x], float) ** -power
        y = [p[name] for p in per_x]
        val, err = extrapolate(u, y, degree, _sigma([p[name + "_err"] for p in per_x]))
        out[name], out[name + "_err"] = val, err
    return out


def run_continuum(resolved: Mapping[str, Any], progress: bool = False) -> RunResult:
    """Sweep x and N, extrapolate, return the tables ``points``, ``per_x`` and ``continuum``."""
    section = resolve_continuum(resolved)["continuum"]
    t0 = time.perf_counter()
    points, per_x = [], []
    for x in section["x"]:
        here = []
        for N in chain_sizes(section, x):
            here.append(measure_point(x, N, section))
            if progress:
                p = here[-1]
                print(f"x = {x:g}, N = {N}: M/g = {p['meson_mass']:.6f}, omega = {p['energy_density']:.6f}, "
                      f"Sigma/g = {p['condensate']:.6f} ({p['seconds']:.0f} s)", file=sys.stderr)
        points += here
        per_x.append(extrapolate_volume(here))
    final = extrapolate_spacing(per_x, int(section["x_degree"]))
    t1 = time.perf_counter()
    tables = {
        "points": Table({k: np.array([p[k] for p in points]) for k in points[0]},
                        {"E0": "lattice energy (W)", "E1": "lattice energy (W)", "meson_mass": "g",
                         "condensate": "g", "energy_density": "dimensionless (E0 / 2Nx)", "seconds": "s"},
                        "one DMRG point (x, N)"),
        "per_x": Table({k: np.array([p[k] for p in per_x]) for k in per_x[0]}, {"meson_mass": "g", "condensate": "g"},
                       "N → ∞ extrapolation at each x"),
        "continuum": Table({k: np.array([v]) for k, v in final.items()}, {"meson_mass": "g", "condensate": "g"},
                           "x → ∞ extrapolation (a → 0)"),
    }
    attributes = {f"continuum_{k}": float(v) for k, v in final.items()}
    if section["mass_over_g"] == 0.0:
        attributes.update(reference_meson_mass=float(SCHWINGER_BOSON_MASS),
                          reference_condensate=float(MASSLESS_CONDENSATE))
    attributes["reference_energy_density"] = FREE_ENERGY_DENSITY
    return RunResult(task="continuum", parameters={"continuum": section}, tables=tables,
                     arrays={"x": np.asarray(section["x"])},
                     attributes=attributes, timings={"dmrg": t1 - t0})


def plot_continuum(result: RunResult, path: str) -> None:
    """Three panels (M/g, ω, Σ/g) against their fit variable: points per N, N → ∞ values, fit, a → 0 value."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    pts, per_x, fin = (result.tables[k].columns for k in ("points", "per_x", "continuum"))
    degree = int(result.parameters["continuum"]["x_degree"])
    fig, axes = plt.subplots(1, 3, figsize=(12, 3.6))
    refs = {"meson_mass": result.attributes.get("reference_meson_mass"),
            "energy_density": result.attributes.get("reference_energy_density"),
            "condensate": result.attributes.get("reference_condensate")}
    labels = {"meson_mass": "M / g", "energy_density": "E₀ / (2Nx)", "condensate": "Σ / g"}
    for ax, name in zip(axes, labels):
        power = SPACING_POWER[name]
        u = per_x["x"] ** -power
        ax.plot(pts["x"] ** -power, pts[name], ".", color="0.6", label="finite N")
        ax.errorbar(u, per_x[name], yerr=np.nan_to_num(per_x[name + "_err"]), fmt="o", label="N → ∞")
        coef, _ = weighted_fit(u, per_x[name], degree, _sigma(per_x[name + "_err"]))
        grid = np.linspace(0, u.max() * 1.05, 50)
        ax.plot(grid, np.polyval(coef[::-1], grid), "-", lw=1)
        ax.errorbar([0], fin[name], yerr=np.nan_to_num(fin[name + "_err"]), fmt="s", color="k", label="a → 0")
        if refs[name] is not None:
            ax.axhline(refs[name], ls="--", color="r", lw=0.8, label="continuum value")
        ax.set_xlabel("1/x = (ga)²" if power == 1.0 else "1/√x = ga")
        ax.set_ylabel(labels[name])
    axes[0].legend(fontsize=7)
    fig.tight_layout()
    fig.savefig(path, dpi=120)
    plt.close(fig)


def main(argv: list[str] | None = None) -> int:
    """``python -m lgt.continuum CONFIG.toml [--plot FILE] [--output FILE.h5] [--json]``."""
    from lgt.config import load_config

    ap = argparse.ArgumentParser(prog="python -m lgt.continuum", description=__doc__.splitlines()[0])
    ap.add_argument("config")
    ap.add_argument("--plot", help="write the extrapolation plot to this image file")
    ap.add_argument("--output", help="write the run (tables) to this HDF5 file")
    ap.add_argument("--json", action="store_true", help="print the continuum values as JSON")
    args = ap.parse_args(argv)
    try:
        resolved = resolve_continuum(load_config(args.config))
    except ConfigError as exc:
        print(f"fluxline: error: {exc}", file=sys.stderr)
        return 2
    result = run_continuum(resolved, progress=not args.json)
    if args.plot:
        plot_continuum(result, args.plot)
    if args.output:
        from lgt.io import write_run_file

        write_run_file(args.output, result)
    fin = {k: float(v[0]) for k, v in result.tables["continuum"].columns.items()}
    if args.json:
        print(json.dumps(fin))
        return 0
    print(f"M/g    = {fin['meson_mass']:.5f} ± {fin['meson_mass_err']:.5f}")
    print(f"E0/2Nx = {fin['energy_density']:.5f} ± {fin['energy_density_err']:.5f}")
    print(f"Σ/g    = {fin['condensate']:.5f} ± {fin['condensate_err']:.5f}")
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

__all__ = ["lattice_mass", "dimensionless_params", "sites_for_volume", "condensate", "weighted_fit",
           "extrapolate", "resolve_continuum", "run_continuum", "plot_continuum", "measure_point",
           "extrapolate_volume", "extrapolate_spacing", "box_mass", "SPACING_POWER", "SCHWINGER_BOSON_MASS", "MASSLESS_CONDENSATE",
           "CONTINUUM_KEYS"]
