"""Chebyshev propagation against dense scipy.linalg.expm and against expm_multiply."""

from __future__ import annotations

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp
from hypothesis import given, settings, strategies as st

from lgt.chebyshev import ChebyshevPropagator, gershgorin_interval
from lgt.evolution import run_evolution


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2 ** 31), n=st.integers(2, 40), scale=st.floats(0.1, 30.0))
def test_block_matches_dense_expm(seed, n, scale):
    # reference: scipy.linalg.expm of a random real symmetric sparse matrix
    rng = np.random.default_rng(seed)
    a = sp.random(n, n, density=0.3, random_state=rng) * scale
    H = sp.csr_matrix(a + a.T + sp.diags(rng.normal(size=n) * scale))
    psi = rng.normal(size=n) + 1j * rng.normal(size=n)
    psi /= np.linalg.norm(psi)
    lo, hi = gershgorin_interval(H)
    eig = np.linalg.eigvalsh(H.toarray())
    assert lo <= eig[0] + 1e-12 and eig[-1] <= hi + 1e-12  # Gershgorin circle theorem
    times = np.sort(rng.uniform(0, 2.0, size=4))
    prop = ChebyshevPropagator(lambda x: H @ x, (lo, hi), 0.1)
    out = prop.block(psi, times)
    for t, v in zip(times, out):
        np.testing.assert_allclose(v, sla.expm(-1j * t * H.toarray()) @ psi, atol=1e-11)
    np.testing.assert_allclose(prop.step(psi), sla.expm(-0.1j * H.toarray()) @ psi, atol=1e-11)


def test_evolution_methods_agree():
    # reference: scipy expm_multiply (Al-Mohy & Higham 2011) through the same task
    config = {"model": {"sites": 10, "hopping": 1.0, "mass": 0.4, "coupling": 1.0},
              "initial": {"kind": "meson", "sites": [4, 5]},
              "evolution": {"t_final": 3.0, "dt": 0.1, "observables": ["electric_field", "loschmidt_echo"]}}
    cheb = run_evolution(config)
    config["evolution"]["method"] = "expm_multiply"
    ref = run_evolution(config)
    for name in ("electric_field", "loschmidt_echo"):
        np.testing.assert_allclose(cheb.series[name].values, ref.series[name].values, atol=1e-10)
    assert cheb.attributes["energy_drift"] < 1e-12 and cheb.attributes["norm_drift"] < 1e-12



def test_small_buffer_gives_the_same_block(monkeypatch):
    # large states fold fewer Chebyshev vectors at a time; reference: dense scipy.linalg.expm
    import lgt.chebyshev as cheb

    monkeypatch.setattr(cheb, "BUFFER_BYTES", 16 * 40 * 3)  # a 3-column buffer for dim 40
    rng = np.random.default_rng(0)
    a = sp.random(40, 40, density=0.2, random_state=rng)
    H = sp.csr_matrix(a + a.T)
    psi = rng.normal(size=40) + 0j
    psi /= np.linalg.norm(psi)
    prop = cheb.ChebyshevPropagator(lambda x: H @ x, cheb.gershgorin_interval(H), 0.1)
    out = prop.block(psi, np.array([0.5, 1.7]))
    np.testing.assert_allclose(out[1], sla.expm(-1.7j * H.toarray()) @ psi, atol=1e-12)
