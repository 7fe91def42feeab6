"""Variational time evolution of the model with qudit circuits (docs/conventions.md §4).

Modules: ``settings`` ([variational] section), ``ansatz`` (symmetric and hardware layer
families for the model), ``stepper`` (step-by-step fits), ``comparison`` (against the exact
reference), ``trotter_baseline``, ``budget`` (gate-error budget), ``sizing`` (least depth),
``workflow`` (config → run results).
"""
