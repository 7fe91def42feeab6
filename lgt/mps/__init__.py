"""Matrix-product-state (MPS) backend for long chains (optional extra ``fluxline[mps]``).

The state lives on the K = N − 1 link qudits of the register (docs/conventions.md §2), the
same Hamiltonian as exact diagonalization: every MPO and every evolution gate here is built
from :func:`lgt.hamiltonian.local_terms`. Modules:

* :mod:`lgt.mps.mpo`      exact MPO of a sum of local dense operators (numpy and tenpy forms);
* :mod:`lgt.mps.chain`    finite MPS on the link chain: canonical form, gates, measurements;
* :mod:`lgt.mps.tebd`     time evolution: 3-link gates in three commuting layers, Suzuki order 4;
* :mod:`lgt.mps.dmrg`     ground and low excited states by (orthogonal) DMRG on physics-tenpy;
* :mod:`lgt.mps.evolve`   the ``[evolution] method = "mps"`` task (same observables and layout);
* :mod:`lgt.mps.guards`   memory and time estimates before a run.

Only :mod:`lgt.mps.dmrg` needs physics-tenpy; time evolution is numpy/scipy.
"""

from __future__ import annotations

from lgt.errors import ConfigError


def require_tenpy(key: str = "method"):
    """Import physics-tenpy or raise ConfigError(key, "mps", install hint) (exit status 2)."""
    try:
        import tenpy
    except ImportError:  # pragma: no cover - depends on the environment
        raise ConfigError(key, "mps", "needs physics-tenpy: pip install fluxline[mps]") from None
    return tenpy
