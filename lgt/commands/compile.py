"""``fluxline compile CONFIG.toml [--json] [--quiet]``: fill the native-block cache ahead of time.

Compiles the exact native block of every term exponential of the configured model with the
configured hardware profile's gate set (see ``docs/circuits.md``) and stores the new ones in the
user cache (``$FLUXLINE_CACHE_DIR``, default ``~/.cache/fluxline``), so that ``fit`` and ``size``
start without compiling.
"""

from __future__ import annotations

import argparse
import json
import time
from pathlib import Path

from lgt.commands import config_command, resolve


def _run(args: argparse.Namespace) -> int:
    from circuits.hardware import load_profile
    from lgt.model import ModelParams
    from lgt.variational.native_cost import cache_dir, costs_by_block_kind, uncompiled_blocks

    resolved = resolve(args, "fit")  # the fit task's [model] and [variational], validated once
    params = ModelParams.from_dict(resolved["model"])
    settings = resolved["variational"]
    profile = load_profile(settings.get("hardware_profile"), relative_to=Path(args.config).parent)
    gate_set = profile.gate_set(params.levels)
    missing = uncompiled_blocks(params, gate_set)
    t0 = time.perf_counter()
    costs = costs_by_block_kind(params, profile, settings["compile_fidelity"],
                                progress=not (args.json or args.quiet))
    seconds = time.perf_counter() - t0
    by_kind = {kind: {"two_qudit_gates": c.two_qudit, "single_qudit_gates": c.single_qudit,
                      "duration_us": c.duration_us, "fidelity": c.fidelity, "compile_fidelity": c.compile_fidelity}
               for kind, c in costs.items()}
    summary = {"levels": params.levels, "link": params.link, "gate_set": gate_set.identity(),
               "hardware_profile": profile.identity(), "compiled": missing, "seconds": seconds,
               "cache": str(cache_dir()), "blocks": by_kind}
    if args.json:
        print(json.dumps(summary))
        return 0
    print(f"native blocks for d = {params.levels}, {params.link} links, gate set {gate_set.entangler} "
          f"(profile {profile.name!r}, sha256 {profile.sha256[:12]})")
    print(f"  compiled {len(missing)} new block kinds in {seconds:.2f} s; cache {cache_dir()}")
    for kind, row in by_kind.items():
        print(f"  {kind:<17} {row['two_qudit_gates']:>4} two-qudit {row['single_qudit_gates']:>4} single-qudit "
              f"{row['duration_us']:>8.0f} us  F = {row['fidelity']:.4f}  compile 1-F = {1 - row['compile_fidelity']:.1e}")
    if profile.builtin:
        print("  the built-in profile's numbers are illustrative; replace them with your device's:")
        for line in profile.source_lines():
            print(f"    {line}")
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``compile`` subcommand."""
    p = config_command(subparsers, "compile", "compile the model's native gate blocks into the user cache",
                       "TOML file with [model] (and [variational] for the hardware profile)", _run)
    p.add_argument("--no-progress", dest="quiet", action="store_true", help="same as --quiet")
