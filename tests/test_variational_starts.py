"""Start angles of a step's fit (lgt.variational.stepper.start_candidates)."""

from __future__ import annotations

import numpy as np
import pytest

from lgt.variational.stepper import start_candidates


@pytest.mark.parametrize("order", [1, 2, 3])
def test_extrapolation_is_exact_for_polynomials_of_its_degree(order):
    # Newton's backward-difference formula on a uniform grid (textbook interpolation, e.g.
    # Abramowitz & Stegun 25.1, recalled from memory): the degree-m extrapolation through the last
    # m + 1 points reproduces any polynomial of degree <= m at the next grid point
    rng = np.random.default_rng(order)
    coeffs = rng.normal(size=(order + 1, 3))
    times = np.arange(6.0)
    history = np.array([sum(c * t ** p for p, c in enumerate(coeffs)) for t in times])
    nxt = sum(c * 6.0 ** p for p, c in enumerate(coeffs))
    candidates = start_candidates(history, order)
    assert len(candidates) == order + 1  # degrees order … 1, then the last angles
    np.testing.assert_allclose(candidates[0], nxt, rtol=1e-10, atol=1e-10)
    np.testing.assert_array_equal(candidates[-1], history[-1])


def test_linear_start_keeps_its_form_and_short_histories():
    # order 1 is θ_k + (θ_k − θ_{k−1}) exactly as written (bit-identical fits); the first
    # step has no history: the zero update, then θ_0
    h = np.array([[0.1, 0.2], [0.4, 0.3]])
    first, last = start_candidates(h, 1)
    assert np.array_equal(first, h[1] + (h[1] - h[0]))
    assert np.array_equal(last, h[1])
    only = start_candidates(h[:1], 3)
    assert len(only) == 2 and all(np.array_equal(c, h[0]) for c in only)
    assert len(start_candidates(h, 3)) == 2  # two points allow the linear extrapolation only
