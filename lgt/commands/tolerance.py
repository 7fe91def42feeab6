"""Honest results of ``fit`` and ``size``: whether the requested tolerance was met, said plainly.

A run that misses its tolerance still prints (and writes) everything, warns on stderr, puts
``"meets_tolerance": false`` in its ``--json`` object and exits with
:data:`lgt.errors.EXIT_TOLERANCE_MISSED` (3).
"""

from __future__ import annotations

import sys
from typing import Any, Mapping

import numpy as np

from lgt.errors import EXIT_OK, EXIT_TOLERANCE_MISSED


def fit_meets_tolerance(result, settings: Mapping[str, Any]) -> bool:
    """``result.attributes["meets_tolerance"]`` when the fit reports it; otherwise from what the
    result holds: max 1 − F(t) ≤ tolerance (``criterion = "fidelity"``), or the largest error of
    the criterion observables ≤ ``observable_tolerance`` (``criterion = "observables"``)."""
    if "meets_tolerance" in result.attributes:
        return bool(result.attributes["meets_tolerance"])
    if settings["criterion"] == "fidelity":
        return bool(result.attributes["max_infidelity"] <= settings["tolerance"])
    from lgt.variational.sizing import CRITERION_OBSERVABLES

    worst = max(float(np.max(result.reference_error(name).values)) for name in CRITERION_OBSERVABLES)
    return bool(worst <= settings["observable_tolerance"])


def report(meets: bool, what: str, settings: Mapping[str, Any]) -> int:
    """Warn on stderr when ``meets`` is false; return the exit status (0 or 3)."""
    if meets:
        return EXIT_OK
    if settings["criterion"] == "fidelity":
        target = f"tolerance {settings['tolerance']:g} on 1 - F(t)"
    else:
        target = f"observable_tolerance {settings['observable_tolerance']:g}"
    print(f"fluxline: warning: {what} does not meet the requested {target}; results are reported "
          f"in full, exit status {EXIT_TOLERANCE_MISSED}", file=sys.stderr)
    return EXIT_TOLERANCE_MISSED
