"""``fluxline evolve CONFIG.toml [--output run.h5] [--json] [--quiet]``: the evolve task."""

from __future__ import annotations

import argparse
import json

import numpy as np

from lgt.commands import config_command, resolve, write_output

#: Observables the ``--json`` object always carries (added to the run if the config omits them).
JSON_KEYS = ("particle_density", "electric_field", "loschmidt_echo", "entanglement_entropy", "energy")


def _run(args: argparse.Namespace) -> int:
    from lgt.tasks import get_task

    resolved = resolve(args, "evolve")  # every ConfigError, the size guard and --output before any work
    if args.json:
        resolved = resolved.with_observables(JSON_KEYS)
    result = get_task("evolve").run(resolved, progress=not args.quiet)
    write_output(args, result)
    if args.json:
        times = result.series["energy"].times
        out = {"times": times.tolist()}
        for k in JSON_KEYS:
            series = result.series[k]
            out[k] = np.asarray(series.values).tolist()
            if not np.array_equal(series.times, times):  # entropies at their own stride
                out[f"{k}_times"] = series.times.tolist()
        out.update({k: np.asarray(result.series[k].values).tolist()  # MPS runs (lgt.mps.evolve)
                    for k in ("bond_dimension", "discarded_weight") if k in result.series})
        print(json.dumps(out))
        return 0
    a = result.attributes
    s = result.series
    times = next(iter(s.values())).times
    print(f"evolved {len(times)} stored times to t = {times[-1]:g} "
          f"in a {a['dimension']}-state physical subspace "
          f"({result.timings['build']:.2f} s build, {result.timings['evolve']:.2f} s evolve)")
    print(f"energy {a['initial_energy']:.10f} (relative drift {a['energy_drift']:.1e}), "
          f"norm drift {a['norm_drift']:.1e}")
    for name in ("particle_density", "loschmidt_echo", "entanglement_entropy"):
        if name in s:
            v = np.asarray(s[name].values)
            print(f"{name}: start {v[0]:.6f}, end {v[-1]:.6f}, min {v.min():.6f}, max {v.max():.6f}")
    if args.output:
        print(f"wrote {args.output}")
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``evolve`` subcommand."""
    config_command(subparsers, "evolve", "exact time evolution of the [initial] state of CONFIG",
                   "TOML file with [model], [initial] and [evolution]", _run,
                   output_help="write the run to this HDF5 file")
