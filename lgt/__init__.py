"""Fluxline physics and workflows: the lattice Schwinger model on a chain of link qudits."""

__version__ = "0.1.0"
