"""Figures of an evolution run (matplotlib, Agg canvas: no display needed).

Each ``draw_*`` function draws on a given Axes and accepts an optional ``overlay`` run (e.g. a
variational fit) drawn dashed on top of the exact curve; :func:`plot_run` writes one PNG per
figure. Times are in lattice units.
"""

from __future__ import annotations

from pathlib import Path
from typing import Sequence

import numpy as np
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from lgt.results import RunResult

#: Scalar observables plotted against time by :func:`plot_run`, with axis labels.
LINE_PLOTS = {
    "particle_density": "particle density ν",
    "loschmidt_echo": "Loschmidt echo |⟨ψ₀|ψ(t)⟩|²",
    "entanglement_entropy": "entanglement entropy S (nats)",
}


def draw_field_map(ax: Axes, result: RunResult, name: str = "electric_field") -> None:
    """Space–time map of a per-link (or per-site) observable: horizontal axis link, vertical time."""
    series = result.series[name]
    values = np.asarray(series.values, dtype=float)
    t = np.asarray(series.times, dtype=float)
    span = max(float(np.max(np.abs(values))), 1e-12)
    t_hi = t[-1] if t.size > 1 else t[0] + 1.0
    im = ax.imshow(values, aspect="auto", origin="lower", cmap="RdBu_r", vmin=-span, vmax=span,
                   extent=(-0.5, values.shape[1] - 0.5, t[0], t_hi), interpolation="nearest")
    ax.set_xlabel("link n" if name.startswith("electric") else "site n")
    ax.set_ylabel("time t (lattice units)")
    ax.figure.colorbar(im, ax=ax, label=f"⟨{'L_n' if name == 'electric_field' else name}⟩")


def draw_series(ax: Axes, result: RunResult, name: str, overlay: RunResult | None = None,
                labels: Sequence[str] = ("exact", "overlay")) -> None:
    """A scalar observable vs time; ``overlay`` (if it has the observable) is drawn dashed."""
    for run, style, label in ((result, "-", labels[0]), (overlay, "--", labels[1])):
        if run is None or name not in run.series:
            continue
        s = run.series[name]
        ax.plot(s.times, s.values, style, label=label)
    ax.set_xlabel("time t (lattice units)")
    ax.set_ylabel(LINE_PLOTS.get(name, name))
    if overlay is not None:
        ax.legend()


def _save(fig: Figure, path: Path) -> Path:
    FigureCanvasAgg(fig)
    fig.tight_layout()
    fig.savefig(path, dpi=120)
    return path


def plot_run(result: RunResult, outdir: str | Path, overlay: RunResult | None = None,
             prefix: str = "") -> list[Path]:
    """Write PNGs for the observables present in ``result``; return the paths written.

    Files: ``{prefix}electric_field_map.png`` (and ``{prefix}electric_field_map_overlay.png``
    when ``overlay`` has fields), then ``{prefix}<name>.png`` for each of :data:`LINE_PLOTS`.
    """
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    written = []
    for run, suffix in ((result, ""), (overlay, "_overlay")):
        if run is not None and "electric_field" in run.series:
            fig = Figure(figsize=(6, 4.5))
            draw_field_map(fig.add_subplot(), run)
            written.append(_save(fig, outdir / f"{prefix}electric_field_map{suffix}.png"))
    for name in LINE_PLOTS:
        if name in result.series:
            fig = Figure(figsize=(6, 3.5))
            draw_series(fig.add_subplot(), result, name, overlay)
            written.append(_save(fig, outdir / f"{prefix}{name}.png"))
    return written


__all__ = ["plot_run", "draw_field_map", "draw_series", "LINE_PLOTS"]
