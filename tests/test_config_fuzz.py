"""Fuzzing the configuration of every command (hypothesis): every bad config is refused with
exit status 2 before any work, the message names the offending key, and nothing is written.

Bad configs are made from a valid base config per command by one mutation: an unknown key, a
typo'd key (``t_finall``), a value of the wrong type, an out-of-range value (1e308, ±inf, nan,
int64 extremes, ...) or a junk section. The expectations are the documented contract of the
README ("bad keys or values stop the program before any work with a message naming the key,
exit status 2"); no external reference applies. Examples run in-process through
:func:`lgt.cli.main` (a fixed, derandomized budget); a few run as a subprocess.
``FLUXLINE_FUZZ_EXAMPLES=N`` raises the budget per command (default 50).
"""

from __future__ import annotations

import contextlib
import io
import json
import math
import os
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from cli_runner import run_cli
from lgt.cli import main

EXAMPLES = int(os.environ.get("FLUXLINE_FUZZ_EXAMPLES", "50"))
FUZZ = settings(max_examples=EXAMPLES, derandomize=True, deadline=None, database=None,
                suppress_health_check=[HealthCheck.too_slow])

MODEL = {"sites": 4, "hopping": 1.0, "mass": 0.5, "coupling": 1.0, "theta": 0.0, "levels": 3,
         "link": "truncated"}
VARIATIONAL = {"family": "symmetric", "layers": 2, "dt": 0.1, "t_final": 0.2, "tolerance": 0.01,
               "maxiter": 20, "restarts": 0, "max_layers": 2, "trotter_max_steps": 4,
               "compile": False, "compare_families": False, "compile_fidelity": 0.999,
               "shots_error": 0.01, "seed": 1, "mode": "dynamics", "criterion": "fidelity"}
#: command → (valid base config, extra command-line arguments, sections whose keys are mutated)
COMMANDS = {
    "spectrum": ({"model": MODEL, "spectrum": {"count": 2}}, ["--output", "out.h5"]),
    "potential": ({"model": MODEL, "potential": {"distances": [1, 3], "masses": 2}}, ["--output", "out.h5"]),
    "evolve": ({"model": MODEL, "initial": {"kind": "meson", "sites": [0, 1]},
                "evolution": {"t_final": 0.2, "dt": 0.1, "cut": 1, "drift_tolerance": 1e-8,
                              "method": "chebyshev", "memory_limit_gb": 4.0}},
               ["--output", "out.h5", "--quiet"]),
    "fit": ({"model": MODEL, "initial": {"kind": "vacuum"}, "variational": VARIATIONAL},
            ["--output", "out.h5", "--circuits", "circuits", "--quiet"]),
    "size": ({"model": MODEL, "initial": {"kind": "vacuum"}, "variational": VARIATIONAL},
             ["--output", "out.h5", "--quiet"]),
    "sweep": ({"model": MODEL, "spectrum": {"count": 2},
               "sweep": {"task": "spectrum", "grid": {"model.mass": [0.1, 0.2]}}},
              ["--output", "out.h5", "--quiet"]),
}
#: Keys that hold a string choice (every other scalar leaf is numeric or boolean).
CHOICES = {"link", "kind", "method", "family", "mode", "criterion", "task"}
BOOLEANS = {"compile", "compare_families"}
#: Values no numeric key accepts (TOML can spell all of them).
OUT_OF_RANGE = [1e308, -1e308, math.inf, -math.inf, math.nan, 2 ** 63 - 1, -2 ** 63, 1e7 + 0.5]
WRONG_TYPES = ["text", [1, 2], {"a": 1}, True]
KNOWN_SECTIONS = ("model", "initial", "evolution", "spectrum", "potential", "variational", "sweep")


# ------------------------------------------------------------------ a small TOML writer
def _value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, int):
        return str(v)
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, list):
        return "[" + ", ".join(_value(x) for x in v) + "]"
    return "{" + ", ".join(f"{json.dumps(k)} = {_value(x)}" for k, x in v.items()) + "}"


def to_toml(config: dict) -> str:
    lines: list[str] = []

    def emit(name: str, section: dict) -> None:
        lines.append(f"[{name}]")
        subs = {k: v for k, v in section.items() if isinstance(v, dict) and name == "sweep"}
        for k, v in section.items():
            if k not in subs:
                lines.append(f"{json.dumps(k)} = {_value(v)}")
        for k, v in subs.items():
            emit(f"{name}.{k}", v)

    for name, section in config.items():
        emit(name, section)
    return "\n".join(lines) + "\n"


# ------------------------------------------------------------------ mutations
def _leaves(base: dict):
    """(section, key) of every scalar leaf the command reads (a swept key's base value is not)."""
    swept = set(base.get("sweep", {}).get("grid", {}))
    for section, body in base.items():
        for key, value in body.items():
            if not isinstance(value, (dict, list)) and f"{section}.{key}" not in swept:
                yield section, key


def _typo(key: str, how: int, pos: int) -> str:
    pos = pos % len(key)
    if how == 0:
        return key + key[-1]                       # t_final -> t_finall
    if how == 1:
        return key[:pos] + key[pos + 1:] or key + "x"
    return key[:pos] + "x" + key[pos:]


@st.composite
def bad_configs(draw, command: str):
    """(config, dotted key the error must name)."""
    base = json.loads(json.dumps(COMMANDS[command][0]))
    kind = draw(st.sampled_from(["unknown", "typo", "type", "range", "section"]))
    leaves = list(_leaves(base))
    section, key = draw(st.sampled_from(leaves))
    allowed = set(base[section])
    if kind == "unknown":
        name = draw(st.text("abcdefghijklmnopqrstuvwxyz_", min_size=1, max_size=12))
        if name in _all_keys(section):
            name += "_zz"
        base[section][name] = draw(st.sampled_from([1, "x", 0.5, [1]]))
        return base, f"{section}.{name}"
    if kind == "typo":
        typo = _typo(key, draw(st.integers(0, 2)), draw(st.integers(0, 30)))
        if typo in _all_keys(section) or typo in allowed:
            typo = key + "__"
        base[section][typo] = base[section].pop(key)
        return base, f"{section}.{typo}"
    if kind == "type":
        if key in CHOICES:
            value = draw(st.sampled_from([3, "nonsense", True, [1]]))
        elif key in BOOLEANS:
            value = draw(st.sampled_from([1, "yes", [True]]))
        else:
            value = draw(st.sampled_from(WRONG_TYPES))
        base[section][key] = value
        return base, f"{section}.{key}"
    if kind == "range":
        numeric = [(s, k) for s, k in leaves if k not in CHOICES | BOOLEANS]
        section, key = draw(st.sampled_from(numeric))
        base[section][key] = draw(st.sampled_from(OUT_OF_RANGE))
        return base, f"{section}.{key}"
    name = draw(st.sampled_from(["output", "hardware", "junk", "modle", "evolutoin"]
                                + [s for s in KNOWN_SECTIONS if s not in base]))
    base[name] = {"x": 1}
    return base, name


def _all_keys(section: str) -> set[str]:
    from lgt.evolution import EVOLUTION_KEYS
    from lgt.model import MODEL_KEYS
    from lgt.potential import POTENTIAL_KEYS
    from lgt.sweep.plan import SWEEP_KEYS
    from lgt.variational.settings import VARIATIONAL_KEYS

    return set({"model": MODEL_KEYS, "evolution": EVOLUTION_KEYS, "potential": POTENTIAL_KEYS,
                "variational": VARIATIONAL_KEYS, "spectrum": ("count",), "sweep": SWEEP_KEYS,
                "initial": ("kind", "sites", "fields", "model")}[section])


def refuse(command: str, config: dict, key: str) -> None:
    """Run ``command`` in a fresh folder; assert exit 2, one line naming ``key``, nothing written."""
    folder = Path(tempfile.mkdtemp(prefix="fuzz-"))
    path = folder / "c.toml"
    path.write_text(to_toml(config))
    err = io.StringIO()
    cwd = os.getcwd()
    try:
        os.chdir(folder)
        with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
            status = main([command, "c.toml", *COMMANDS[command][1]])
        written = sorted(p.name for p in folder.iterdir())
    finally:
        os.chdir(cwd)
        for p in sorted(folder.rglob("*"), reverse=True):
            p.rmdir() if p.is_dir() else p.unlink()
        folder.rmdir()
    message = err.getvalue()
    assert status == 2, (config, message)
    assert key in message, (key, message)
    assert message.count("\n") == 1 and "Traceback" not in message, message
    assert written == ["c.toml"], written


@pytest.mark.parametrize("command", list(COMMANDS))
def test_bad_configs_are_refused_naming_the_key(command):
    @FUZZ
    @given(bad_configs(command))
    def check(case):
        refuse(command, *case)

    check()


@pytest.mark.parametrize("command,section,key,value", [
    ("fit", "variational", "t_finall", 0.2),
    ("evolve", "evolution", "t_finall", 0.2),
    ("size", "variational", "max_layers", 2 ** 63 - 1),
])
def test_bad_config_in_a_subprocess(tmp_path, command, section, key, value):
    """The same contract as a user sees it (a separate process, real exit status)."""
    config = json.loads(json.dumps(COMMANDS[command][0]))
    config.setdefault(section, {})[key] = value
    (tmp_path / "c.toml").write_text(to_toml(config))
    out = run_cli(command, "c.toml", *COMMANDS[command][1], cwd=tmp_path)
    assert out.returncode == 2, out.stderr
    assert f"{section}.{key}" in out.stderr and "Traceback" not in out.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["c.toml"]
    if key == "t_finall":
        assert "did you mean 't_final'" in out.stderr


@pytest.mark.parametrize("command", ["spectrum", "potential", "evolve", "fit", "size"])
def test_valid_base_config_round_trips(command):
    """The fuzz bases are valid; validating the plain form of a resolved config gives it back."""
    from lgt.config import with_folder
    from lgt.io import canonical_json
    from lgt.tasks import get_task

    task = get_task(command)
    resolved = task.validate(with_folder(COMMANDS[command][0], None))
    plain = resolved.to_dict()
    assert json.loads(canonical_json(plain)) == plain
    assert task.validate(plain) == resolved
    assert task.validate(json.loads(json.dumps(plain))).to_dict() == plain


@FUZZ
@given(mass=st.floats(-5, 5), theta=st.floats(-7, 7), sites=st.sampled_from([4, 6]),
       count=st.integers(1, 20), link=st.sampled_from(["truncated", "quantum-link"]))
def test_resolved_configs_round_trip_and_keep_their_identity(mass, theta, sites, count, link):
    """validate(to_dict(validate(c))) == validate(c), and the sweep run identity of both agree."""
    from lgt.sweep.plan import run_identity
    from lgt.tasks import get_task

    model = {"sites": sites, "mass": mass, "theta": theta, "link": link,
             "levels": 3 if link == "truncated" else 2}
    for name, config in (("spectrum", {"model": model, "spectrum": {"count": count}}),
                         ("potential", {"model": model, "potential": {"distances": [1, 3], "masses": 2}}),
                         ("evolve", {"model": model, "evolution": {"t_final": 0.1 * count, "dt": 0.1}})):
        task = get_task(name)
        resolved = task.validate(config)
        again = task.validate(resolved.to_dict())
        assert again == resolved and task.validate(resolved) is resolved
        assert run_identity(name, again.to_dict()) == run_identity(name, resolved.to_dict())


def test_a_resolved_config_of_another_task_is_refused():
    from lgt.errors import ConfigError
    from lgt.tasks import get_task

    spectrum = get_task("spectrum").validate({"model": MODEL})
    with pytest.raises(ConfigError) as info:
        get_task("evolve").validate(spectrum)
    assert info.value.key == "spectrum"
