"""Compile the hopping exponentials of common models ahead of time into the shipped cache.

    python -m lgt.variational.precompile --levels 3 --link truncated --sites 8

compiles every distinct hopping block of that chain (left boundary, interior even/odd, right
boundary — the blocks do not depend on w, m, J or the chain length beyond 6 sites) with the
default native layer and writes them into ``lgt/data/compiled_blocks.json``.
"""

from __future__ import annotations

import argparse
import json
import os
import tempfile
from importlib import resources
from pathlib import Path

from circuits.hardware import load_profile
from lgt.model import ModelParams
from lgt.variational.native_cost import model_term_costs
from lgt.variational.settings import VariationalSettings


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--levels", type=int, required=True)
    parser.add_argument("--link", default="truncated")
    parser.add_argument("--sites", type=int, default=8)
    parser.add_argument("--entangler", default=VariationalSettings().entangler)
    parser.add_argument("--fidelity", type=float, default=VariationalSettings().compile_fidelity)
    args = parser.parse_args(argv)
    shipped = Path(str(resources.files("lgt").joinpath("data/compiled_blocks.json")))
    with tempfile.TemporaryDirectory() as tmp:
        os.environ["FLUXLINE_CACHE_DIR"] = tmp
        params = ModelParams(sites=args.sites, levels=args.levels, link=args.link)
        settings = VariationalSettings(entangler=args.entangler)
        costs = model_term_costs(params, settings.native_spec(), load_profile(), args.fidelity, compile=True)
        new = json.loads((Path(tmp) / "compiled_blocks.json").read_text()) if (Path(tmp) / "compiled_blocks.json").exists() else {}
    merged = json.loads(shipped.read_text()) if shipped.exists() else {}
    merged.update(new)
    shipped.write_text(json.dumps(merged, indent=0))
    for label, cost in costs.items():
        if cost.layers:
            print(f"{label}: {cost.layers} layers, fidelity {cost.compile_fidelity:.5f}, {cost.counts}")
    print(f"{len(new)} new blocks; {len(merged)} in {shipped}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
