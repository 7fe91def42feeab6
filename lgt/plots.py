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


def split_fit(result: RunResult) -> tuple[RunResult, RunResult]:
    """(exact reference, variational) runs from a ``fit`` result: its ``reference`` and the
    series of the same observables."""
    exact = dict(result.reference)
    fitted = {name: result.series[name] for name in result.reference}
    return (RunResult("evolve", result.parameters, exact),
            RunResult("fit", result.parameters, fitted, attributes=result.attributes))


#: Fit diagnostics plotted for ``fit`` results (log scale).
FIT_PLOTS = {"fidelity": "infidelity 1 − F(t) vs exact", "leakage": "leakage out of the physical subspace",
             "step_infidelity": "step infidelity"}


def fit_tolerance(result: RunResult) -> float | None:
    """The infidelity tolerance a fit was asked to meet (``[variational] tolerance``), if any."""
    value = result.attributes.get("tolerance")
    if value is None:
        value = (result.parameters.get("variational") or {}).get("tolerance")
    return None if value is None else float(value)


def plot_run(result: RunResult, outdir: str | Path, overlay: RunResult | None = None,
             prefix: str = "") -> list[Path]:
    """Write PNGs for the observables present in ``result``; return the paths written.

    Files: ``{prefix}electric_field_map.png`` (and ``{prefix}electric_field_map_overlay.png``
    when ``overlay`` has fields), then ``{prefix}<name>.png`` for each of :data:`LINE_PLOTS`.
    A ``fit`` result is drawn as its exact reference with the fitted curves dashed on top,
    plus ``{prefix}fit_diagnostics.png`` (infidelity, step infidelity, leakage vs time). A
    ``predict`` or ``analyze`` result is drawn by :func:`lgt.lab.plots.plot_lab_report`.
    """
    if result.task in ("predict", "analyze"):  # exact, raw and mitigated curves with error bands
        from lgt.lab.plots import plot_lab_report
        from lgt.lab.report import report_from_result

        return plot_lab_report(report_from_result(result), Path(outdir))
    if result.task == "fit" and overlay is None:
        exact, fitted = split_fit(result)
        written = _plot_pair(exact, fitted, Path(outdir), prefix, ("exact", "variational"))
        fig = Figure(figsize=(6, 3.5))
        ax = fig.add_subplot()
        for name, label in FIT_PLOTS.items():
            if name in result.series:
                s = result.series[name]
                y = 1.0 - np.asarray(s.values) if name == "fidelity" else np.asarray(s.values)
                ax.semilogy(s.times[1:], np.maximum(y[1:], 1e-16), label=label)
        tolerance = fit_tolerance(result)
        if tolerance is not None:
            ax.axhline(tolerance, color="k", linestyle=":", linewidth=1,
                       label=f"tolerance {tolerance:g} on 1 − F")
        ax.set_xlabel("time t (lattice units)")
        ax.legend(fontsize=8)
        written.append(_save(fig, Path(outdir) / f"{prefix}fit_diagnostics.png"))
        return written
    return _plot_pair(result, overlay, Path(outdir), prefix, ("exact", "overlay"))


def _plot_pair(result: RunResult, overlay: RunResult | None, outdir: Path, prefix: str,
               labels: Sequence[str]) -> list[Path]:
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
            draw_series(fig.add_subplot(), result, name, overlay, labels)
            written.append(_save(fig, outdir / f"{prefix}{name}.png"))
    return written


__all__ = ["plot_run", "split_fit", "draw_field_map", "draw_series", "LINE_PLOTS", "FIT_PLOTS", "fit_tolerance"]
