"""Sweep config expansion: grid × zip, validation of every point, stable run identity."""

from __future__ import annotations

import hashlib
import json
import sys

import pytest

from lgt.errors import ConfigError
from lgt.sweep.plan import expand_sweep, run_identity

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib


def _config(extra: str) -> dict:
    return tomllib.loads('[model]\nsites = 4\nlevels = 3\n\n' + extra)


GRID_ZIP = '''
[sweep]
task = "spectrum"
[sweep.grid]
"model.mass" = [0.1, 0.2, 0.3]
"model.coupling" = [1.0, 2.0]
[sweep.zip]
"model.hopping" = [0.5, 1.5]
"model.theta" = [0.0, 3.0]
'''


def test_grid_times_zip_order_and_count():
    plan = expand_sweep(_config(GRID_ZIP))
    assert len(plan.points) == 3 * 2 * 2
    assert plan.axes == ("model.mass", "model.coupling", "model.hopping", "model.theta")
    first, second, third = plan.points[:3]
    assert first.assignments == {"model.mass": 0.1, "model.coupling": 1.0,
                                 "model.hopping": 0.5, "model.theta": 0.0}
    assert second.assignments == {"model.mass": 0.1, "model.coupling": 1.0,
                                  "model.hopping": 1.5, "model.theta": 3.0}
    assert third.assignments["model.coupling"] == 2.0
    assert plan.points[-1].config["model"]["mass"] == 0.3
    assert plan.points[-1].config["model"]["sites"] == 4  # base value kept
    assert len({p.run_id for p in plan.points}) == 12


def test_unquoted_dotted_keys_are_the_same_axes():
    quoted = expand_sweep(_config('[sweep]\ntask = "spectrum"\n[sweep.grid]\n"model.mass" = [0.1, 0.2]\n'))
    nested = expand_sweep(_config('[sweep]\ntask = "spectrum"\n[sweep.grid]\nmodel.mass = [0.1, 0.2]\n'))
    assert [p.run_id for p in quoted.points] == [p.run_id for p in nested.points]


def test_run_id_is_sha256_of_canonical_json():
    point = expand_sweep(_config(GRID_ZIP)).points[5]
    # Independent recomputation with the standard library (RFC 8259 JSON, FIPS 180-4 SHA-256).
    text = json.dumps({"task": "spectrum", "config": point.config}, sort_keys=True,
                      separators=(",", ":"))
    assert point.run_id == hashlib.sha256(text.encode()).hexdigest()[:16]
    assert run_identity("spectrum", point.config) == point.run_id


def test_ids_do_not_depend_on_axis_order_or_int_float_spelling():
    a = expand_sweep(_config('[sweep]\ntask = "spectrum"\n[sweep.grid]\n'
                             '"model.mass" = [0, 1]\n"model.coupling" = [1, 2]\n'))
    b = expand_sweep(_config('[sweep]\ntask = "spectrum"\n[sweep.grid]\n'
                             '"model.coupling" = [1.0, 2.0]\n"model.mass" = [0.0, 1.0]\n'))
    assert {p.run_id for p in a.points} == {p.run_id for p in b.points}
    assert a.config_hash != b.config_hash  # a different file is a different sweep


@pytest.mark.parametrize("text, key, fragment", [
    ('[sweep]\ntask = "spectrum"\n[sweep.grid]\n"model.mass" = []\n',
     'sweep.grid."model.mass"', "empty axis"),
    ('[sweep]\ntask = "spectrum"\n[sweep.grid]\n"lattice.mass" = [1.0]\n',
     'sweep.grid."lattice.mass"', "unknown section"),
    ('[sweep]\ntask = "spectrum"\n[sweep.grid]\n"evolution.dt" = [0.1, 0.2]\n',
     'sweep.grid."evolution.dt"', "does not read [evolution]"),
    ('[sweep]\ntask = "spectrum"\n[sweep.grid]\n"mass" = [1.0]\n',
     'sweep.grid."mass"', "dotted"),
    ('[sweep]\ntask = "spectrum"\n[sweep.grid]\n"model.mass" = 0.3\n',
     'sweep.grid."model.mass"', "must be a list"),
    ('[sweep]\ntask = "spectrum"\n[sweep.zip]\n"model.mass" = [1.0, 2.0]\n"model.theta" = [1.0]\n',
     'sweep.zip."model.theta"', "equal lengths"),
    ('[sweep]\ntask = "spectrum"\n[sweep.grid]\n"model.mass" = [1.0]\n[sweep.zip]\n"model.mass" = [2.0]\n',
     'sweep.zip."model.mass"', "also a grid axis"),
    ('[sweep]\ntask = "anneal"\n', "sweep.task", "must be one of"),
    ('[sweep]\n[sweep.grid]\n"model.mass" = [1.0]\n', "sweep.task", "is required"),
    ('[sweep]\ntask = "spectrum"\nrepeat = 3\n', "sweep.repeat", "unknown key"),
])
def test_malformed_sweeps_name_the_key(text, key, fragment):
    with pytest.raises(ConfigError) as info:
        expand_sweep(_config(text))
    assert info.value.key == key
    assert fragment in str(info.value)


def test_invalid_value_at_one_point_names_key_and_point():
    text = ('[sweep]\ntask = "spectrum"\n[sweep.grid]\n"model.mass" = [0.2, 0.4]\n'
            '"model.levels" = [3, 4, 5]\n')
    with pytest.raises(ConfigError) as info:
        expand_sweep(_config(text))
    err = info.value
    assert err.key == 'sweep.grid."model.levels"' and err.value == 4
    assert "point 1 (model.mass=0.2, model.levels=4)" in str(err)
    assert "odd" in str(err)


def test_unknown_model_key_is_reported_at_first_point():
    with pytest.raises(ConfigError) as info:
        expand_sweep(_config('[sweep]\ntask = "spectrum"\n[sweep.zip]\n"model.massive" = [1.0]\n'))
    assert info.value.key == 'sweep.zip."model.massive"'
    assert "point 0" in str(info.value) and "unknown key" in str(info.value)


def test_base_section_error_names_the_point():
    config = _config('[spectrum]\ncount = 0\n[sweep]\ntask = "spectrum"\n[sweep.grid]\n"model.mass" = [1.0]\n')
    with pytest.raises(ConfigError) as info:
        expand_sweep(config)
    assert info.value.key == "spectrum.count" and "point 0 (model.mass=1.0)" in str(info.value)


def test_points_resolving_to_the_same_run_are_rejected():
    text = '[sweep]\ntask = "spectrum"\n[sweep.grid]\n"model.mass" = [0.5, 0.5]\n'
    with pytest.raises(ConfigError, match="point 1 resolves to the same run as point 0"):
        expand_sweep(_config(text))


def test_missing_sweep_section():
    with pytest.raises(ConfigError) as info:
        expand_sweep(_config(""))
    assert info.value.key == "sweep"
