"""TOML text of the smallest evolve sweep the sweep and file tests share: a meson quench on
N = 4 sites, d = 3 (6 physical states), with the time grid, observables and axes each test needs."""

from __future__ import annotations


def meson_evolve_sweep(t_final: float, dt: float, observables: list[str], axes: str,
                       table: str = "grid") -> str:
    """``[sweep] task = "evolve"`` over ``axes`` (TOML lines of ``[sweep.<table>]``)."""
    names = ", ".join(f'"{name}"' for name in observables)
    return f'''
[model]
sites = 4
levels = 3
[initial]
kind = "meson"
sites = [1, 2]
[evolution]
t_final = {t_final}
dt = {dt}
observables = [{names}]
[sweep]
task = "evolve"
[sweep.{table}]
{axes.strip()}
'''


def spectrum_sweep(sites: int, count: int, axes: str, zip_axes: str = "") -> str:
    """``[sweep] task = "spectrum"`` on a d = 3 chain of ``sites`` sites over the ``[sweep.grid]``
    lines ``axes`` (and ``[sweep.zip]`` lines ``zip_axes``, if any)."""
    text = f'''
[model]
sites = {sites}
levels = 3
[spectrum]
count = {count}
[sweep]
task = "spectrum"
[sweep.grid]
{axes.strip()}
'''
    return text + (f"[sweep.zip]\n{zip_axes.strip()}\n" if zip_axes else "")
