"""The accumulator: one family of quantities, from chunks of snapshots to dataset variables.

An accumulator owns four steps (docs/design.md section 9):

- ``add(chunk)``: what it needs from a chunk of snapshots, added to its own
  per-block sums (``self.sums``) and, when settings carry several shots, to
  its per-setting sums (``self.per_setting``);
- ``finish()``: after the last chunk, turn per-setting sums into per-block
  within-setting sums;
- ``estimates(s)``: the estimates as functions of summed sums ``s`` (its own
  names plus ``n``, the number of snapshots, and ``n2``, the sum over
  settings of the squared shots per setting); the driver calls it on the
  totals and on every delete-one-block total;
- ``variables(full, err, data, coords)``: the dataset variables it writes.

The default :meth:`errors` runs the delete-one-block jackknife; plain means
can declare themselves in ``plain_means`` to get median-of-means or
analytic error bars on request.
"""

from __future__ import annotations

import numpy as np

from manybody.estimation.errorbars import analytic, jackknife, median_of_means
from manybody.estimation.sums import BlockSums, PerSetting


class Accumulator:
    #: dataset name -> name of its per-block sum, for quantities that are plain means
    plain_means: dict[str, str] = {}
    #: dataset name -> (sum, sum of squares per snapshot), for the analytic standard error
    analytic_means: dict[str, tuple[str, str]] = {}

    def __init__(self, setup):
        self.setup = setup
        self.sums = BlockSums(setup.n_blocks)
        self.per_setting = PerSetting(setup.n_settings)

    def add(self, chunk) -> None:
        raise NotImplementedError

    def finish(self) -> None:
        """Within-setting corrections once every setting is complete (nothing by default)."""

    def estimates(self, s: dict) -> dict:
        raise NotImplementedError

    def variables(self, full: dict, err: dict, data: dict, coords: dict) -> None:
        raise NotImplementedError

    def errors(self, counts: dict, method: str) -> tuple[dict, dict]:
        """Estimates and one-sigma errors: jackknife, then other methods for the plain means."""
        blocks = {**counts, **self.sums.data}
        full, err = jackknife(self.estimates, blocks)
        for name, key in self.plain_means.items():
            if name not in full:
                continue
            if method == "median-of-means":
                full[name], err[name] = median_of_means(blocks[key], counts["n"])
            elif method == "analytic" and name in self.analytic_means:
                total, squares = self.analytic_means[name]
                full[name], err[name] = analytic(blocks[total].sum(0), blocks[squares].sum(0), counts["n"].sum())
        return full, err


def put(data: dict, name: str, dims, value, err: dict) -> None:
    """Variable ``name`` and its one-sigma error ``name_err`` (NaN where no error is known)."""
    data[name] = (dims, np.asarray(value, dtype=float))
    data[name + "_err"] = (dims, np.asarray(err.get(name, np.full(np.shape(value), np.nan)), dtype=float))


def pair_count(s: dict):
    """Ordered pairs of snapshots from different settings: n^2 - sum over settings of shots^2."""
    return s["n"] ** 2 - s["n2"]
