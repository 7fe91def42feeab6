"""JSON export/import of circuits with resolved angles (schema: docs/circuits.md).

A document is ``{"format": "fluxline-qudit-circuit", "version": 1, "space": ...,
"gates": [...]}``; every gate carries its resolved angle ``t`` of ``exp(-i t G)``.
Import gives a circuit of fixed gates (no parameters) that reproduces the state.
"""
from __future__ import annotations

import json
from typing import Any, Sequence

import numpy as np
import scipy.sparse as sp

from .circuit import ParametrizedCircuit
from .gates import DiagonalGate, Gate, GeneratorGate, MSGate, TwoLevelRotation
from .register import Space
from .sparse_gates import SparseGeneratorGate

__all__ = ["FORMAT", "VERSION", "CircuitFormatError", "to_dict", "from_dict", "to_json", "from_json"]

FORMAT = "fluxline-qudit-circuit"
VERSION = 1


class CircuitFormatError(ValueError):
    """An exported circuit document is malformed."""


def _complex_matrix(mat: np.ndarray) -> dict[str, list]:
    return {"real": np.real(mat).tolist(), "imag": np.imag(mat).tolist()}


def _gate_dict(gate: Gate) -> dict[str, Any]:
    if isinstance(gate, TwoLevelRotation):
        return {"kind": "rotation", "qudits": list(gate.qudits), "levels": [gate.j, gate.k], "phase": gate.phi}
    if isinstance(gate, MSGate):
        return {"kind": "ms", "qudits": list(gate.qudits), "levels": [gate.j, gate.k], "phase": gate.phi}
    if isinstance(gate, DiagonalGate):
        return {"kind": "diagonal", "qudits": list(gate.qudits), "table": gate.h.tolist()}
    if isinstance(gate, GeneratorGate):
        return {"kind": "generator", "qudits": list(gate.qudits), "generator": _complex_matrix(gate.g)}
    if isinstance(gate, SparseGeneratorGate):
        coo = sp.coo_matrix(gate.g)
        return {
            "kind": "sparse_generator",
            "label": gate.label,
            "generator": {
                "rows": coo.row.tolist(),
                "cols": coo.col.tolist(),
                "real": coo.data.real.tolist(),
                "imag": coo.data.imag.tolist(),
            },
        }
    raise TypeError(f"cannot export gate of type {type(gate).__name__}")


def to_dict(circuit: ParametrizedCircuit, params: Sequence[float] | None = None) -> dict[str, Any]:
    """Document for ``circuit`` at ``params`` (angles resolved)."""
    space = circuit.space
    if space.register:
        sdoc: dict[str, Any] = {"mode": "register", "n_qudits": space.n_qudits, "levels": space.d}
    else:
        sdoc = {"mode": "subspace", "dim": space.dim}
    gates = []
    for op, t in zip(circuit.ops, circuit.angles(params)):
        entry = _gate_dict(op.gate)
        entry["angle"] = float(t)
        entry["layer"] = op.layer
        gates.append(entry)
    return {"format": FORMAT, "version": VERSION, "space": sdoc, "gates": gates}


def _need(doc: dict, key: str, where: str) -> Any:
    if not isinstance(doc, dict) or key not in doc:
        raise CircuitFormatError(f"{where}: missing field {key!r}")
    return doc[key]


def _matrix(doc: dict, where: str) -> np.ndarray:
    try:
        return np.asarray(_need(doc, "real", where), float) + 1j * np.asarray(_need(doc, "imag", where), float)
    except (TypeError, ValueError) as err:
        raise CircuitFormatError(f"{where}: bad matrix ({err})") from None


def _space(doc: dict) -> Space:
    sdoc = _need(doc, "space", "document")
    mode = _need(sdoc, "mode", "space")
    if mode == "register":
        return Space.qudits(int(_need(sdoc, "n_qudits", "space")), int(_need(sdoc, "levels", "space")))
    if mode == "subspace":
        return Space.subspace(int(_need(sdoc, "dim", "space")))
    raise CircuitFormatError(f"space: unknown mode {mode!r}")


def _gate(entry: dict, space: Space, where: str) -> Gate:
    kind = _need(entry, "kind", where)
    d = space.d
    if kind == "sparse_generator":
        g = _need(entry, "generator", where)
        vals = _matrix(g, where + ".generator")
        rows, cols = _need(g, "rows", where), _need(g, "cols", where)
        mat = sp.coo_matrix((vals, (rows, cols)), shape=(space.dim, space.dim))
        return SparseGeneratorGate(mat, label=str(entry.get("label", "")))
    qudits = [int(q) for q in _need(entry, "qudits", where)]
    if kind in ("rotation", "ms"):
        j, k = (int(x) for x in _need(entry, "levels", where))
        phi = float(entry.get("phase", 0.0))
        if kind == "rotation":
            if len(qudits) != 1:
                raise CircuitFormatError(f"{where}: rotation needs one qudit")
            return TwoLevelRotation(qudits[0], j, k, d, phi)
        return MSGate(qudits, j, k, d, phi)
    if kind == "diagonal":
        return DiagonalGate(qudits, np.asarray(_need(entry, "table", where), dtype=float), d)
    if kind == "generator":
        return GeneratorGate(qudits, _matrix(_need(entry, "generator", where), where + ".generator"), d)
    raise CircuitFormatError(f"{where}: unknown gate kind {kind!r}")


def from_dict(doc: dict[str, Any]) -> ParametrizedCircuit:
    """Circuit of fixed gates from a document; raises :class:`CircuitFormatError`."""
    if _need(doc, "format", "document") != FORMAT:
        raise CircuitFormatError(f"document: format is {doc['format']!r}, expected {FORMAT!r}")
    if _need(doc, "version", "document") != VERSION:
        raise CircuitFormatError(f"document: unsupported version {doc['version']!r}")
    space = _space(doc)
    circuit = ParametrizedCircuit(space)
    gates = _need(doc, "gates", "document")
    if not isinstance(gates, list):
        raise CircuitFormatError("document: 'gates' must be a list")
    for i, entry in enumerate(gates):
        where = f"gates[{i}]"
        try:
            gate = _gate(entry, space, where)
            circuit.append(gate, None, offset=float(_need(entry, "angle", where)), layer=int(entry.get("layer", -1)))
        except CircuitFormatError:
            raise
        except (ValueError, TypeError) as err:
            raise CircuitFormatError(f"{where}: {err}") from None
    return circuit


def to_json(circuit: ParametrizedCircuit, params: Sequence[float] | None = None, indent: int | None = None) -> str:
    """JSON text of :func:`to_dict`."""
    return json.dumps(to_dict(circuit, params), indent=indent)


def from_json(text: str) -> ParametrizedCircuit:
    """Inverse of :func:`to_json`; raises :class:`CircuitFormatError` on bad input."""
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as err:
        raise CircuitFormatError(f"not valid JSON: {err}") from None
    if not isinstance(doc, dict):
        raise CircuitFormatError("document must be a JSON object")
    return from_dict(doc)
