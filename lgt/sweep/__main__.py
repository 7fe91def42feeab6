"""``python -m lgt.sweep CONFIG.toml --output results.h5 ...``: the sweep command on its own."""

from __future__ import annotations

import argparse
import sys

from lgt.commands.sweep import add_arguments, handle
from lgt.errors import ConfigError, InputError, ResourceError
from lgt.signals import describe, status_of, stop_on_signals


def main(argv: list[str] | None = None) -> int:
    """Parse arguments and run; ConfigError -> message on stderr, exit status 2."""
    parser = argparse.ArgumentParser(prog="python -m lgt.sweep")
    add_arguments(parser)
    args = parser.parse_args(argv)
    try:
        with stop_on_signals():
            return handle(args)
    except (ConfigError, InputError, ResourceError) as exc:
        print(f"fluxline: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt as exc:
        print(f"fluxline: {describe(exc)}", file=sys.stderr)
        return status_of(exc)


if __name__ == "__main__":
    sys.exit(main())
