"""Magnetization and two-point correlation maps (docs/design.md section 4).

Local ensemble: with one-site columns e[s, (axis, q)], every correlation is
one entry of the Gram matrix e^T e / N (one matrix product per chunk).
Circuit ensembles: the same product is exact for pairs whose light cones do
not overlap (the estimator factorizes); near pairs are propagated
explicitly. Connected correlations subtract <s_a><s_b> estimated from pairs
of snapshots of different settings, so that they are unbiased.

An entry that no snapshot can inform (no setting measured that pair of axes
on those qubits) has no estimate: it is NaN with a NaN error and a
RuntimeWarning, never 0 +- 0. Local ensemble: the measured (axis, qubit)
pairs follow from the bases of the settings that have snapshots (a Gram
matrix over settings, in runs that stop once every entry is seen); circuit
ensembles: the snapshots whose single-snapshot value is nonzero.
"""

from __future__ import annotations

import warnings

import numpy as np

from manybody.estimation.accumulators.base import Accumulator, pair_count, put
from manybody.estimation.pair_sums import correlation_matrix
from manybody.estimation.sums import within_sums
from manybody.schema import reciprocal_points, structure_factor, structure_factor_coords


class Correlations(Accumulator):
    plain_means = {"magnetization": "mag"}

    def __init__(self, setup, pairs: bool = True):
        super().__init__(setup)
        self.pairs = pairs
        self.near_pairs = setup.near_pairs if pairs else []
        self.reciprocal = reciprocal_points(setup.model) if pairs and setup.spin_like else None
        n = setup.n_qubits
        self.seen = None if setup.local else np.zeros((3 * n, 3 * n), dtype=bool)  # circuit: from the snapshots
        self.seen_near = np.zeros((len(self.near_pairs), 3, 3), dtype=bool)

    @classmethod
    def build(cls, setup, options):
        return cls(setup, pairs=options.get("correlations", True))

    def add(self, chunk):
        f = chunk.columns
        flat = f.reshape(len(chunk), -1)
        self.sums.add("mag", chunk.onehot, f)
        if self.seen is not None and not self.seen[informative(self.setup.n_qubits)].all():
            nonzero = (flat != 0).astype(np.float32)  # counts: exact in float32 below 2^24 snapshots per chunk
            self.seen |= (nonzero.T @ nonzero) > 0
        if not self.pairs:
            return
        if self.setup.multi:
            self.per_setting.add("mag", chunk.pos, flat)
        self.sums.add_grams("corr", chunk.column_grams, flat.shape[1])
        if self.near_pairs:
            self.sums.add("near", chunk.onehot, chunk.near_values)
            self.seen_near |= np.any(chunk.near_values != 0, axis=0)

    def measured(self) -> np.ndarray:
        """(3n, 3n) bool: some snapshot informs sigma^x_a sigma^y_b (diagonal: sigma^x_a), index x n + a."""
        setup = self.setup
        if self.seen is None:
            return measured_local(setup.settings.basis, setup.setting_block >= 0, setup.n_qubits)
        seen = self.seen.copy()
        n = setup.n_qubits
        for j, (a, b) in enumerate(self.near_pairs):  # light cones overlap: the product rule does not hold
            seen[a::n, b::n][:3, :3] = self.seen_near[j]
            seen[b::n, a::n][:3, :3] = self.seen_near[j].T
        return seen

    def finish(self):
        if "mag" in self.per_setting:
            setup = self.setup
            self.sums.add_blocks("mag_within", within_sums(self.per_setting["mag"], setup.setting_block,
                                                           setup.n_blocks, outer=True))

    def estimates(self, s):
        count = s["n"]
        out = {"magnetization": s["mag"] / count}
        if self.pairs:
            n = self.setup.n_qubits
            corr = correlation_matrix(s, n, self.near_pairs) / count
            corr = corr.transpose(0, 2, 1, 3).copy()
            for q in range(n):
                corr[:, :, q, q] = np.nan
            out["correlation"] = corr
            total = s["mag"].reshape(-1)
            # one shot per setting: the within-setting sum is the diagonal sum, i.e. "corr"
            prod = (np.outer(total, total) - s.get("mag_within", s["corr"])) / pair_count(s)
            out["connected_correlation"] = corr - prod.reshape(3, n, 3, n).transpose(0, 2, 1, 3)
            if self.reciprocal is not None:
                out["structure_factor"] = structure_factor(corr, self.reciprocal[1])
        return out

    def calibration_supports(self):
        """Single qubits, then (circuit ensembles) the near pairs, whose joint eigenvalue the estimates use."""
        n = self.setup.n_qubits
        singles = np.eye(n, dtype=bool)
        if self.setup.local or not self.pairs or not self.near_pairs:
            return singles
        pairs = np.zeros((len(self.near_pairs), n), dtype=bool)
        for j, (a, b) in enumerate(self.near_pairs):
            pairs[j, [a, b]] = True
        return np.vstack([singles, pairs])

    def calibration_gradients(self, full, counts):
        """d x / d ln lambda_S: each estimate carries 1/lambda of its support.

        A one-site value and a product of two (local ensemble, or circuit pairs with separate light
        cones) carry 1/lambda_a (1/lambda_b); a near pair of a circuit ensemble carries 1/lambda_ab of
        its own support, while the product <s_a><s_b> in its connected part carries 1/(lambda_a lambda_b).
        """
        n = self.setup.n_qubits
        params = len(self.calibration_supports())
        eye = np.eye(n, params)
        out = {"magnetization": -full["magnetization"][..., None] * eye[None]}
        if "correlation" not in full:
            return out
        corr = np.nan_to_num(full["correlation"])
        product = corr - np.nan_to_num(full["connected_correlation"])  # <s_a><s_b>, from pairs of settings
        singles = eye[:, None, :] + eye[None, :, :]  # (a, b, param)
        own = singles.copy()
        for j, (a, b) in enumerate(self.near_pairs if params > n else []):
            own[a, b], own[b, a] = 0.0, 0.0
            own[a, b, n + j] = own[b, a, n + j] = 1.0
        out["correlation"] = -corr[..., None] * own
        out["connected_correlation"] = -corr[..., None] * own + product[..., None] * singles
        if "structure_factor" in full:
            same = np.stack([out["correlation"][x, x] for x in range(3)])  # (axis, a, b, param)
            phase = self.reciprocal[1]
            out["structure_factor"] = np.real(np.einsum("qa,xabp,qb->xqp", phase, same, phase.conj())) / n
        return out

    def variables(self, full, err, data, coords):
        if not self.setup.spin_like:
            return
        n = self.setup.n_qubits
        seen = self.measured()
        mag_seen = np.diagonal(seen).reshape(3, n)
        missing = {"magnetization": ~mag_seen}
        if "correlation" in full:
            pair_seen = seen.reshape(3, n, 3, n).transpose(0, 2, 1, 3)
            missing["correlation"] = missing["connected_correlation"] = ~pair_seen & ~np.eye(n, dtype=bool)
            if "structure_factor" in full:  # S(q) sums every same-axis pair
                missing["structure_factor"] = np.repeat(
                    np.any(missing["correlation"][[0, 1, 2], [0, 1, 2]], axis=(1, 2))[:, None],
                    full["structure_factor"].shape[1], axis=1)
        full, err = dict(full), dict(err)
        counts = {}
        for name, mask in missing.items():
            counts[name] = int(mask.sum())
            if counts[name]:
                full[name] = np.where(mask, np.nan, full[name])
                err[name] = np.where(mask, np.nan, err[name])
        unmeasured = counts["magnetization"] + counts.get("correlation", 0)
        if unmeasured:
            warnings.warn(f"{unmeasured} magnetization or correlation entries were measured by no setting: "
                          "they are NaN (estimate and error)", RuntimeWarning, stacklevel=4)
        _put(data, "magnetization", ("axis", "site"), full, err, counts)
        if "correlation" in full:
            coords["site_a"] = np.arange(n)
            coords["site_b"] = np.arange(n)
            dims = ("axis_a", "axis_b", "site_a", "site_b")
            _put(data, "correlation", dims, full, err, counts)
            _put(data, "connected_correlation", dims, full, err, counts)
        if "structure_factor" in full:
            coords.update(structure_factor_coords(self.reciprocal))
            _put(data, "structure_factor", ("axis", "q"), full, err, counts)


def _put(data, name, dims, full, err, counts):
    """put(), with the number of unmeasured (NaN) entries as the variable's ``unmeasured_entries``."""
    put(data, name, dims, full[name], err)
    data[name] = data[name] + ({"unmeasured_entries": counts.get(name, 0)},)


def measured_local(basis, active, n, run: int = 4096) -> np.ndarray:
    """(3n, 3n) bool: some active setting measures axis x on qubit a and axis y on b (local ensemble).

    The Gram matrix of the settings' one-hot bases, in runs of settings that
    stop as soon as every entry has been seen (usually after the first run).
    """
    basis = basis[np.flatnonzero(active)]
    seen = np.zeros((3 * n, 3 * n), dtype=bool)
    needed = informative(n)
    for start in range(0, len(basis), run):
        part = basis[start:start + run].astype(np.intp)
        onehot = np.zeros((len(part), 3 * n), dtype=np.float32)  # exact counts below 2^24
        onehot[np.arange(len(part))[:, None], part * n + np.arange(n)] = 1.0
        seen |= (onehot.T @ onehot) > 0
        if seen[needed].all():
            break
    return seen


def informative(n: int) -> np.ndarray:
    """(3n, 3n) bool: the entries a snapshot can inform (not two different axes on one qubit)."""
    same_qubit = np.tile(np.eye(n, dtype=bool), (3, 3))
    same_axis = np.kron(np.eye(3, dtype=bool), np.ones((n, n), dtype=bool))
    return ~same_qubit | same_axis

