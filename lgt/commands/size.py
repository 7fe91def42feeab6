"""``fluxline size CONFIG.toml [--output F.h5] [--json] [--quiet]``: the size task.

Least depth meeting the tolerance, gate-error budget, Trotter baseline, shots. Exit status 3
when no depth up to ``max_layers`` meets the tolerance (the table is still printed in full).
"""

from __future__ import annotations

import argparse
import json

from lgt.commands import config_command, resolve, write_output
from lgt.commands.tolerance import report


class SizeProgress:
    """Progress of a sizing run on stderr: a bar over depths (at most ``max_layers`` per sized
    family; the search stops one depth past the first that meets the tolerance, so its ETA is an
    upper bound) and a bar over the time steps of the depth being fitted, each with an ETA.

    Called with a message after each depth (:func:`lgt.variational.sizing.size_depth`'s ``log``);
    its :meth:`step` is the fit's per-step callback.
    """

    def __init__(self, depths: int, steps: int) -> None:
        import sys

        from tqdm import tqdm

        self._write = lambda msg: tqdm.write(msg, file=sys.stderr)
        self.depths = tqdm(total=depths, desc="size: depths", unit="depth", file=sys.stderr, position=0)
        self.steps = tqdm(total=steps, desc="size: steps", unit="step", file=sys.stderr, position=1, leave=False)

    def __call__(self, msg: str) -> None:
        self._write(msg)
        self.depths.update(1)
        self.steps.reset()

    def step(self, k: int) -> None:
        """One time step of the current depth fitted."""
        self.steps.update(1)

    def close(self) -> None:
        self.steps.close()
        self.depths.close()


def _run(args: argparse.Namespace) -> int:
    from lgt.tasks import get_task
    from lgt.variational.budget import COST_WORDS, profile_lines, profile_summary
    from lgt.variational.workflow import size_summary_dict

    from lgt.variational.families import available_families

    resolved = resolve(args, "size")
    settings = resolved.settings
    log = None
    if not args.quiet:
        families = len(available_families(resolved.model)) if settings.compare_families else 1
        log = SizeProgress(settings.max_layers * families, settings.n_steps)
    try:
        result = get_task("size").run(resolved, log=log)
    finally:
        if log is not None:
            log.close()
    summary = size_summary_dict(result)
    summary["cost_source"] = result.attributes["cost_source"]
    summary.update(profile_summary(resolved.profile))
    write_output(args, result)
    v = resolved["variational"]
    status = report(summary["meets_tolerance"], f"no depth up to max_layers = {v['max_layers']}", v)
    if args.json:
        print(json.dumps(summary))
        return status
    print(f"depth sizing: tolerance {v['tolerance']} on {v['criterion']} over [0, {v['t_final']}]")
    for line in profile_lines(resolved.profile):
        print(line)
    source = summary["cost_source"]
    print(f"native costs priced from the {COST_WORDS.get(source, source)}")
    for family, part in summary["families"].items():
        print(f"\n{family} layers (native gates per circuit; '<' marks the least depth meeting the tolerance)")
        print(f"{'D':>3} {'params':>7} {'max 1-F':>10} {'leakage':>9} {'2q gates':>9} {'1q gates':>9} "
              f"{'other':>6} {'time us':>9} {'F noise':>8} {'F total':>8}")
        for r in part["table"]:
            mark = " <" if r["layers"] == part["layers"] else ""
            print(f"{r['layers']:>3} {r['parameters']:>7} {r['max_infidelity']:>10.2e} {r['max_leakage']:>9.1e} "
                  f"{r['two_qudit_gates']:>9} {r['single_qudit_gates']:>9} {r['other_gates']:>6} "
                  f"{r['duration_us']:>9.0f} {r['noise_fidelity']:>8.4f} {r['total_fidelity']:>8.4f}{mark}")
        best = part.get("best_layers_under_noise", summary["budget"]["best_layers_under_noise"])
        print(f"best {family} depth under the gate-error budget (max F total): {best}")
    print()
    chosen = summary["layers"]
    print(f"least depth of {summary['family']} layers meeting the tolerance: {chosen if chosen is not None else 'none up to max_layers'}")
    for t in summary["trotter"]:
        steps = t["steps"] if t["steps"] is not None else "not reached"
        print(f"Trotter order {t['order']}: {steps} steps, {t['two_qudit_gates']} two-qudit gates, "
              f"predicted noise fidelity {t['noise_fidelity']:.4f}")
    shots = ", ".join(f"{k} {n}" for k, n in summary["shots"].items())
    print(f"shots for standard error {v['shots_error']}: {shots}")
    print(f"depth of least predicted observable error under simulated noise: {summary['budget']['best_layers_under_noise_simulated']}")
    return status


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``size`` subcommand."""
    config_command(subparsers, "size", "least number of layers meeting the tolerance, with budget and Trotter",
                   "TOML file with [model], [initial], [variational]", _run,
                   output_help="HDF5 file for the sizing results")
