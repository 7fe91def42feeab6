"""``fluxline runs results.h5``: list the runs of a sweep with status and swept parameters."""

from __future__ import annotations

import argparse
import json
import time


def handle(args: argparse.Namespace) -> int:
    """Print one line per run (or JSON lines with ``--json``); exit 1 if any run is not complete
    (failed, corrupt or missing); 2 if the file cannot be read as a sweep file."""
    from lgt.errors import InputError
    from lgt.io import DAMAGE
    from lgt.sweep.reader import list_runs, sweep_info
    from lgt.sweep.store import full_check_by_default

    try:
        info = sweep_info(args.results)
        rows = list_runs(args.results, verify=args.verify)
    except DAMAGE as exc:
        raise InputError(args.results, f"cannot be read as a sweep file ({exc})") from None
    if args.json:
        for row in rows:
            print(json.dumps(row))
    else:
        _print_table(info, rows)
        if not args.verify and not full_check_by_default(args.results):
            print("structure checked; pass --verify to read every dataset")
    return 0 if len(rows) == info["points"] and all(r["status"] == "complete" for r in rows) else 1


def _print_table(info: dict, rows: list[dict]) -> None:
    complete = sum(r["status"] == "complete" for r in rows)
    corrupt = sum(r["status"] == "corrupt" for r in rows)
    print(f"task {info['task']}: {complete} of {info['points']} runs complete "
          f"(config {info['config_hash'][:12]})"
          + (f"; {corrupt} corrupt" if corrupt else ""))
    axes = list(info["grid"]) + list(info["zip"])
    header = ["point", "run", "status", *axes, "seconds", "finished"]
    table = [header]
    for r in rows:
        finished = (time.strftime("%Y-%m-%d %H:%M:%S", time.localtime(r["finished_at"]))
                    if r["finished_at"] else "-")
        status = r["status"] + (" (pending merge)" if r["storage"] != "merged" else "")
        seconds = f"{r['wall_seconds']:.2f}" if r["wall_seconds"] is not None else "-"
        table.append([str(r["point"]), r["run_id"], status,
                      *(json.dumps(r["assignments"].get(k)) for k in axes), seconds, finished])
    widths = [max(len(row[i]) for row in table) for i in range(len(header))]
    for row in table:
        print("  ".join(cell.ljust(w) for cell, w in zip(row, widths)).rstrip())
    for r in rows:
        if r["error"]:
            print(f"run {r['run_id']} {'is corrupt' if r['status'] == 'corrupt' else 'failed'}: "
                  f"{r['error']}")
    if corrupt:
        print("corrupt runs are recomputed by re-running the sweep command")
    missing = info["points"] - len(rows)
    if missing:
        print(f"{missing} runs not started; re-run the sweep command to compute them")


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``runs`` subcommand."""
    p = subparsers.add_parser("runs", help="list the runs stored in a sweep results file")
    p.add_argument("results", help="HDF5 file written by 'fluxline sweep'")
    p.add_argument("--json", action="store_true", help="one JSON object per run")
    p.add_argument("--verify", action="store_true", default=None,
                   help="read every dataset in full (checks the fletcher32 checksums); "
                        "the default for files up to 256 MiB")
    p.set_defaults(func=handle)
