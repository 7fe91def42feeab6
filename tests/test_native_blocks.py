"""Exact native blocks of the model's term exponentials, native export, profiles and the block cache."""

from __future__ import annotations

import hashlib
import json
from importlib import resources

import numpy as np
import pytest
import scipy.linalg as sla
from hypothesis import given, settings, strategies as st
from scipy.stats import unitary_group

from fluxline_threads import single_threaded_blas
from circuits.gates import ControlledRotation, DiagonalGate, MSGate, TwoLevelRotation
from circuits.hardware import HardwareProfile, ProfileError, load_profile
from circuits.native import NativeGateSet, exponential_block, givens
from cli_runner import run_cli
from lgt.hamiltonian import local_terms
from lgt.model import ModelParams
from lgt.variational.native_cost import block_kind, compile_blocks, uncompiled_blocks

GATE_SETS = {
    "controlled_rotation": NativeGateSet("controlled_rotation"),
    "light_shift": NativeGateSet("light_shift", (0, 1)),
    "ms": NativeGateSet("ms", (0, 1)),
}
CASES = [(2, "quantum-link"), (3, "truncated"), (3, "quantum-link"), (5, "truncated"), (5, "quantum-link")]


def distinct_terms(d: int, link: str):
    """One term of each block kind (interior hopping on even and odd links) of an 8-site chain."""
    params = ModelParams(sites=8, levels=d, link=link, mass=0.7, coupling=0.9)
    seen = {}
    for t in local_terms(params):
        key = (block_kind(t.kind, t.index, params), t.index % 2)
        seen.setdefault(key, t)
    return seen


def native_only(block, gs: NativeGateSet) -> bool:
    for op in block.ops:
        g = op.gate
        if isinstance(g, TwoLevelRotation) or (isinstance(g, DiagonalGate) and g.locality == 1):
            continue
        if gs.entangler == "controlled_rotation" and isinstance(g, ControlledRotation):
            continue
        if gs.entangler == "light_shift" and isinstance(g, DiagonalGate) and g.hardware_key == "light_shift":
            continue
        if gs.entangler == "ms" and isinstance(g, MSGate) and (g.j, g.k) == gs.ms:
            continue
        return False
    return True


@pytest.mark.parametrize("entangler", sorted(GATE_SETS))
@pytest.mark.parametrize("d,link", CASES)
def test_native_block_equals_expm_at_random_angles(d, link, entangler):
    # reference: scipy.linalg.expm(-i theta h) of the dense local term, element by element (the
    # global phase included), at 5 random angles (large ones too): the block is exact at every angle
    gs = GATE_SETS[entangler]
    rng = np.random.default_rng(d * 7 + len(link))
    with single_threaded_blas():  # small dense products: BLAS threads only contend
        check_blocks(d, link, gs, rng)


def check_blocks(d: int, link: str, gs: NativeGateSet, rng: np.random.Generator) -> None:
    for (kind, _), term in distinct_terms(d, link).items():
        k = len(term.qudits)
        block = exponential_block(term.matrix, k, d, gs)
        assert native_only(block, gs), kind
        for theta in rng.uniform(-4 * np.pi, 4 * np.pi, size=5):
            want = sla.expm(-1j * theta * term.matrix)
            got = block.unitary(np.array([theta]))
            np.testing.assert_allclose(got, want, atol=1e-10, err_msg=f"{kind} at theta = {theta}")


def test_hopping_block_two_qudit_counts_at_d3():
    # target of the issue: no more than the 18-22 two-qudit gates per d = 3 hopping block that
    # the template fits needed, fewer with a native controlled rotation
    term = distinct_terms(3, "truncated")[("hopping-interior", 1)]
    counts = {e: sum(op.gate.kind == "two" for op in exponential_block(term.matrix, 3, 3, gs).ops)
              for e, gs in GATE_SETS.items()}
    assert counts == {"controlled_rotation": 8, "light_shift": 16, "ms": 16}


def test_givens_reproduces_random_unitary():
    # reference: Haar-random unitaries from scipy.stats.unitary_group; the two-level rotations
    # of the Givens (Reck et al. 1994) elimination and the phases multiply back to them
    for d in (2, 3, 5, 7):
        u = unitary_group.rvs(d, random_state=d)
        rotations, phases, gamma = givens(u)
        assert len(rotations) <= d * (d - 1) // 2
        m = np.diag(np.exp(1j * (phases + gamma)))
        for j, k, t, phi in rotations:
            m = TwoLevelRotation(0, j, k, d, phi).unitary(t) @ m
        np.testing.assert_allclose(m, u, atol=1e-12)


# -- profiles ---------------------------------------------------------------------------------

GOOD = {"hardware": {"format_version": 2, "name": "t", "gates": {
    "rotation": {"duration_us": 10.0, "fidelity": 0.999},
    "phase": {"duration_us": 0.0, "fidelity": 1.0},
    "ms": {"duration_us": 100.0, "fidelity": 0.99, "levels": [0, 1]}}}}


def with_gate(key: str, entry) -> dict:
    doc = json.loads(json.dumps(GOOD))
    if entry is None:
        del doc["hardware"]["gates"][key]
    else:
        doc["hardware"]["gates"][key] = entry
    return doc


@pytest.mark.parametrize("doc,key", [
    (with_gate("msx", {"duration_us": 1.0, "fidelity": 0.9}), "hardware.gates.msx"),
    (with_gate("rotation", None), "hardware.gates.rotation"),
    (with_gate("ms", {"duration_us": 1.0}), "hardware.gates.ms.fidelity"),
    (with_gate("ms", {"duration_us": 1.0, "fidelity": 1.5}), "hardware.gates.ms.fidelity"),
    (with_gate("ms", {"duration_us": -1.0, "fidelity": 0.9}), "hardware.gates.ms.duration_us"),
    (with_gate("ms", {"duration_us": 1.0, "fidelity": 0.9, "colour": 1}), "hardware.gates.ms.colour"),
    ({"hardware": GOOD["hardware"], "extra": {}}, "extra"),
])
def test_bad_profile_names_the_key(doc, key):
    with pytest.raises(ProfileError) as err:
        HardwareProfile.from_dict(doc)
    assert err.value.key == key and key in str(err.value)


def test_profile_identity_noise_table_and_relative_path(tmp_path):
    text = ("[hardware]\nformat_version = 2\nname = 'lab A'\n"
            "[hardware.gates.rotation]\nduration_us = 10\nfidelity = 0.999\n"
            "[hardware.gates.phase]\nduration_us = 0\nfidelity = 1.0\n"
            "[hardware.gates.light_shift]\nlevels = [1, 2]\nduration_us = 200\nfidelity = 0.99\n"
            "[noise]\nmodel = 'anything'\nt1_us = 1e6\n")
    (tmp_path / "hw.toml").write_text(text)
    prof = load_profile("hw.toml", relative_to=tmp_path)
    ident = prof.identity()
    assert ident["name"] == "lab A" and ident["path"] == str((tmp_path / "hw.toml").resolve())
    assert ident["sha256"] == hashlib.sha256(text.encode()).hexdigest()  # reference: hashlib
    assert prof.noise_table == {"model": "anything", "t1_us": 1e6}
    assert prof.gate_set().entangler == "light_shift" and prof.gate_set().levels == (1, 2)
    builtin = load_profile()
    assert builtin.builtin and all("illustrative" in line for line in builtin.source_lines())


# -- native export ----------------------------------------------------------------------------

def dense_gate(entry: dict, n: int, d: int) -> np.ndarray:
    """Full d^n unitary of one exported gate, from the documented kinds alone (no circuits import)."""
    def pauli(j, k, phi):
        p = np.zeros((d, d), dtype=complex)
        p[j, k], p[k, j] = np.exp(-1j * phi), np.exp(1j * phi)
        return p

    kind, qs, t = entry["kind"], entry["qudits"], entry["angle"]
    if kind == "two_level_rotation":
        j, k = entry["levels"]
        local = sla.expm(-1j * t / 2 * pauli(j, k, entry["phase"]))
    elif kind == "virtual_phase":
        local = np.diag(np.exp(-1j * t * np.asarray(entry["table"])))
    elif kind == "light_shift_phase":
        j, k = entry["levels"]
        z = np.zeros(d)
        z[j], z[k] = 1, -1
        local = np.diag(np.exp(-1j * t * np.outer(z, z).ravel()))
    elif kind == "molmer_sorensen":
        j, k = entry["levels"]
        p = pauli(j, k, entry["phase"])
        local = sla.expm(-1j * t * np.kron(p, p))
    elif kind == "controlled_rotation":
        j, k = entry["levels"]
        proj = np.zeros((d, d))
        proj[entry["control_level"], entry["control_level"]] = 1
        local = sla.expm(-1j * t * np.kron(proj, pauli(j, k, entry["phase"]) / 2))
    else:
        raise AssertionError(f"non-native gate kind {kind!r} in an exported native circuit")
    # embed: move the gate's qudits to the front, act, move back
    k = len(qs)
    perm = list(qs) + [q for q in range(n) if q not in qs]
    eye = np.eye(d ** (n - k))
    full = np.kron(local, eye).reshape((d,) * (2 * n))
    inv = np.argsort(perm)
    return full.transpose(list(inv) + [n + i for i in inv]).reshape(d**n, d**n)


def simulate(doc: dict) -> np.ndarray:
    n, d = doc["space"]["n_qudits"], doc["space"]["levels"]
    psi = np.zeros(d**n, dtype=complex)
    init = doc["initial_state"]
    if init["kind"] == "product":
        psi[np.ravel_multi_index(tuple(init["levels"]), (d,) * n)] = 1
    else:
        psi[np.asarray(init["indices"])] = np.asarray(init["real"]) + 1j * np.asarray(init["imag"])
    for entry in doc["gates"]:
        psi = dense_gate(entry, n, d) @ psi
    return psi


MODEL = {"sites": 4, "hopping": 1.0, "mass": 0.5, "coupling": 0.8, "levels": 3}


@pytest.mark.parametrize("family,profile_gates", [
    ("symmetric", ("ms",)), ("symmetric", ("controlled_rotation",)),
    ("hardware", ("light_shift",)), ("hardware", ("ms",)),
])
def test_exported_native_circuits_reproduce_fitted_states(tmp_path, monkeypatch, family, profile_gates):
    # reference: a dense simulator of the documented JSON kinds written above (no circuits
    # import), against the fitted states of the engine; and the profile's missing two-qudit
    # gates never appear in the files
    from lgt.basis import PhysicalBasis
    from lgt.variational.ansatz import make_ansatz
    from lgt.variational.settings import VariationalSettings
    from lgt.variational.workflow import export_circuits, run_fit

    monkeypatch.setenv("FLUXLINE_CACHE_DIR", str(tmp_path / "cache"))
    gates = {"rotation": {"duration_us": 10, "fidelity": 0.999}, "phase": {"duration_us": 0, "fidelity": 1.0}}
    for g in profile_gates:
        gates[g] = {"duration_us": 200, "fidelity": 0.99}
    lines = ["[hardware]", "format_version = 2", "name = 'test'"]
    for key, spec in gates.items():
        lines += [f"[hardware.gates.{key}]"] + [f"{f} = {v}" for f, v in spec.items()]
    (tmp_path / "hw.toml").write_text("\n".join(lines) + "\n")
    config = {"model": MODEL, "initial": {"kind": "meson", "sites": [1, 2]},
              "variational": {"family": family, "layers": 2, "dt": 0.1, "t_final": 0.3, "tolerance": 1e-2,
                              "hardware_profile": str(tmp_path / "hw.toml"),
                              **({"entangler": "ms"} if profile_gates == ("light_shift",) else {})}}
    # fitted with the built-in profile (which has every gate), exported for the restricted one
    result = run_fit({**config, "variational": {k: v for k, v in config["variational"].items()
                                                if k != "hardware_profile"}})
    paths = export_circuits(config, result.arrays["parameters"], tmp_path / "out")
    basis = PhysicalBasis(ModelParams(**MODEL))
    settings = VariationalSettings(entangler=config["variational"].get("entangler", "diagonal"))
    ansatz = make_ansatz(basis, family, 2, spec=settings.native_spec(),
                         space="register" if family == "symmetric" else None)
    kinds = {"ms": "molmer_sorensen", "light_shift": "light_shift_phase", "controlled_rotation": "controlled_rotation"}
    for k, path in enumerate(paths):
        doc = json.loads(path.read_text())
        present = {g["kind"] for g in doc["gates"]}
        assert present <= {"two_level_rotation", "virtual_phase"} | {kinds[g] for g in profile_gates}
        assert all(g["duration_us"] >= 0 for g in doc["gates"])
        assert doc["compile_fidelity"] > 1 - 1e-10 and doc["hardware_profile"]["name"] == "test"
        psi0 = simulate({**doc, "gates": []})
        fitted = ansatz.circuit.apply(result.arrays["parameters"][k], psi0)
        np.testing.assert_allclose(simulate(doc), fitted, atol=1e-9)
        assert doc["cost"]["two_qudit_gates"] == sum(g["kind"] in kinds.values() for g in doc["gates"])


# -- cache ------------------------------------------------------------------------------------

def test_cache_in_user_folder_and_package_untouched(tmp_path, monkeypatch):
    monkeypatch.setenv("FLUXLINE_CACHE_DIR", str(tmp_path))
    shipped = resources.files("lgt").joinpath("data/compiled_blocks.json")
    before = hashlib.sha256(shipped.read_bytes()).hexdigest()
    params = ModelParams(sites=6, levels=4, link="quantum-link", mass=1.0)  # d = 4 is not shipped
    gs = load_profile().gate_set()
    assert "hopping-interior" in uncompiled_blocks(params, gs)
    blocks = compile_blocks(params, gs)
    assert uncompiled_blocks(params, gs) == []
    data = json.loads((tmp_path / "native_blocks_v1.json").read_text())
    fields = next(iter(data["blocks"].values()))["fields"]
    assert set(fields) == {"d", "link", "block", "generator_sha256", "gate_set", "format"}
    assert fields["d"] == 4 and fields["link"] == "quantum-link"
    assert hashlib.sha256(shipped.read_bytes()).hexdigest() == before
    # reference: scipy expm again, on the block read back from the cache file
    again = compile_blocks(params, gs)
    term = next(t for t in local_terms(params) if t.kind == "hopping" and t.index == 2)
    theta = 0.83
    u = again["hopping2"][0].unitary(np.array([theta]))
    want = sla.expm(-1j * theta * term.matrix / params.hopping)
    assert abs(np.trace(want.conj().T @ u)) ** 2 / 64**2 == pytest.approx(1.0, abs=1e-10)
    assert set(blocks) == set(again)


def test_shipped_blocks_cover_common_cases(tmp_path, monkeypatch):
    monkeypatch.setenv("FLUXLINE_CACHE_DIR", str(tmp_path))
    gs = load_profile().gate_set()
    for d, link in CASES:
        assert uncompiled_blocks(ModelParams(sites=8, levels=d, link=link, mass=1.0), gs) == []


def test_compile_command_fills_cache(tmp_path, monkeypatch):
    monkeypatch.setenv("FLUXLINE_CACHE_DIR", str(tmp_path / "cache"))
    cfg = tmp_path / "c.toml"
    cfg.write_text("[model]\nsites = 4\nlevels = 4\nlink = 'quantum-link'\n[initial]\nkind = 'vacuum'\n"
                   "[variational]\nt_final = 0.2\n")
    out = run_cli("compile", str(cfg), "--json")
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    assert "hopping-interior" in data["compiled"] and data["blocks"]["hopping-interior"]["two_qudit_gates"] > 0
    assert (tmp_path / "cache" / "native_blocks_v1.json").is_file()
    assert json.loads(run_cli("compile", str(cfg), "--json").stdout)["compiled"] == []


# -- property tests ---------------------------------------------------------------------------

@st.composite
def pair_generators(draw):
    """Random two-qudit generators made of disjoint pairs that differ on the target qudit only,
    with complex amplitudes and a constant diagonal (the structure of hopping terms)."""
    d = draw(st.integers(2, 4))
    target = draw(st.integers(0, 1))
    h = np.zeros((d * d, d * d), dtype=complex)
    used: set[int] = set()
    for c in range(d):
        for _ in range(draw(st.integers(0, d // 2))):
            la, lb = draw(st.lists(st.integers(0, d - 1), min_size=2, max_size=2, unique=True))
            cfg_a = (c, la) if target == 1 else (la, c)
            cfg_b = (c, lb) if target == 1 else (lb, c)
            a, b = np.ravel_multi_index(cfg_a, (d, d)), np.ravel_multi_index(cfg_b, (d, d))
            if a in used or b in used:
                continue
            used |= {a, b}
            w = draw(st.floats(0.1, 2.0)) * np.exp(1j * draw(st.floats(-np.pi, np.pi)))
            h[a, b], h[b, a] = w, np.conj(w)
    return d, h + draw(st.floats(-1, 1)) * np.eye(d * d)


@settings(max_examples=40, deadline=None)
@given(pair_generators(), st.floats(-10, 10), st.sampled_from(sorted(GATE_SETS)))
def test_random_pair_generators_are_exact(case, theta, entangler):
    # reference: scipy.linalg.expm, element by element
    d, h = case
    block = exponential_block(h, 2, d, GATE_SETS[entangler])
    np.testing.assert_allclose(block.unitary(np.array([theta])), sla.expm(-1j * theta * h), atol=1e-9)


@settings(max_examples=40, deadline=None)
@given(st.integers(2, 5), st.data(), st.sampled_from(sorted(GATE_SETS)))
def test_random_two_qudit_diagonals_are_exact(d, data, entangler):
    # reference: the phases exp(-i theta table) themselves
    table = np.array(data.draw(st.lists(st.floats(-3, 3), min_size=d * d, max_size=d * d)))
    theta = data.draw(st.floats(-5, 5))
    block = exponential_block(np.diag(table), 2, d, GATE_SETS[entangler])
    np.testing.assert_allclose(block.unitary(np.array([theta])), np.diag(np.exp(-1j * theta * table)), atol=1e-9)


def test_version_1_documents_still_read():
    # worked example: a version-1 file (kinds "rotation", "ms", "diagonal") imports to the same
    # gates as their version-2 names; reference: the generators written out by hand
    from circuits.export import from_dict, to_dict

    doc = {"format": "fluxline-qudit-circuit", "version": 1,
           "space": {"mode": "register", "n_qudits": 2, "levels": 3},
           "gates": [{"kind": "rotation", "qudits": [0], "levels": [0, 2], "phase": 0.0, "angle": 0.4},
                     {"kind": "ms", "qudits": [0, 1], "levels": [1, 2], "phase": 0.0, "angle": 0.3},
                     {"kind": "diagonal", "qudits": [1], "table": [0.0, 1.0, 2.0], "angle": 0.2}]}
    c = from_dict(doc)
    kinds = [g["kind"] for g in to_dict(c)["gates"]]
    assert kinds == ["two_level_rotation", "molmer_sorensen", "virtual_phase"]
    x02 = np.zeros((3, 3))
    x02[0, 2] = x02[2, 0] = 1
    x12 = np.zeros((3, 3))
    x12[1, 2] = x12[2, 1] = 1
    want = (np.kron(np.eye(3), np.diag(np.exp(-0.2j * np.arange(3)))) @ sla.expm(-0.3j * np.kron(x12, x12))
            @ np.kron(sla.expm(-0.2j * x02), np.eye(3)))
    np.testing.assert_allclose(c.unitary(None), want, atol=1e-12)


def test_gate_set_leaves_out_entanglers_on_missing_levels():
    doc = with_gate("ms", {"duration_us": 100.0, "fidelity": 0.995, "levels": [1, 2]})
    assert HardwareProfile.from_dict(doc).gate_set(3).entangler == "ms"
    with pytest.raises(ProfileError) as err:  # d = 2 qudits have no level 2
        HardwareProfile.from_dict(doc).gate_set(2)
    assert err.value.key == "hardware.gates"
    doc["hardware"]["gates"]["light_shift"] = {"duration_us": 200.0, "fidelity": 0.99}
    gs = HardwareProfile.from_dict(doc).gate_set(2)
    assert gs.entangler == "light_shift" and gs.ms is None and gs.light_shift == (0, 1)


def test_compile_progress_prints_estimate(tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("FLUXLINE_CACHE_DIR", str(tmp_path))
    compile_blocks(ModelParams(sites=4, levels=4, link="quantum-link"), load_profile().gate_set(4), progress=True)
    err = capsys.readouterr().err
    assert "compiling" in err and "about" in err and "block" in err


def test_fit_cli_writes_native_by_default_and_generator_on_request(tmp_path, monkeypatch):
    monkeypatch.setenv("FLUXLINE_CACHE_DIR", str(tmp_path / "cache"))
    cfg = tmp_path / "fit.toml"
    cfg.write_text("[model]\nsites = 4\nlevels = 3\nmass = 0.5\n[initial]\nkind = 'vacuum'\n"
                   "[variational]\nlayers = 1\ndt = 0.1\nt_final = 0.2\ntolerance = 0.1\n")
    for form, extra in (("native", ()), ("generator", ("--circuit-form", "generator"))):
        out = run_cli("fit", str(cfg), "--json", "--circuits", str(tmp_path / form), *extra)
        assert out.returncode == 0, out.stderr
        doc = json.loads((tmp_path / form / "step_0002.json").read_text())
        kinds = {g["kind"] for g in doc["gates"]}
        assert doc["form"] == form
        if form == "native":
            assert kinds <= {"two_level_rotation", "virtual_phase", "light_shift_phase"}
            assert all("duration_us" in g for g in doc["gates"]) and doc["hardware_profile"]["sha256"]
        else:
            assert "generator" in kinds


@pytest.mark.parametrize("entangler", sorted(GATE_SETS))
def test_brickwork_from_the_gate_set_is_already_native(entangler):
    # the hardware family's layer built from the machine's own entangler passes the native
    # export unchanged (same gates, same unitary; reference: the engine's own dense unitary)
    from circuits.layers import layer_spec_for, native_brickwork
    from circuits.native_export import native_circuit

    gs = GATE_SETS[entangler]
    circuit = native_brickwork(3, 3, 2, layer_spec_for(gs))
    params = np.random.default_rng(1).normal(size=circuit.n_params)
    native = native_circuit(circuit, params, gs)
    assert len(native.circuit.ops) == len(circuit.ops)
    np.testing.assert_allclose(native.circuit.unitary(None), circuit.unitary(params), atol=1e-12)
