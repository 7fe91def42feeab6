"""The one term list of the lattice Schwinger Hamiltonian (docs/conventions.md §1–2).

Each :class:`ModelTerm` is a real-symmetric operator on a few contiguous link qudits, stored
sparse (a 3-link hopping term at d = 11 would be a 14 MB dense matrix) and handed out dense
through :attr:`ModelTerm.matrix` for circuit layers:

* ``hopping`` across link n — on links n−1, n, n+1 (fewer at the ends): raises L_n by one iff
  the implied n_n = 0 and n_{n+1} = 1, amplitude w ⟨L+1|U|L⟩, plus the conjugate;
* ``mass`` on site n — on links n−1, n: m (−1)^n n_n, diagonal;
* ``electric`` on link n — on link n: J (L_n + θ/2π)², diagonal.

The occupations come from :mod:`lgt.gauss`. Every other view of H (physical-subspace CSR, the
per-term physical operators, the register operator) is derived from this list in
:mod:`lgt.hamiltonian`. Adding a term kind means adding one builder here.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import scipy.sparse as sp

from lgt.gauss import site_occupation, staggering
from lgt.model import ModelParams

TERM_KINDS = ("hopping", "mass", "electric")


@dataclass(frozen=True)
class ModelTerm:
    """A term of H as a dense operator on a few contiguous register qudits.

    Attributes
    ----------
    kind : {"hopping", "mass", "electric"}
    index : int
        Link (hopping, electric) or site (mass) of the term.
    links : tuple of int
        Link qudits it acts on, ascending (row-major order inside ``matrix``).
    operator : (d^k, d^k) scipy CSR matrix
        Real symmetric, lattice energy units.
    """

    kind: str
    index: int
    links: tuple[int, ...]
    operator: sp.csr_matrix

    @property
    def matrix(self) -> np.ndarray:
        """The local operator as a dense (d^k, d^k) float array."""
        return self.operator.toarray()

    @property
    def qudits(self) -> tuple[int, ...]:
        """The register qudits of the term (= ``links``: link n ↔ qudit n)."""
        return self.links

    @property
    def diagonal(self) -> bool:
        """True when the term is diagonal in the level basis."""
        coo = self.operator.tocoo()
        return bool(np.all(coo.row[coo.data != 0] == coo.col[coo.data != 0]))


def local_configurations(d: int, k: int) -> np.ndarray:
    """All k-qudit level configurations, row-major, shape (d^k, k)."""
    return np.stack(np.unravel_index(np.arange(d ** k), (d,) * k), axis=1)


def _window(params: ModelParams, first: int, last: int) -> tuple[tuple[int, ...], dict]:
    """In-range links first..last and their columns over all local configurations."""
    links = tuple(q for q in range(first, last + 1) if 0 <= q < params.n_links)
    cfg = local_configurations(params.levels, len(links))
    return links, {q: cfg[:, i] for i, q in enumerate(links)}


def _hopping(params: ModelParams, link: int) -> ModelTerm:
    links, col = _window(params, link - 1, link + 1)
    d = params.levels
    n_here = site_occupation(params, link, col.get(link - 1), col[link])
    n_next = site_occupation(params, link + 1, col[link], col.get(link + 1))
    jl = col[link]
    src = np.flatnonzero((n_here == 0) & (n_next == 1) & (jl < d - 1))
    step = d ** (len(links) - 1 - links.index(link))
    amp = params.hopping * params.raising_amplitudes()[jl[src]]
    raise_ = sp.csr_matrix((amp, (src + step, src)), shape=(d ** len(links),) * 2)
    return ModelTerm("hopping", link, links, (raise_ + raise_.T).tocsr())


def _mass(params: ModelParams, site: int) -> ModelTerm:
    links, col = _window(params, site - 1, site)
    n = site_occupation(params, site, col.get(site - 1), col.get(site))
    sign = 1 - 2 * staggering(params.sites)[site]
    return ModelTerm("mass", site, links, sp.diags(params.mass * sign * n.astype(float)).tocsr())


def electric_per_level(params: ModelParams) -> np.ndarray:
    """J (L + θ/2π)² for the d levels of one link."""
    return params.coupling * (params.field_values + params.theta / (2 * np.pi)) ** 2


def _electric(params: ModelParams, link: int) -> ModelTerm:
    return ModelTerm("electric", link, (link,), sp.diags(electric_per_level(params)).tocsr())


#: Builder and index range (links or sites) of each term kind.
_BUILDERS: dict[str, tuple[Callable[[ModelParams, int], ModelTerm], Callable[[ModelParams], int]]] = {
    "hopping": (_hopping, lambda p: p.n_links),
    "mass": (_mass, lambda p: p.sites),
    "electric": (_electric, lambda p: p.n_links),
}


def model_terms(params: ModelParams, kinds: tuple[str, ...] = TERM_KINDS) -> list[ModelTerm]:
    """All terms of H (hopping on ≤ 3 links, mass on ≤ 2, electric on 1), grouped by kind.

    On the physical subspace they sum to H; on the whole register they preserve every
    Gauss-law sector.
    """
    out = []
    for kind in kinds:
        build, count = _BUILDERS[kind]
        out += [build(params, i) for i in range(count(params))]
    return out


__all__ = ["TERM_KINDS", "ModelTerm", "model_terms", "local_configurations", "electric_per_level"]
