"""Run the ``fluxline`` command line in a subprocess (as a user would), for the CLI tests."""

from __future__ import annotations

import subprocess
import sys


def run_cli(*args: str, cwd=None) -> subprocess.CompletedProcess:
    """``python -m lgt ARGS``, capturing text output."""
    return subprocess.run([sys.executable, "-m", "lgt", *args], capture_output=True, text=True, cwd=cwd)
