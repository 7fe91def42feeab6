"""Parallel depth sizing (lgt.variational.parallel) gives the serial search's results."""

from __future__ import annotations

import numpy as np
import pytest

from lgt.variational.workflow import run_size

#: Columns that are wall times, not answers.
TIMING_COLUMNS = {"fit_seconds", "step_seconds"}


def size_config(workers: int, **variational) -> dict:
    return {"model": {"sites": 4, "hopping": 1.0, "mass": 0.5, "coupling": 1.0, "levels": 3},
            "initial": {"kind": "vacuum"},
            "variational": {"dt": 0.1, "t_final": 1.0, "tolerance": 1e-3, "max_layers": 4, "workers": workers,
                            **variational}}


def assert_same_tables(a, b) -> None:
    assert set(a.tables) == set(b.tables)
    for name, table in a.tables.items():
        other = b.tables[name]
        assert list(table.columns) == list(other.columns), name
        for col, values in table.columns.items():
            if col in TIMING_COLUMNS:
                continue
            np.testing.assert_array_equal(values, other.columns[col], err_msg=f"{name}.{col}")


@pytest.mark.parametrize("variational", [{}, {"tolerance": 1e-2, "max_layers": 3}])
def test_parallel_sizing_gives_the_serial_tables(variational):
    # the same search on two worker processes: every table (rows, trajectories, families, Trotter,
    # shots, term costs) identical to the serial run, bit for bit, except the wall-time columns;
    # the second case has depths stopped early by the abort bound (reached_time < T), the
    # rows the parallel run cuts afterwards
    serial = run_size(size_config(1, **variational))
    parallel = run_size(size_config(2, **variational))
    assert_same_tables(serial, parallel)
    for key in ("layers", "best_layers_under_noise", "best_layers_under_noise_simulated"):
        assert serial.attributes[key] == parallel.attributes[key]


def test_truncated_trajectory_is_the_one_fitted_with_the_bound():
    # a fit run without an abort bound, cut at the bound afterwards, equals the fit run with
    # the bound (each step's fit depends only on the earlier steps; the parallel search's rule)
    from lgt.basis import PhysicalBasis
    from lgt.model import ModelParams
    from lgt.states import basis_state
    from lgt.variational.ansatz import make_ansatz
    from lgt.variational.settings import VariationalSettings
    from lgt.variational.stepper import fit_trajectory, truncated

    basis = PhysicalBasis(ModelParams(sites=4, hopping=1.0, mass=0.5, coupling=1.0, levels=3))
    psi0 = basis_state(basis, np.zeros(3))
    ansatz = make_ansatz(basis, "hardware", 1, spec=VariationalSettings().native_spec())
    free = fit_trajectory(ansatz, psi0, 0.1, 10, 1e-6, maxiter=100)
    bound = 0.5 * float(np.max(1 - free.fidelity))
    cut = fit_trajectory(ansatz, psi0, 0.1, 10, 1e-6, maxiter=100, abort_infidelity=bound)
    assert cut.times.size < free.times.size
    again = truncated(free, bound)
    for name in ("times", "params", "fidelity", "step_infidelity", "leakage", "iterations", "states"):
        np.testing.assert_array_equal(getattr(again, name), getattr(cut, name))
    assert truncated(free, None) is free
