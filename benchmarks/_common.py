"""Shared pieces of the comparison benchmarks (run as ``python benchmarks/NAME.py``)."""

from __future__ import annotations

import argparse

MODEL = {"hopping": 1.0, "mass": 0.5, "coupling": 1.0, "levels": 3}


def comparison_parser(doc: str, sizes: list[int], repeats: int) -> argparse.ArgumentParser:
    """--sizes, --repeats, --json (the options every comparison shares)."""
    ap = argparse.ArgumentParser(description=doc.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="*", default=sizes)
    ap.add_argument("--repeats", type=int, default=repeats)
    ap.add_argument("--json", action="store_true")
    return ap


def lattice_hamiltonian(N: int):
    """Physical-subspace CSR H of the benchmark model (w = 1, m = 0.5, J = 1, d = 3)."""
    from lgt.basis import PhysicalBasis
    from lgt.hamiltonian import build_hamiltonian
    from lgt.model import ModelParams

    return build_hamiltonian(PhysicalBasis(ModelParams(sites=N, **MODEL))).tocsr()
