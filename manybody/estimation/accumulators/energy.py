"""Energy, energy density and energy variance of the model's Hamiltonian (docs/design.md section 4).

Per snapshot the energy estimate is sum_P c_P o_P (one number, so its error
bar includes the covariances between terms); the density splits each term
equally among the sites it acts on. The variance <H^2> - <H>^2 estimates
<H^2> snapshot by snapshot from the terms of H and the products of near
terms (:mod:`manybody.estimation.energy_variance`), and <H>^2 from pairs of
snapshots of different settings (unbiased).
"""

from __future__ import annotations

import numpy as np

from manybody.estimation.accumulators.base import Accumulator, pair_count, put
from manybody.estimation.energy_variance import square_terms, square_values
from manybody.estimation.kernels import local_products
from manybody.estimation.sums import within_sums
from manybody.measure.paulis import AXIS_OF_CODE
from manybody.schema import term_table

#: the energy variance is estimated while the products of near terms have at most this many distinct
#: strings (a tenth for circuit ensembles)
MAX_SQUARED_TERMS = 20000


def term_values(codes, lam_terms, chunk) -> np.ndarray:
    """Single-snapshot estimates of every Pauli string of a term table: (N, T).

    Local ensemble: products of one-site columns (exact, since the estimator
    factorizes over sites), one weight at a time. Circuit ensembles: one
    propagation per string.
    """
    out = np.empty((len(chunk), len(codes)))
    weight = np.count_nonzero(codes, axis=1)
    if chunk.setup.local:
        f = chunk.columns
        for w in np.unique(weight):
            sel = np.flatnonzero(weight == w)
            if w == 0:
                out[:, sel] = 1.0
                continue
            sup = np.array([np.flatnonzero(codes[t]) for t in sel])
            axes = AXIS_OF_CODE[np.take_along_axis(codes[sel], sup, axis=1)]
            out[:, sel] = local_products(f, sup, axes)
        return out
    out[:, weight == 0] = 1.0
    some = weight > 0
    if some.any():
        out[:, some] = chunk.values_many(codes[some], np.asarray(lam_terms)[some])
    return out


class Energy(Accumulator):
    plain_means = {"energy": "energy", "energy_density": "density"}
    analytic_means = {"energy": ("energy", "energy_sq_snap")}

    def __init__(self, setup):
        super().__init__(setup)
        ham = setup.model.hamiltonian
        lam = setup.lam
        self.codes, self.coeffs, self.density = term_table(ham, setup.qubit_site, setup.n_sites)
        self.lam_terms = np.array([lam.of(c) for c in self.codes])
        self.squared = square_terms(self.codes, self.coeffs, setup.ensemble, lam.of)
        if len(self.squared.codes) > (MAX_SQUARED_TERMS if setup.local else MAX_SQUARED_TERMS // 10):
            self.squared = None  # too many products of near terms: no energy variance

    @classmethod
    def build(cls, setup, options):
        return cls(setup) if setup.model is not None else None

    def add(self, chunk):
        values = term_values(self.codes, self.lam_terms, chunk)
        energy = values @ self.coeffs
        self.sums.add("energy", chunk.onehot, energy)
        self.sums.add("density", chunk.onehot, values @ self.density)
        if self.setup.multi:
            self.per_setting.add("energy", chunk.pos, energy[:, None])
        else:
            self.sums.add("energy_within", chunk.onehot, energy**2)
        self.sums.add("energy_sq_snap", chunk.onehot, energy**2)
        if self.setup.calibrated:  # per-term means for the calibration's error
            self.sums.add("terms", chunk.onehot, values)
        if self.squared is not None:
            h2 = square_values(values, energy, self.squared, lambda codes, lam: term_values(codes, lam, chunk))
            self.sums.add("h2", chunk.onehot, h2)

    def finish(self):
        if "energy" in self.per_setting:
            setup = self.setup
            within = within_sums(self.per_setting["energy"], setup.setting_block, setup.n_blocks)
            self.sums.add_blocks("energy_within", within[:, 0])

    def estimates(self, s):
        count = s["n"]
        out = {"energy": s["energy"] / count, "energy_density": s["density"] / count}
        if "h2" in s:
            mean_sq = (s["energy"] ** 2 - s["energy_within"]) / pair_count(s)
            out["energy_variance"] = s["h2"] / count - mean_sq
        return out

    def _term_supports(self):
        """The distinct supports of the terms (P, n) and the row of each term (T,)."""
        supports, which = np.unique(self.codes != 0, axis=0, return_inverse=True)
        return supports, np.asarray(which).ravel()

    def calibration_supports(self):
        """Local ensemble: the qubits; circuit ensembles: the distinct supports of the terms."""
        if self.setup.local:
            return super().calibration_supports()
        return self._term_supports()[0]

    def calibration_gradients(self, full, counts):
        """d/d ln lambda_S of sum_P c_P <P>: -c_P <P> summed over the terms P that divide by lambda_S.

        Local ensemble: S runs over single qubits (every term acting on q); circuits: over term supports.
        The energy variance's calibration noise is not propagated (docs/design.md section 5).
        """
        if "terms" not in self.sums:
            return {}
        mean = self.sums.data["terms"].sum(axis=0) / counts["n"].sum()  # (T,)
        if self.setup.local:
            support = (self.codes != 0).astype(float)  # (T, n)
        else:  # term t divides by lambda of its own support, the row ``which[t]`` of calibration_supports()
            supports, which = self._term_supports()
            support = np.eye(len(supports))[which]  # (T, P)
        return {"energy": -(self.coeffs * mean) @ support,
                "energy_density": -(self.density * mean[:, None]).T @ support}

    def variables(self, full, err, data, coords):
        put(data, "energy", (), full["energy"], err)
        put(data, "energy_density", ("site",), full["energy_density"], err)
        if "energy_variance" in full:
            put(data, "energy_variance", (), full["energy_variance"], err)
