"""Total magnetization per axis, M_a = sum_q <sigma^a_q>: the smallest complete accumulator.

It is the worked example of docs/python-api.md ("A new quantity"): the
one-site estimator columns of a chunk (shared with the other accumulators)
summed over sites give one number per snapshot and axis; the mean over
snapshots is the estimate, the jackknife over blocks of settings its error.
"""

from __future__ import annotations

from manybody.estimation.accumulators.base import Accumulator, put


class TotalMagnetization(Accumulator):
    plain_means = {"total_magnetization": "total"}

    @classmethod
    def build(cls, setup, options):
        return cls(setup)

    def add(self, chunk):
        self.sums.add("total", chunk.onehot, chunk.columns.sum(axis=2))  # (N, 3): one value per axis

    def estimates(self, s):
        return {"total_magnetization": s["total"] / s["n"]}

    def variables(self, full, err, data, coords):
        put(data, "total_magnetization", ("axis",), full["total_magnetization"], err)
