"""``fluxline potential CONFIG.toml [--distances 1 3 5 …] [--output F.h5] [--json]``: the potential task."""

from __future__ import annotations

import argparse
import json
import math

from lgt.commands import config_command, resolve, write_output

#: Scalar results of the potential task (None in JSON where not determined).
SCALARS = ("vacuum_energy", "string_tension", "intercept", "plateau", "breaking_distance",
           "two_meson_crossing")


def potential_summary(result) -> dict:
    """JSON object of a potential run (V(r), meson masses, string fit)."""
    a, arr = result.attributes, result.arrays
    out = {"model": result.parameters["model"], "distances": arr["distances"].tolist(),
           "charge_sites": arr["charge_sites"].tolist(), "potential": arr["potential"].tolist(),
           "meson_masses": arr["meson_masses"].tolist(), "fit_distances": arr["fit_distances"].tolist()}
    out.update({k: None if math.isnan(a[k]) else a[k] for k in SCALARS})
    return out


def _run(args: argparse.Namespace) -> int:
    from lgt.errors import ConfigError
    from lgt.tasks import get_task

    overrides = {"potential": {"distances": list(args.distances)}} if args.distances else None
    try:
        resolved = resolve(args, "potential", overrides)
    except ConfigError as exc:
        if overrides and exc.key == "potential.distances":  # name the option the user typed
            raise ConfigError("--distances", exc.value, exc.reason) from None
        raise
    result = get_task("potential").run(resolved, progress=not args.quiet)
    write_output(args, result)
    out = potential_summary(result)
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
    if args.output:
        print(f"wrote {args.output}")
    return 0


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``potential`` subcommand."""
    p = config_command(subparsers, "potential", "static potential, string tension and breaking distance",
                       "TOML file with a [model] section (and optional [potential])", _run,
                       output_help="write the run to this HDF5 file")
    p.add_argument("--distances", type=int, nargs="+", help="odd charge separations r (default: [potential] distances)")
