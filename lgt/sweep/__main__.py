"""``python -m lgt.sweep CONFIG.toml --output results.h5 ...``: the sweep command on its own."""

from __future__ import annotations

import argparse
import sys

from lgt.cli import run_entry
from lgt.commands.sweep import add_arguments, handle


def main(argv: list[str] | None = None) -> int:
    """Parse arguments and run; errors as for ``fluxline sweep`` (one line, lgt.errors.exit_status)."""
    parser = argparse.ArgumentParser(prog="python -m lgt.sweep")
    add_arguments(parser)
    return run_entry(handle, parser.parse_args(argv))


if __name__ == "__main__":
    sys.exit(main())
