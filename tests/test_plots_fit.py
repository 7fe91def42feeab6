"""``fluxline plot`` of a fit file overlays the exact and the fitted curves."""

from __future__ import annotations

import numpy as np

from lgt.evolution import run_evolution
from lgt.io import read_run_file, write_run_file
from lgt.plots import plot_run, split_fit
from lgt.variational.workflow import run_fit

MODEL = {"sites": 4, "hopping": 1.0, "mass": 0.5, "coupling": 1.0, "levels": 3}


def test_fit_file_plots_exact_with_variational_overlay(tmp_path):
    config = {"model": MODEL, "initial": {"kind": "vacuum"},
              "variational": {"layers": 3, "dt": 0.1, "t_final": 1.0, "tolerance": 1e-4, "compile": False}}
    path = write_run_file(tmp_path / "fit.h5", run_fit(config))
    result = read_run_file(path)
    exact, fitted = split_fit(result)
    # the fit's exact reference equals the evolve task on the same grid (scipy expm_multiply)
    ev = run_evolution({"model": MODEL, "initial": {"kind": "vacuum"},
                        "evolution": {"t_final": 1.0, "dt": 0.1, "method": "expm_multiply"}})
    for name in ("electric_field", "particle_density", "loschmidt_echo", "entanglement_entropy"):
        np.testing.assert_allclose(exact.series[name].values, ev.series[name].values, atol=1e-9)
        assert np.max(np.abs(fitted.series[name].values - exact.series[name].values)) < 1e-2
    names = {p.name for p in plot_run(result, tmp_path / "png")}
    assert {"electric_field_map.png", "electric_field_map_overlay.png", "particle_density.png",
            "fit_diagnostics.png"} <= names
    # the diagnostics plot draws the requested tolerance (issue contract: a tolerance line)
    from lgt.plots import fit_tolerance

    assert fit_tolerance(result) == 1e-4
