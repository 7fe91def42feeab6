"""Regenerate the shipped native blocks (``lgt/data/compiled_blocks.json``).

    python -m lgt.variational.precompile [--levels 2 3 5] [--links truncated quantum-link]

builds the exact native block of every distinct term of an 8-site chain (left / right boundary,
interior hopping on even and odd links, boundary and interior mass, electric; the blocks do not
depend on w, m, J or the chain length) for each d and link type, with the built-in profile's
gate set, and writes them into the package's data file. Run it from a source checkout; users
fill their own cache with ``fluxline compile CONFIG``.
"""

from __future__ import annotations

import argparse
import os
import tempfile
from importlib import resources
from pathlib import Path

from circuits.hardware import load_profile
from lgt.model import ModelParams


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--levels", type=int, nargs="+", default=[2, 3, 5])
    parser.add_argument("--links", nargs="+", default=["truncated", "quantum-link"])
    parser.add_argument("--sites", type=int, default=8)
    args = parser.parse_args(argv)
    shipped = Path(str(resources.files("lgt").joinpath("data/compiled_blocks.json")))
    profile = load_profile()
    with tempfile.TemporaryDirectory() as tmp:
        os.environ["FLUXLINE_CACHE_DIR"] = tmp
        from lgt.variational import native_cost

        shipped.write_text('{"format": %d, "blocks": {}}' % native_cost.CACHE_FORMAT)
        for d in args.levels:
            for link in args.links:
                if link == "truncated" and d % 2 == 0:
                    continue  # truncated links need an integer window (odd d)
                params = ModelParams(sites=args.sites, levels=d, link=link, mass=1.0)
                costs = native_cost.costs_by_block_kind(params, profile)
                for kind, c in costs.items():
                    print(f"d={d} {link:<12} {kind:<17} {c.two_qudit:>4} two-qudit {c.single_qudit:>4} single-qudit")
        blocks = native_cost._read_json(native_cost._cache_file()).get("blocks", {})
    native_cost.write_blocks(shipped, blocks)
    print(f"{len(blocks)} blocks in {shipped}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
