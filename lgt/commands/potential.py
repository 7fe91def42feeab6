"""``fluxline potential CONFIG.toml --distances 1 3 5 … [--json]``: static potential V(r)."""

from __future__ import annotations

import argparse
import json

from lgt.commands import config_command


def _run(args: argparse.Namespace) -> int:
    from lgt.config import load_config
    from lgt.model import ModelParams
    from lgt.spectroscopy import resolve_potential, static_potential

    resolved = resolve_potential(load_config(args.config), args.distances)
    section = resolved["potential"]
    out = static_potential(ModelParams.from_dict(resolved["model"]), section["distances"], section["masses"],
                           **{k: section[k] for k in ("method", "bond_dimension") if k in section})
    if args.json:
        print(json.dumps(out))
        return 0
    print(f"{'r':>4}  {'+1 site':>7}  {'-1 site':>7}  {'V(r)':>14}")
    for r, (i, j), v in zip(out["distances"], out["charge_sites"], out["potential"]):
        print(f"{r:>4}  {i:>7}  {j:>7}  {v:>14.8f}")
    print("meson masses (lowest gaps): " + ", ".join(f"{m:.8f}" for m in out["meson_masses"]))
    if out["string_tension"] is not None:
        print(f"string tension {out['string_tension']:.6f} from r = {out['fit_distances']}")
    if out["breaking_distance"] is not None:
        print(f"string breaks near r = {out['breaking_distance']:.3f} (plateau V = {out['plateau']:.6f})")
    else:
        print("no saturation within the distances given")
    if out["two_meson_crossing"] is not None:
        print(f"linear V(r) reaches 2 x lightest meson mass at r = {out['two_meson_crossing']:.3f}")
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``potential`` subcommand."""
    p = config_command(subparsers, "potential", "static potential, string tension and breaking distance",
                       "TOML file with a [model] section (and optional [potential])", _run)
    p.add_argument("--distances", type=int, nargs="+", help="odd charge separations r")
