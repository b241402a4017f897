"""User-defined observables: named Pauli strings and real Pauli sums (docs/formats.md, "Observables").

For O = sum_P c_P P every snapshot gives one number sum_P c_P o_P with
o_P = <b|U P U^dag|b> / lambda_P (Huang, Kueng, Preskill, Nat. Phys. 16, 1050
(2020); docs/design.md sections 3 and 4.1); the estimate is the mean, its
error bar the jackknife over blocks of settings, so covariances between the
terms of a sum are included. The distinct strings of all observables are
evaluated once per chunk by :func:`manybody.estimation.accumulators.energy.term_values`
(local ensemble: products of one-site columns; circuit ensembles: one
propagation per string) and mapped to the observables by one matrix product.

lambda_P is the exact eigenvalue of each string's support (``setup.lam.of``):
3^-|P| locally, the support Markov chain for shallow circuits. The
per-snapshot variance of a string is 1/lambda_P - <P>^2 exactly, so for long
strings shallow circuits beat the local ensemble (docs/design.md section 3.3).

An observable containing a string that no snapshot made visible has no
estimate: NaN with a NaN error and a RuntimeWarning, never 0 +- 0.
"""

from __future__ import annotations

import warnings

import numpy as np

from manybody.estimation.accumulators.base import Accumulator, put
from manybody.estimation.accumulators.energy import term_values
from manybody.measure.observables import observables_from
from manybody.measure.paulis import pauli_string_codes


class Observables(Accumulator):
    plain_means = {"observable": "obs"}
    analytic_means = {"observable": ("obs", "obs_sq")}

    def __init__(self, setup, items):
        super().__init__(setup)
        parsed = observables_from(items, setup.n_qubits)
        self.names = [name for name, _, _ in parsed]
        self.expressions = [text for _, _, text in parsed]
        self.codes, self.matrix = string_table([op for _, op, _ in parsed])
        self.lam_terms = np.array([setup.lam.of(c) for c in self.codes])
        self.seen = np.zeros(len(self.codes), dtype=np.int64)

    @classmethod
    def build(cls, setup, options):
        items = options.get("observables")
        if items is None or (not isinstance(items, str) and len(items) == 0):
            return None
        return cls(setup, items)

    def merge_state(self, other):
        """dask parts: how often each string was visible."""
        self.seen += other.seen

    def add(self, chunk):
        values = term_values(self.codes, self.lam_terms, chunk)  # (N, T)
        self.seen += np.count_nonzero(values, axis=0)
        per_snapshot = values @ self.matrix  # (N, M)
        self.sums.add("obs", chunk.onehot, per_snapshot)
        self.sums.add("obs_sq", chunk.onehot, per_snapshot**2)

    def estimates(self, s):
        return {"observable": s["obs"] / s["n"]}

    def variables(self, full, err, data, coords):
        value = np.array(full["observable"], dtype=float)
        error = np.array(err.get("observable", np.full(value.shape, np.nan)), dtype=float)
        unseen = (self.matrix != 0).T @ (self.seen == 0) > 0  # an observable with a string never visible
        if unseen.any():
            warnings.warn(f"{int(unseen.sum())} observable(s) contain a Pauli string that no snapshot measured "
                          f"({', '.join(np.asarray(self.names)[unseen][:3])}): their estimates are NaN",
                          RuntimeWarning, stacklevel=3)
            value[unseen] = error[unseen] = np.nan
        coords["observable_name"] = list(self.names)  # a dimension cannot share the variable's name in xarray
        coords["observable_expression"] = ("observable_name", list(self.expressions))
        put(data, "observable", ("observable_name",), value, {**err, "observable": error})


def string_table(expansions):
    """Distinct Pauli strings of several real Pauli sums and the coefficient matrix C (T, M).

    Observable m is sum_t C[t, m] P_t; strings are rows of one-qubit codes
    (I 0, X 1, Z 2, Y 3). The identity, if present, is a string of weight 0.
    """
    rows, cols, coeffs = [], [], []
    for m, op in enumerate(expansions):
        op = op.combined()
        rows.append(pauli_string_codes(op.x_bits, op.z_bits))
        cols.append(np.full(len(op), m))
        coeffs.append(op.coeffs.real)
    codes, index = np.unique(np.concatenate(rows), axis=0, return_inverse=True)
    matrix = np.zeros((len(codes), len(expansions)))
    np.add.at(matrix, (index.ravel(), np.concatenate(cols)), np.concatenate(coeffs))
    return codes, matrix
