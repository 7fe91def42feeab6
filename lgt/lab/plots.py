"""Figures of a predict / analyze report: exact, raw, mitigated curves with ±1σ error bands
(matplotlib, Agg canvas: no display needed). Times in lattice units."""

from __future__ import annotations

from pathlib import Path
from typing import Any, Mapping

import numpy as np
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

__all__ = ["draw_lab_curve", "plot_lab_report"]


def draw_lab_curve(ax: Axes, report: Mapping[str, Any], name: str, link: int | None = None) -> None:
    """``name`` vs time (``link``: one link of a per-link observable): exact line, raw and mitigated
    points with ±1 standard-error bands, and (predict) the noiseless fitted circuit dashed."""
    t = np.asarray(report["times"], dtype=float)
    entry = report[name]

    def pick(key: str) -> np.ndarray:
        v = np.asarray(entry[key], dtype=float)
        return v[:, link] if link is not None else v

    ax.plot(t, pick("exact"), "k-", label="exact")
    if "circuit" in entry:
        ax.plot(t, pick("circuit"), "k--", lw=0.8, label="fitted circuit, no noise")
    for kind, colour in (("raw", "tab:red"), ("mitigated", "tab:blue")):
        v, e = pick(kind), pick(f"{kind}_error")
        ax.plot(t, v, "o-", ms=3, color=colour, label=kind)
        ax.fill_between(t, v - e, v + e, color=colour, alpha=0.25, lw=0)
    label = "particle density ν" if name == "particle_density" else f"⟨L_{link}⟩"
    ax.set_xlabel("time t (lattice units)")
    ax.set_ylabel(label)
    ax.legend(fontsize="small")


def plot_lab_report(report: Mapping[str, Any], outdir: str | Path) -> list[Path]:
    """One PNG for ν and one per link for ⟨L_n⟩ in ``outdir`` (created); returns the paths."""
    outdir = Path(outdir)
    outdir.mkdir(parents=True, exist_ok=True)
    paths = []
    n_links = np.asarray(report["electric_field"]["exact"]).shape[1]
    for name, link in [("particle_density", None)] + [("electric_field", n) for n in range(n_links)]:
        fig = Figure(figsize=(6, 4))
        FigureCanvasAgg(fig)
        ax = fig.add_subplot()
        draw_lab_curve(ax, report, name, link)
        ax.set_title(f"{report['task']}: {report['noise']['noise_model']['name']}", fontsize="small")
        fig.tight_layout()
        path = outdir / (f"{report['task']}_{name}.png" if link is None else f"{report['task']}_{name}_{link}.png")
        fig.savefig(path, dpi=100)
        paths.append(path)
    return paths
