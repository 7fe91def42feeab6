"""``lgt.plots`` and ``fluxline plot``: PNG files from a run, with an optional overlay run."""

from __future__ import annotations

import numpy as np

from lgt.cli import main
from lgt.results import RunResult, TimeSeries

PNG = b"\x89PNG\r\n\x1a\n"


def fake_run(shift: float = 0.0) -> RunResult:
    t = np.linspace(0, 2, 11)
    K = 5
    return RunResult(task="evolve", parameters={}, series={
        "electric_field": TimeSeries(t, np.outer(np.cos(t), np.ones(K)) + shift),
        "particle_density": TimeSeries(t, 0.1 * np.sin(t) ** 2 + shift),
        "loschmidt_echo": TimeSeries(t, np.cos(t) ** 2),
        "entanglement_entropy": TimeSeries(t, np.log(2) * np.sin(t) ** 2),
    })


def test_plot_run_writes_pngs_with_overlay(tmp_path):
    from lgt.plots import plot_run

    paths = plot_run(fake_run(), tmp_path, overlay=fake_run(0.01))
    names = sorted(p.name for p in paths)
    assert names == sorted(["electric_field_map.png", "electric_field_map_overlay.png",
                            "particle_density.png", "loschmidt_echo.png", "entanglement_entropy.png"])
    for p in paths:
        assert p.read_bytes()[:8] == PNG


def test_plot_command_from_evolve_output(tmp_path, capsys):
    cfg = tmp_path / "c.toml"
    cfg.write_text('[model]\nsites = 6\nhopping = 0.5\n[initial]\nkind = "vacuum"\n'
                   '[evolution]\nt_final = 1.0\ndt = 0.5\n')
    run = tmp_path / "run.h5"
    assert main(["evolve", str(cfg), "--output", str(run), "--quiet"]) == 0
    outdir = tmp_path / "figs"
    assert main(["plot", str(run), "--outdir", str(outdir)]) == 0
    assert (outdir / "electric_field_map.png").read_bytes()[:8] == PNG
    assert (outdir / "loschmidt_echo.png").exists()


def test_plot_missing_file_is_named(tmp_path, capsys):
    assert main(["plot", str(tmp_path / "nope.h5")]) == 2
    assert "run" in capsys.readouterr().err
