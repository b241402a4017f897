"""Exact references in the results schema: one entry point for the command line and the Python API.

``reference(model, state, times=...)`` picks the method: dense state vectors
(exact diagonalization, ``expm_multiply``) up to ``MAX_EXACT_QUBITS`` qubits,
matrix product states (DMRG, TEBD) beyond, for chains and ladders (and
other lattices whose couplings stay short-ranged in the qubit order).
"""

from __future__ import annotations

import math

import numpy as np

from manybody.errors import InputError

METHODS = ("auto", "dense", "mps")


def parse_time_grid(text: str) -> list[float]:
    """Times from "0,0.5,1" or "start:stop:count" (both ends included, count >= 2); finite, >= 0, increasing."""
    text = str(text).strip()
    try:
        if ":" in text:
            parts = text.split(":")
            if len(parts) != 3:
                raise ValueError
            start, stop, count = float(parts[0]), float(parts[1]), int(parts[2])
            if count < 2:
                raise InputError(f"--times {text!r}: a grid start:stop:count needs a count of at least 2")
            times = np.linspace(start, stop, count).tolist()
        else:
            times = [float(t) for t in text.split(",") if t.strip()]
    except ValueError:
        raise InputError(f"--times {text!r}: expected numbers separated by commas (0,0.5,1) or a grid "
                         "start:stop:count (0:3:121)") from None
    if not times or not all(math.isfinite(t) for t in times):
        raise InputError(f"--times {text!r}: expected finite numbers")
    if any(t < 0 for t in times) or any(b <= a for a, b in zip(times, times[1:])):
        raise InputError(f"--times {text!r}: expected non-negative times in increasing order")
    return times


def choose_method(model, method: str = "auto") -> str:
    """"dense" or "mps" for this model; InputError when neither fits."""
    from manybody.references.exact import MAX_EXACT_QUBITS

    if method not in METHODS:
        raise InputError(f"method {method!r}: allowed: {', '.join(METHODS)}")
    n = model.n_qubits
    if method == "dense" and n > MAX_EXACT_QUBITS + 4:
        raise InputError(f"{n} qubits are too many for a dense reference (at most {MAX_EXACT_QUBITS + 4})")
    if method == "auto":
        if n <= MAX_EXACT_QUBITS:
            return "dense"
        if not model.lattice.is_one_dimensional:
            raise InputError(f"{n} qubits are beyond the dense reference (at most {MAX_EXACT_QUBITS}) and a "
                             f"{model.lattice.kind} lattice is not a chain or ladder for a matrix-product one "
                             "(method 'mps' forces it, e.g. for a narrow strip in snake order)")
        return "mps"
    return method


def reference(model, state, times=None, subsystems=(), method: str = "auto", bond_dim: int = 128,
              cutoff: float = 1e-10, progress=None, *, time_step: float = 0.05):
    """Exact values of a state of ``model`` in the results schema (an xarray Dataset).

    ``state``: "ground", a product-state word or name (see
    ``manybody.simulation.experiment.product_letters``), a numpy vector or a
    quimb MPS. ``times``: quench times (evolution under the model's
    Hamiltonian); several give a ``time`` dimension. ``subsystems``: objects
    with ``.label`` and ``.sites``. ``method``: "auto" (dense up to 20 qubits,
    matrix product states beyond, for chains and ladders), "dense" or "mps".
    ``bond_dim`` and ``cutoff`` bound the MPS (quimb's truncation of singular
    values); ``time_step`` is the TEBD step (fourth order, error ~ t dt^4);
    ``progress`` wraps an iterable (e.g. tqdm) over the time points.
    """
    from manybody import __version__
    from manybody.io.results import combine_series
    from manybody.references.prepare import prepare

    kind = choose_method(model, method)
    if times is not None:
        times = [float(t) for t in times]
        if not times or any(not math.isfinite(t) or t < 0 for t in times) or sorted(set(times)) != times:
            raise InputError(f"times {times}: expected finite, non-negative times in increasing order")
    if not (int(bond_dim) >= 1 and cutoff >= 0 and time_step > 0):
        raise InputError(f"bond_dim {bond_dim}, cutoff {cutoff}, time_step {time_step}: expected a bond dimension "
                         ">= 1, a cutoff >= 0 and a positive time step")
    states, info = prepare(model, state, times, kind, int(bond_dim), float(cutoff), float(time_step))
    labels = [{} if t is None else {"time": t} for t, _ in states]
    base = {"kind": "exact reference", "tool_version": __version__, "model_spec": model.spec.text}
    datasets = []
    for (t, psi), label in zip(progress(states) if progress else states, labels):
        datasets.append(_one_dataset(model, psi, subsystems, {**base, "label": str(label)}, kind))
    out = combine_series(datasets, labels)
    out.attrs.update(info)
    if kind == "mps":
        weights = [max(0.0, 1.0 - abs(psi.norm()) ** 2) for _, psi in states]
        out.attrs["max_bond_dimension"] = int(max(psi.max_bond() for _, psi in states))
        if info["method"] == "TEBD":
            out.attrs["discarded_weight"] = float(max(weights))
    return out


def _one_dataset(model, psi, subsystems, attrs, kind):
    if kind == "dense":
        from manybody.references.dataset import reference_dataset

        ds = reference_dataset(model, psi, subsystems)
    else:
        from manybody.references.mps import mps_dataset

        ds = mps_dataset(model, psi, subsystems)
    ds.attrs = attrs
    return ds
