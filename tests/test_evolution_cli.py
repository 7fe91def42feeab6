"""``fluxline evolve``: JSON output, HDF5 round trip, named errors with exit status 2."""

from __future__ import annotations

import json

import numpy as np
import pytest

from lgt.cli import main

CONFIG = """
[model]
sites = 8
hopping = 0.7
mass = 0.4

[initial]
kind = "meson"
sites = [2, 5]

[evolution]
t_final = 1.0
dt = 0.25
observables = ["electric_field", "norm"]
"""


def write(tmp_path, text=CONFIG):
    path = tmp_path / "quench.toml"
    path.write_text(text)
    return path


def test_json_object_has_documented_keys(tmp_path, capsys):
    assert main(["evolve", str(write(tmp_path)), "--json", "--quiet"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert set(out) == {"times", "particle_density", "electric_field", "loschmidt_echo",
                        "entanglement_entropy", "energy"}
    assert out["times"] == [0.0, 0.25, 0.5, 0.75, 1.0]
    assert np.array(out["electric_field"]).shape == (5, 7)
    assert out["electric_field"][0] == [0, 0, 1, 1, 1, 0, 0]
    assert out["loschmidt_echo"][0] == pytest.approx(1.0)
    assert np.ptp(out["energy"]) < 1e-10


def test_output_file_round_trip(tmp_path, capsys):
    from lgt.io import read_run_file

    target = tmp_path / "run.h5"
    assert main(["evolve", str(write(tmp_path)), "--output", str(target), "--quiet"]) == 0
    run = read_run_file(target)
    assert run.task == "evolve"
    assert run.parameters["initial"] == {"kind": "meson", "sites": [[2, 5]]}
    assert run.series["electric_field"].values.shape == (5, 7)
    assert "wrote" in capsys.readouterr().out


def test_bad_config_exit_status_2(tmp_path, capsys):
    bad = CONFIG.replace("sites = [2, 5]", "sites = [2, 4]")
    assert main(["evolve", str(write(tmp_path, bad)), "--quiet"]) == 2
    assert "initial.sites" in capsys.readouterr().err
