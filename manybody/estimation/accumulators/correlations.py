"""Magnetization and two-point correlation maps (docs/design.md section 4).

Local ensemble: with one-site columns e[s, (axis, q)], every correlation is
one entry of the Gram matrix e^T e / N (one matrix product per chunk).
Circuit ensembles: the same product is exact for pairs whose light cones do
not overlap (the estimator factorizes); near pairs are propagated
explicitly. Connected correlations subtract <s_a><s_b> estimated from pairs
of snapshots of different settings, so that they are unbiased.
"""

from __future__ import annotations

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

    @classmethod
    def build(cls, setup, options):
        return cls(setup, pairs=options.get("correlations", True))

    def add(self, chunk):
        f = chunk.columns
        flat = f.reshape(len(chunk), -1)
        self.sums.add("mag", chunk.onehot, f)
        if not self.pairs:
            return
        if self.setup.multi:
            self.per_setting.add("mag", chunk.pos, flat)
        self.sums.add_gram("corr", chunk.runs, flat)
        if self.near_pairs:
            self.sums.add("near", chunk.onehot, chunk.near_values)

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

    def variables(self, full, err, data, coords):
        if not self.setup.spin_like:
            return
        put(data, "magnetization", ("axis", "site"), full["magnetization"], err)
        if "correlation" in full:
            n = self.setup.n_qubits
            coords["site_a"] = np.arange(n)
            coords["site_b"] = np.arange(n)
            dims = ("axis_a", "axis_b", "site_a", "site_b")
            put(data, "correlation", dims, full["correlation"], err)
            put(data, "connected_correlation", dims, full["connected_correlation"], err)
        if "structure_factor" in full:
            coords.update(structure_factor_coords(self.reciprocal))
            put(data, "structure_factor", ("axis", "q"), full["structure_factor"], err)

