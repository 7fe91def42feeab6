"""Bad model input gives a named error before any work; the CLI maps it to exit status 2."""

from __future__ import annotations

import json

import pytest

from cli_runner import run_cli
from lgt.errors import ConfigError
from lgt.model import ModelParams

BAD = [
    ({"sites": 5}, "model.sites"),
    ({"sites": 0}, "model.sites"),
    ({"sites": 4.5}, "model.sites"),
    ({"sites": 4, "levels": 4}, "model.levels"),  # truncated needs odd d
    ({"sites": 4, "levels": 1}, "model.levels"),
    ({"sites": 4, "link": "wilson"}, "model.link"),
    ({"sites": 4, "hopping": "fast"}, "model.hopping"),
    ({"sites": 4, "mass": float("nan")}, "model.mass"),
    ({"sites": 4, "boundary_field": 0.5}, "model.boundary_field"),  # off the integer grid
    ({"sites": 4, "levels": 2, "link": "quantum-link", "boundary_field": 0.0}, "model.boundary_field"),
    ({"sites": 4, "static_charges": [[7, 1]]}, "model.static_charges"),
    ({"sites": 4, "static_charges": [[1, 1], [1, -1]]}, "model.static_charges"),
    ({"sites": 4, "static_charges": [[1]]}, "model.static_charges"),
    ({"sites": 4, "colour": 3}, "model.colour"),
]


@pytest.mark.parametrize("section,key", BAD)
def test_bad_model_values_name_their_key(section, key):
    with pytest.raises(ConfigError) as err:
        ModelParams.from_dict(section)
    assert err.value.key == key
    assert key in str(err.value)


def test_defaults_follow_the_window():
    assert ModelParams(sites=4, levels=3).boundary_field == 0.0
    assert ModelParams(sites=4, levels=4, link="quantum-link").boundary_field == -0.5



def test_cli_spectrum_json_and_bad_config(tmp_path):
    good = tmp_path / "good.toml"
    good.write_text("[model]\nsites = 4\nhopping = 0.0\nmass = 0.5\ncoupling = 1.0\nlevels = 3\n")
    out = run_cli("spectrum", str(good), "--json", "--count", "3")
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    # strong coupling (w = 0), textbook: bare vacuum at -mN/2, then meson states at +2m+J
    assert data["dimension"] == 6
    assert data["energies"] == pytest.approx([-1.0, 1.0, 1.0])
    bad = tmp_path / "bad.toml"
    bad.write_text("[model]\nsites = 4\nlevels = 4\n")
    out = run_cli("spectrum", str(bad))
    assert out.returncode == 2
    assert "model.levels" in out.stderr
    unknown = tmp_path / "unknown.toml"
    unknown.write_text("[model]\nsites = 4\n[modle]\nx = 1\n")
    out = run_cli("spectrum", str(unknown))
    assert out.returncode == 2 and "modle" in out.stderr
