"""Exit paths of the command line: one line on stderr and the documented exit status (README
command table: 0, 2, 3, 130, 141, 143) for every user mistake, never a traceback; the task
table (sections each task reads); validation runs once per command.

The statuses are the project's documented contract; the physics check of the potential file
uses the strong-coupling result V(r) = J·r at w = 0 (Kogut & Susskind, Phys. Rev. D 11, 395
(1975)).
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from cli_runner import run_cli
from lgt.cli import main
from lgt.errors import EXIT_BAD_INPUT, EXIT_BROKEN_PIPE, EXIT_TOLERANCE_MISSED

MODEL = "[model]\nsites = 4\nhopping = 1.0\nmass = 0.5\ncoupling = 1.0\nlevels = 3\n"
EVOLVE = MODEL + '[initial]\nkind = "meson"\nsites = [0, 1]\n[evolution]\nt_final = 0.2\ndt = 0.1\n'
FIT = MODEL + ('[initial]\nkind = "vacuum"\n[variational]\nlayers = 1\ndt = 0.1\nt_final = 0.2\n'
               'tolerance = 1e-9\nmaxiter = 5\nrestarts = 0\nmax_layers = 1\ntrotter_max_steps = 2\n'
               'compile = false\ncompare_families = false\n')


def _write(folder: Path, text: str, name: str = "c.toml") -> Path:
    path = folder / name
    path.write_text(text)
    return path


def _one_line_error(err: str) -> None:
    assert err.startswith("fluxline: error: ") and err.count("\n") == 1 and "Traceback" not in err, err


# ------------------------------------------------------------------ files and paths
@pytest.mark.parametrize("content,words", [
    (b"\x89HDF\r\n\x1a\n\x00\x00\xff\xfe binary", "not UTF-8"),
    ("[model]\nsites = 4\n".encode("utf-16"), "not UTF-8"),
    (b"[model\nsites = 4\n", "not valid TOML"),
    (b"model = 4\n", "must be [sections]"),
])
def test_unreadable_config_files(tmp_path, capsys, content, words):
    path = tmp_path / "c.toml"
    path.write_bytes(content)
    assert main(["spectrum", str(path)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    _one_line_error(err)
    assert words in err


def test_directory_and_missing_config(tmp_path, capsys):
    assert main(["spectrum", str(tmp_path)]) == EXIT_BAD_INPUT
    assert "is a directory" in capsys.readouterr().err
    assert main(["spectrum", str(tmp_path / "nothere.toml")]) == EXIT_BAD_INPUT
    assert "not found" in capsys.readouterr().err


@pytest.mark.parametrize("output,words", [(".", "is a directory"), ("missing/run.h5", "does not exist")])
def test_bad_output_refused_before_work(tmp_path, capsys, monkeypatch, output, words):
    cfg = _write(tmp_path, EVOLVE)
    monkeypatch.chdir(tmp_path)
    assert main(["evolve", str(cfg), "--output", output, "--quiet"]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    _one_line_error(err)
    assert "--output" in err and words in err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["c.toml"]


def test_circuits_folder_that_is_a_file_refused_before_work(tmp_path, capsys):
    cfg = _write(tmp_path, FIT)
    (tmp_path / "taken").write_text("a file")
    assert main(["fit", str(cfg), "--circuits", str(tmp_path / "taken"), "--quiet"]) == EXIT_BAD_INPUT
    assert "--circuits" in capsys.readouterr().err


def test_broken_pipe_gives_no_traceback(tmp_path):
    """The reader goes away before the first byte (``… --json | head -c0``)."""
    cfg = _write(tmp_path, MODEL)
    proc = subprocess.Popen([sys.executable, "-m", "lgt", "spectrum", str(cfg), "--json"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.close()
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=60) == EXIT_BROKEN_PIPE
    assert "Traceback" not in err and "Exception ignored" not in err, err


@pytest.mark.parametrize("address", ["tcp://127.0.0.1:9", "no-port-here"])
def test_unreachable_scheduler_is_one_line(tmp_path, address):
    pytest.importorskip("distributed")
    cfg = _write(tmp_path, MODEL + '[sweep]\ntask = "spectrum"\n')
    env = {**os.environ, "DASK_DISTRIBUTED__COMM__TIMEOUTS__CONNECT": "1s"}
    out = subprocess.run([sys.executable, "-m", "lgt", "sweep", str(cfg), "-o", str(tmp_path / "r.h5"),
                          "--scheduler", address, "--quiet"],
                         capture_output=True, text=True, env=env, timeout=120)
    assert out.returncode == EXIT_BAD_INPUT
    _one_line_error(out.stderr)
    assert "--scheduler" in out.stderr and address in out.stderr


def test_python_m_lgt_sweep_errors_like_fluxline_sweep(tmp_path):
    cfg = _write(tmp_path, MODEL + '[sweep]\ntask = "spectrum"\n[sweep.grid]\n"model.mass" = [0.1, 1e308]\n')
    out = subprocess.run([sys.executable, "-m", "lgt.sweep", str(cfg), "-o", str(tmp_path / "r.h5")],
                         capture_output=True, text=True, timeout=120)
    assert out.returncode == EXIT_BAD_INPUT
    _one_line_error(out.stderr)
    assert 'sweep.grid."model.mass"' in out.stderr and "magnitude" in out.stderr


# ------------------------------------------------------------------ ranges and size guards
@pytest.mark.parametrize("command", ["spectrum", "potential", "fit", "size", "evolve"])
def test_size_guard_refuses_forty_sites_at_once(tmp_path, capsys, command):
    text = {"spectrum": "", "potential": "[potential]\ndistances = [1, 3]\n",
            "evolve": '[evolution]\nt_final = 1.0\ndt = 0.5\n',
            "fit": '[variational]\nt_final = 0.2\n', "size": '[variational]\nt_final = 0.2\n'}[command]
    cfg = _write(tmp_path, "[model]\nsites = 40\n" + text)
    t0 = time.perf_counter()
    assert main([command, str(cfg), "--quiet"]) == EXIT_BAD_INPUT
    assert time.perf_counter() - t0 < 10  # about a second alone; generous under load
    err = capsys.readouterr().err
    _one_line_error(err)
    assert "GiB" in err and "9,215,060,822" in err  # physical dimension of N = 40, d = 3


@pytest.mark.parametrize("text,key", [
    ("[model]\nsites = 4\ncoupling = 1e308\n", "model.coupling"),
    ("[model]\nsites = 9223372036854775806\n", "model.sites"),
    ("[model]\nsites = 4\nstatic_charges = [[1, 9223372036854775807]]\n", "model.static_charges"),
    ("[model]\nsites = 4\n[spectrum]\ncount = 9223372036854775807\n", "spectrum.count"),
])
def test_huge_numbers_are_named(tmp_path, capsys, text, key):
    assert main(["spectrum", str(_write(tmp_path, text))]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    _one_line_error(err)
    assert key in err


def test_long_values_are_shortened(tmp_path, capsys):
    cfg = _write(tmp_path, f'[model]\nsites = 4\nlink = "{"x" * 1_000_000}"\n')
    assert main(["spectrum", str(cfg)]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    assert "model.link" in err and len(err) < 1000


def test_empty_physical_subspace_is_a_named_error(tmp_path, capsys):
    cfg = _write(tmp_path, "[model]\nsites = 4\nstatic_charges = [[0, 5], [3, -5]]\n")
    assert main(["spectrum", str(cfg)]) == EXIT_BAD_INPUT
    assert "model.static_charges" in capsys.readouterr().err


# ------------------------------------------------------------------ sections
@pytest.mark.parametrize("command,text,key,words", [
    ("spectrum", EVOLVE, "initial", "read by evolve, fit, size"),
    ("evolve", EVOLVE + "[sweep]\ntask = \"evolve\"\n", "sweep", "fluxline sweep"),
    ("evolve", EVOLVE + "[output]\nfile = \"x.h5\"\n", "output", "--output"),
    ("fit", FIT + "[hardware]\nname = \"lab\"\n", "hardware", "hardware_profile"),
    ("fit", FIT + "[potential]\ndistances = [1]\n", "potential", "read by potential"),
    ("fit", FIT + "[evolution]\nt_finall = 1.0\n", "evolution.t_finall", "did you mean 't_final'"),
    ("evolve", EVOLVE + "[modle]\nsites = 4\n", "modle", "did you mean [model]"),
])
def test_sections_a_task_does_not_read_are_refused(tmp_path, capsys, command, text, key, words):
    assert main([command, str(_write(tmp_path, text)), "--quiet"]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    _one_line_error(err)
    assert key in err and words in err


def test_task_table_is_the_one_place():
    from lgt.tasks import TASKS, get_task, known_sections, readers

    assert set(TASKS) == {"spectrum", "potential", "evolve", "fit", "size", "continuum"}
    assert readers("potential") == ("potential",) and "output" not in known_sections()
    for name in TASKS:  # every entry imports and resolves its functions
        validate, run = get_task(name)._functions()
        assert callable(validate) and callable(run)


# ------------------------------------------------------------------ validation runs once
@pytest.mark.parametrize("command,text,extra", [
    ("spectrum", MODEL, []), ("potential", MODEL + "[potential]\ndistances = [1, 3]\n", []),
    ("evolve", EVOLVE, ["--json"]), ("fit", FIT, ["--circuits", "circ"]), ("size", FIT, []),
])
def test_each_command_validates_once(tmp_path, monkeypatch, capsys, command, text, extra):
    import lgt.modelcheck
    import lgt.variational.settings

    calls = {"model": 0, "variational": 0}
    checked, resolve_v = lgt.modelcheck.checked_model, lgt.variational.settings.resolve_variational

    def count_model(config):
        calls["model"] += 1
        return checked(config)

    def count_variational(config, levels):
        calls["variational"] += 1
        return resolve_v(config, levels)

    monkeypatch.setattr(lgt.modelcheck, "checked_model", count_model)
    monkeypatch.setattr(lgt.variational.settings, "resolve_variational", count_variational)
    monkeypatch.setattr("lgt.variational.workflow.resolve_variational", count_variational)
    monkeypatch.chdir(tmp_path)
    status = main([command, str(_write(tmp_path, text)), "--quiet", *extra])
    assert status in (0, EXIT_TOLERANCE_MISSED), capsys.readouterr().err
    assert calls["model"] == 1
    assert calls["variational"] == (1 if command in ("fit", "size") else 0)


def test_evolve_json_wish_does_not_mutate_the_resolved_config(tmp_path):
    from lgt.config import load_config
    from lgt.tasks import get_task

    cfg = _write(tmp_path, EVOLVE.replace("dt = 0.1", 'dt = 0.1\nobservables = ["energy"]'))
    resolved = get_task("evolve").validate(load_config(cfg))
    wider = resolved.with_observables(["particle_density"])
    assert resolved.observables == ("energy",) and wider.observables == ("energy", "particle_density")
    assert resolved["evolution"]["observables"] == ["energy"]


# ------------------------------------------------------------------ honest results (tolerance)
def test_fit_that_misses_its_tolerance_exits_3_and_says_so(tmp_path, capsys):
    cfg = _write(tmp_path, FIT)
    status = main(["fit", str(cfg), "--json", "--quiet", "--output", str(tmp_path / "f.h5")])
    out = capsys.readouterr()
    assert status == EXIT_TOLERANCE_MISSED
    data = json.loads(out.out)
    assert data["meets_tolerance"] is False and data["tolerance"] == 1e-9
    assert data["table"][0]["max_infidelity"] > 1e-9 and len(data["fidelity"]) == 3  # printed in full
    assert "does not meet the requested tolerance" in out.err
    assert (tmp_path / "f.h5").is_file()  # results still written


def test_fit_meeting_its_tolerance_says_so(tmp_path, capsys):
    cfg = _write(tmp_path, FIT.replace("tolerance = 1e-9", "tolerance = 0.5"))
    assert main(["fit", str(cfg), "--json", "--quiet"]) == 0
    assert json.loads(capsys.readouterr().out)["meets_tolerance"] is True


def test_fit_observable_criterion_decides_with_observable_tolerance(tmp_path, capsys):
    """criterion = "observables": the fit is judged by the largest error of ⟨L_n⟩ and ν against
    observable_tolerance, not by the infidelity tolerance (docs/variational.md)."""
    text = FIT.replace("compile = false", 'compile = false\ncriterion = "observables"\nobservable_tolerance = 10.0')
    assert main(["fit", str(_write(tmp_path, text)), "--json", "--quiet"]) == 0
    assert json.loads(capsys.readouterr().out)["meets_tolerance"] is True
    strict = text.replace("observable_tolerance = 10.0", "observable_tolerance = 1e-12")
    assert main(["fit", str(_write(tmp_path, strict)), "--json", "--quiet"]) == EXIT_TOLERANCE_MISSED
    assert "observable_tolerance" in capsys.readouterr().err


def test_size_without_a_depth_meeting_the_tolerance_exits_3(tmp_path, capsys):
    status = main(["size", str(_write(tmp_path, FIT)), "--json", "--quiet"])
    out = capsys.readouterr()
    assert status == EXIT_TOLERANCE_MISSED
    data = json.loads(out.out)
    assert data["meets_tolerance"] is False and data["layers"] is None and len(data["table"]) == 1
    assert "max_layers = 1" in out.err


# ------------------------------------------------------------------ hardware profile
#: A test profile: every gate key of circuits.hardware with an invented duration (us) and fidelity.
GATES = {"rotation": (10.0, 0.999), "phase": (0.0, 1.0), "ms": (100.0, 0.99), "phase2": (100.0, 0.98),
         "generator": (500.0, 0.95)}
PROFILE = '[hardware]\nname = "folder-relative test profile"\n' + "".join(
    f"[hardware.gates.{k}]\nduration_us = {d}\nfidelity = {f}\n" for k, (d, f) in GATES.items())


def test_relative_profile_is_taken_from_the_config_folder(tmp_path, monkeypatch):
    from lgt.config import load_config
    from lgt.tasks import get_task

    (tmp_path / "lab").mkdir()
    (tmp_path / "lab" / "profile.toml").write_text(PROFILE)
    cfg = _write(tmp_path / "lab", FIT.replace("compile = false", 'compile = false\nhardware_profile = "profile.toml"'))
    monkeypatch.chdir(tmp_path)  # another working directory
    resolved = get_task("fit").validate(load_config(cfg))
    assert resolved.profile.name == "folder-relative test profile"
    assert resolved["variational"]["hardware_profile"] == str((tmp_path / "lab" / "profile.toml").resolve())


@pytest.mark.parametrize("profile,key", [
    (None, "variational.hardware_profile"),
    (PROFILE.replace("fidelity = 0.99\n", "fidelity = 1.5\n", 1), "variational.hardware_profile"),
    ("[hardware\n", "variational.hardware_profile"),
])
def test_bad_profile_is_refused_before_work(tmp_path, capsys, profile, key):
    if profile is not None:
        (tmp_path / "p.toml").write_text(profile)
    cfg = _write(tmp_path, FIT.replace("compile = false", 'compile = false\nhardware_profile = "p.toml"'))
    assert main(["fit", str(cfg), "--quiet", "--output", str(tmp_path / "f.h5")]) == EXIT_BAD_INPUT
    err = capsys.readouterr().err
    _one_line_error(err)
    assert key in err and not (tmp_path / "f.h5").exists()


def test_profile_error_with_a_key_is_named_through(monkeypatch):
    """A loader error carrying key / value / reason (circuits.hardware.ProfileError) keeps them."""
    import circuits.hardware
    from lgt.errors import ConfigError
    from lgt.tasks import get_task

    class Keyed(ValueError):
        key, value, reason = "gates.ms.fidelity", 1.5, "must be in (0, 1]"

    def broken(path=None):
        raise Keyed("bad")

    monkeypatch.setattr(circuits.hardware, "load_profile", broken)
    with pytest.raises(ConfigError) as info:
        get_task("fit").validate({"model": {"sites": 4}, "variational": {"t_final": 0.2}})
    assert info.value.key == "variational.hardware_profile → gates.ms.fidelity"
    assert info.value.value == 1.5 and info.value.reason == "must be in (0, 1]"


# ------------------------------------------------------------------ the potential task
def test_potential_is_a_task_saved_to_hdf5_and_sweepable(tmp_path, capsys):
    from lgt.io import read_run_file
    from lgt.sweep.reader import load_sweep

    base = "[model]\nsites = 10\nhopping = 0.0\nmass = 3.0\ncoupling = 0.5\n[potential]\ndistances = [1, 3, 5]\n"
    cfg = _write(tmp_path, base)
    assert main(["potential", str(cfg), "--output", str(tmp_path / "p.h5"), "--quiet"]) == 0
    run = read_run_file(tmp_path / "p.h5")
    assert run.task == "potential"
    assert np.allclose(run.arrays["potential"], 0.5 * np.array([1, 3, 5]))  # V = J r at w = 0
    assert run.attributes["string_tension"] == pytest.approx(0.5)
    sweep = _write(tmp_path, base + '[sweep]\ntask = "potential"\n[sweep.grid]\n"model.coupling" = [0.5, 1.0]\n',
                   "s.toml")
    assert main(["sweep", str(sweep), "-o", str(tmp_path / "s.h5"), "--quiet"]) == 0
    capsys.readouterr()
    data = load_sweep(tmp_path / "s.h5")
    assert len(data["run_id"]) == 2


def test_potential_distances_option_is_named(tmp_path, capsys):
    cfg = _write(tmp_path, "[model]\nsites = 8\n")
    assert main(["potential", str(cfg), "--distances", "2"]) == EXIT_BAD_INPUT
    assert "--distances" in capsys.readouterr().err
    assert main(["potential", str(cfg)]) == EXIT_BAD_INPUT
    assert "potential.distances" in capsys.readouterr().err


def test_quiet_is_accepted_by_every_long_command(tmp_path):
    from lgt.cli import build_parser

    parser = build_parser()
    for command in ("spectrum", "potential", "evolve", "fit", "size"):
        assert parser.parse_args([command, "c.toml", "--quiet"]).quiet is True
    assert parser.parse_args(["sweep", "c.toml", "-o", "x.h5", "--quiet"]).no_progress is True
    assert parser.parse_args(["sweep", "c.toml", "-o", "x.h5", "--no-progress"]).no_progress is True


def test_subprocess_exit_status_for_a_bad_key(tmp_path):
    out = run_cli("spectrum", str(_write(tmp_path, MODEL + "[spectrum]\ncount = 0\n")))
    assert out.returncode == EXIT_BAD_INPUT and "spectrum.count" in out.stderr
