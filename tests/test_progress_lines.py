"""Progress on stderr for long runs: ``size`` per depth and per step with an ETA, ``spectrum``
for Lanczos-sized models; ``--quiet`` turns both off and stdout stays the result alone."""

from __future__ import annotations

import json
import re

from lgt.cli import main
from lgt.spectrum import DENSE_THRESHOLD

SIZE = """[model]
sites = 4
levels = 3
hopping = 1.0
mass = 0.5
coupling = 1.0
[initial]
kind = "vacuum"
[variational]
max_layers = 2
dt = 0.1
t_final = 0.3
tolerance = 0.5
compile = false
"""
#: N = 16, d = 3: above the dense threshold (Lanczos; about 0.3 s)
SPECTRUM = """[model]
sites = 16
levels = 3
mass = 0.5
"""
#: tqdm's bar shows elapsed<remaining (its documented default format)
ETA = re.compile(r"\d\d:\d\d<\d\d:\d\d")


def test_size_shows_depth_and_step_bars_with_eta(tmp_path, capsys):
    config = tmp_path / "size.toml"
    config.write_text(SIZE)
    assert main(["size", str(config), "--json"]) == 0
    out, err = capsys.readouterr()
    assert json.loads(out)["layers"] == 1  # stdout is the JSON object alone
    assert "size: depths" in err and "size: steps" in err and ETA.search(err)
    assert "symmetric D = 1" in err  # the per-depth message
    assert main(["size", str(config), "--json", "--quiet"]) == 0
    out, err = capsys.readouterr()
    assert json.loads(out)["layers"] == 1 and err == ""


def test_spectrum_reports_a_lanczos_run(tmp_path, capsys):
    config = tmp_path / "spectrum.toml"
    config.write_text(SPECTRUM)
    assert main(["spectrum", str(config), "--count", "2", "--json"]) == 0
    out, err = capsys.readouterr()
    dimension = json.loads(out)["dimension"]
    assert dimension > DENSE_THRESHOLD  # a Lanczos run
    assert f"{dimension} physical states" in err and "by Lanczos in" in err
    assert main(["spectrum", str(config), "--count", "2", "--json", "--quiet"]) == 0
    assert capsys.readouterr().err == ""
