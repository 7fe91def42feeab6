"""JSON export/import of circuits with resolved angles (schema: docs/circuits.md).

A document is ``{"format": "fluxline-qudit-circuit", "version": 2, "space": ...,
"gates": [...]}``; every gate carries its resolved angle ``t`` of ``exp(-i t G)`` (radians)
and its JSON entry from :meth:`circuits.gates.Gate.export` (one taxonomy, in the gate classes).
Import gives a circuit of fixed gates (no parameters) that reproduces the state.
"""
from __future__ import annotations

import json
from typing import Any, Callable, Sequence

import numpy as np
import scipy.sparse as sp

from .circuit import ParametrizedCircuit
from .gates import Gate, gate_from_export
from .register import Space
from .sparse_gates import SparseGeneratorGate

__all__ = ["FORMAT", "VERSION", "CircuitFormatError", "to_dict", "from_dict", "to_json", "from_json"]

FORMAT = "fluxline-qudit-circuit"
VERSION = 2
#: versions :func:`from_dict` reads (version 1 named gates ``rotation``/``ms``/``diagonal``)
READABLE_VERSIONS = (1, 2)


class CircuitFormatError(ValueError):
    """An exported circuit document is malformed."""


def to_dict(circuit: ParametrizedCircuit, params: Sequence[float] | None = None,
            duration: Callable[[Gate], float] | None = None) -> dict[str, Any]:
    """Document for ``circuit`` at ``params`` (angles resolved, radians); ``duration(gate)``
    (microseconds) adds a ``duration_us`` field to every gate."""
    space = circuit.space
    if space.register:
        sdoc: dict[str, Any] = {"mode": "register", "n_qudits": space.n_qudits, "levels": space.d}
    else:
        sdoc = {"mode": "subspace", "dim": space.dim}
    gates = []
    for op, t in zip(circuit.ops, circuit.angles(params)):
        entry = op.gate.export()
        entry["angle"] = float(t)
        entry["layer"] = op.layer
        if duration is not None:
            entry["duration_us"] = float(duration(op.gate))
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
    if kind == "sparse_generator":
        g = _need(entry, "generator", where)
        vals = _matrix(g, where + ".generator")
        rows, cols = _need(g, "rows", where), _need(g, "cols", where)
        mat = sp.coo_matrix((vals, (rows, cols)), shape=(space.dim, space.dim))
        return SparseGeneratorGate(mat, label=str(entry.get("label", "")))
    for key in ("qudits",) + {"generator": ("generator",), "diagonal": ("table",),
                              "virtual_phase": ("table",)}.get(kind, ("levels",)):
        _need(entry, key, where)
    if kind == "generator":
        _matrix(entry["generator"], where + ".generator")
    try:
        return gate_from_export(entry, space.d)
    except KeyError as err:
        raise CircuitFormatError(f"{where}: missing field {err}") from None
    except ValueError as err:
        raise CircuitFormatError(f"{where}: {err}") from None


def from_dict(doc: dict[str, Any]) -> ParametrizedCircuit:
    """Circuit of fixed gates from a document; raises :class:`CircuitFormatError`."""
    if _need(doc, "format", "document") != FORMAT:
        raise CircuitFormatError(f"document: format is {doc['format']!r}, expected {FORMAT!r}")
    if _need(doc, "version", "document") not in READABLE_VERSIONS:
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
