"""The costs ``fit`` and ``size`` report are those of the circuit files a lab receives, and every
output names the hardware profile it used."""

from __future__ import annotations

import hashlib
import json
import math
import sys

import pytest

from lgt.variational.workflow import export_circuits, run_fit

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

MODEL = {"sites": 4, "hopping": 1.0, "mass": 0.5, "coupling": 1.0, "levels": 3}
#: distinct numbers per gate so that a miscount shows in the product and the makespan
PROFILE = """[hardware]
format_version = 2
name = "test bench"
[hardware.gates.rotation]
duration_us = 12.0
fidelity = 0.997
[hardware.gates.phase]
duration_us = 1.5
fidelity = 0.9995
[hardware.gates.ms]
levels = [0, 1]
duration_us = 230.0
fidelity = 0.985
[hardware.gates.light_shift]
levels = [0, 1]
duration_us = 170.0
fidelity = 0.975
"""
#: JSON gate kind -> profile entry, as documented in docs/circuits.md (circuit file format)
KIND_TO_ENTRY = {"two_level_rotation": "rotation", "virtual_phase": "phase", "molmer_sorensen": "ms",
                 "light_shift_phase": "light_shift", "controlled_rotation": "controlled_rotation"}
TWO_QUDIT_KINDS = {"molmer_sorensen", "light_shift_phase", "controlled_rotation"}


def _asap_makespan(gates: list[dict]) -> float:
    """As-soon-as-possible schedule written here from the files alone: a gate starts when all of
    its qudits are free and lasts its ``duration_us``."""
    free: dict[int, float] = {}
    end = 0.0
    for g in gates:
        start = max((free.get(q, 0.0) for q in g["qudits"]), default=0.0)
        for q in g["qudits"]:
            free[q] = start + g["duration_us"]
        end = max(end, start + g["duration_us"])
    return end


@pytest.mark.parametrize("family", ["symmetric", "hardware"])
def test_fit_reports_the_cost_of_its_exported_files(tmp_path, monkeypatch, family):
    # reference: the exported JSON files and the profile TOML read with tomllib, nothing else —
    # the product of the profile's fidelity of every gate in the file (the budget rule of
    # lgt/variational/budget.py), the ASAP makespan of the files' duration_us, and the count of
    # two-qudit kinds
    monkeypatch.setenv("FLUXLINE_CACHE_DIR", str(tmp_path / "cache"))
    (tmp_path / "hw.toml").write_text(PROFILE)
    entries = tomllib.loads(PROFILE)["hardware"]["gates"]
    config = {"model": MODEL, "initial": {"kind": "vacuum"},
              "variational": {"family": family, "layers": 2, "dt": 0.1, "t_final": 0.2, "tolerance": 1e-2,
                              "hardware_profile": str(tmp_path / "hw.toml")}}
    result = run_fit(config)
    a = result.attributes
    assert a["cost_source"] == "exported"
    paths = export_circuits(config, result.arrays["parameters"], tmp_path / "out")
    assert len(paths) == 3
    for path in paths:
        gates = json.loads(path.read_text())["gates"]
        assert sum(g["kind"] in TWO_QUDIT_KINDS for g in gates) == a["two_qudit_gates"]
        assert len(gates) - a["two_qudit_gates"] == a["single_qudit_gates"]
        for g in gates:  # each file's durations are the profile's
            assert g["duration_us"] == entries[KIND_TO_ENTRY[g["kind"]]]["duration_us"]
        fidelity = math.prod(entries[KIND_TO_ENTRY[g["kind"]]]["fidelity"] for g in gates)
        assert a["noise_fidelity"] == pytest.approx(fidelity, rel=1e-12)
        assert a["duration_us"] == pytest.approx(_asap_makespan(gates), rel=1e-12)


def test_fit_and_size_outputs_name_the_profile(tmp_path, monkeypatch, capsys):
    # reference: hashlib.sha256 of the profile file's bytes; the built-in profile's own source
    # lines (read with tomllib from the shipped file) in text and JSON output
    from importlib import resources

    from lgt.cli import main

    monkeypatch.setenv("FLUXLINE_CACHE_DIR", str(tmp_path / "cache"))
    (tmp_path / "hw.toml").write_text(PROFILE)
    base = {"model": MODEL, "initial": {"kind": "vacuum"},
            "variational": {"layers": 1, "max_layers": 1, "dt": 0.1, "t_final": 0.1, "tolerance": 0.5}}

    def write(path, config):
        lines = []
        for section, values in config.items():
            lines.append(f"[{section}]")
            lines += [f"{k} = {json.dumps(v)}" for k, v in values.items()]
        path.write_text("\n".join(lines) + "\n")
        return str(path)

    own = write(tmp_path / "own.toml", {**base, "variational": {**base["variational"], "hardware_profile": "hw.toml"}})
    builtin = write(tmp_path / "builtin.toml", base)
    digest = hashlib.sha256((tmp_path / "hw.toml").read_bytes()).hexdigest()
    shipped = resources.files("circuits").joinpath("data/default_hardware.toml").read_text()
    sources = [f"{k}: {v['source']}" for k, v in tomllib.loads(shipped)["hardware"]["gates"].items()]
    for command in ("fit", "size"):
        assert main([command, own, "--json", "--quiet"]) == 0
        doc = json.loads(capsys.readouterr().out)
        assert doc["hardware_profile"] == {"name": "test bench", "path": str((tmp_path / "hw.toml").resolve()),
                                           "sha256": digest}
        assert "profile_sources" not in doc
        assert main([command, own, "--quiet"]) == 0
        text = capsys.readouterr().out
        assert "test bench" in text and digest[:16] in text and "illustrative" not in text
        assert main([command, builtin, "--json", "--quiet"]) == 0
        doc = json.loads(capsys.readouterr().out)
        assert doc["hardware_profile"]["path"].startswith("builtin:") and doc["profile_sources"] == sources
        assert main([command, builtin, "--quiet"]) == 0
        text = capsys.readouterr().out
        assert all(line in text for line in sources)


def test_large_circuits_and_generic_blocks_fall_back_to_summed_terms():
    # above max_gates (or with exported pricing off, compile = false) the price is the summed term
    # exponentials, durations added — never shorter than the ASAP schedule of the same gates
    # (a schedule property, common practice, no source), and the source says which was used
    from circuits.hardware import load_profile
    from lgt.basis import PhysicalBasis
    from lgt.model import ModelParams
    from lgt.variational.budget import Costing
    from lgt.variational.native_cost import model_term_costs
    from lgt.variational.sizing import depth_ansatz, depth_cost
    from lgt.variational.settings import resolve_variational

    basis = PhysicalBasis(ModelParams(**MODEL))
    profile = load_profile(None)
    settings = resolve_variational({"variational": {"t_final": 0.1}}, MODEL["levels"])
    terms = model_term_costs(basis.params, settings.native_spec(), profile)
    ansatz = depth_ansatz(basis, settings, 3)
    exported = depth_cost(ansatz, Costing(profile, terms))
    capped = Costing(profile, terms, max_gates=10)
    summed = depth_cost(ansatz, capped)
    assert (exported.source, summed.source, capped.source("symmetric")) == ("exported", "terms", "terms")
    assert summed.counts == exported.counts and summed.duration_us >= exported.duration_us
    assert depth_cost(ansatz, Costing(profile, terms, exported=False)).source == "terms"
