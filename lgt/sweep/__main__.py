"""``python -m lgt.sweep CONFIG.toml --output results.h5 ...``: the sweep command on its own."""

from __future__ import annotations

import argparse
import sys

from lgt.commands.sweep import add_arguments, handle
from lgt.errors import ConfigError


def main(argv: list[str] | None = None) -> int:
    """Parse arguments and run; ConfigError -> message on stderr, exit status 2."""
    parser = argparse.ArgumentParser(prog="python -m lgt.sweep")
    add_arguments(parser)
    args = parser.parse_args(argv)
    try:
        return handle(args)
    except ConfigError as exc:
        print(f"fluxline: error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
