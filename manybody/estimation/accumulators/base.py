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

from manybody.estimation.errorbars import analytic, interval_halfwidth, jackknife_error, median_of_means, replicates
from manybody.estimation.sums import BlockSums, PerSetting


class Accumulator:
    #: dataset name -> name of its per-block sum, for quantities that are plain means
    plain_means: dict[str, str] = {}
    #: dataset name -> (sum, sum of squares per snapshot), for the analytic standard error
    analytic_means: dict[str, tuple[str, str]] = {}
    #: records per part this accumulator asks for (None: the default); slow ones ask for small parts
    part_records: int | None = None

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

    def calibration_gradients(self, full: dict, counts: dict) -> dict:
        """d estimate / d ln lambda_S (..., P) for the supports of :meth:`calibration_supports`."""
        return {}

    def calibration_supports(self) -> np.ndarray:
        """(P, n) bool: the supports whose calibrated eigenvalues the estimates divide by.

        Local ensemble: the single qubits (lambda_S is a product over S);
        circuit ensembles override this with the supports they use.
        """
        return np.eye(self.setup.n_qubits, dtype=bool)

    def add_calibration_noise(self, full: dict, err: dict, counts: dict) -> None:
        """Robust shadows: err^2 += g^T Cov(ln lambda) g (delta method), intervals widened alike.

        Cov(ln lambda) is the jackknife covariance of the calibrated eigenvalues of the supports
        (docs/design.md section 5), applied as sum_b (g . D_b)^2 (B - 1)/B with D the jackknife deviations.
        """
        if not self.setup.calibrated:
            return
        grads = self.calibration_gradients(full, counts)
        if not grads:
            return
        dev = self.setup.lam.calibrated.log_lambda_deviations(self.calibration_supports())
        scale = (len(dev) - 1) / len(dev)
        for name, grad in grads.items():
            if name not in err:
                continue
            extra = scale * np.sum(np.einsum("...p,bp->...b", np.nan_to_num(grad), dev) ** 2, axis=-1)
            with np.errstate(invalid="ignore", divide="ignore"):
                widened = np.sqrt(np.asarray(err[name]) ** 2 + np.maximum(extra, 0.0))
                if interval_key(name) in err:
                    err[interval_key(name)] = err[interval_key(name)] * np.where(err[name] > 0, widened / err[name], 1)
            err[name] = widened

    def errors(self, counts: dict, method: str) -> tuple[dict, dict]:
        """Estimates and one-sigma errors: jackknife, then other methods for the plain means."""
        blocks = {**counts, **self.sums.data}
        full, loo = replicates(self.estimates, blocks)
        err = {name: jackknife_error(values) for name, values in loo.items()}
        add_intervals(err, loo)
        self.add_calibration_noise(full, err, counts)
        for name, key in self.plain_means.items():
            if name not in full:
                continue
            if method != "jackknife":
                err.pop(interval_key(name), None)  # other methods: no Student-t interval
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
    if interval_key(name) in err:  # x_lo, x_hi: NaN wherever the estimate is NaN
        half = np.asarray(err[interval_key(name)], dtype=float)
        data[name + "_lo"] = (dims, np.asarray(value, dtype=float) - half)
        data[name + "_hi"] = (dims, np.asarray(value, dtype=float) + half)


def interval_key(name: str) -> str:
    """Where ``err`` carries the half-width of the interval of ``name`` (docs/design.md section 5)."""
    return name + ":halfwidth"


def add_intervals(err: dict, loo: dict) -> None:
    """Student-t half-widths from the jackknife replicates ``loo`` for every quantity in ``err``."""
    for name, values in loo.items():
        if name in err and ":" not in name:
            err[interval_key(name)] = interval_halfwidth(values, err[name])


def pair_count(s: dict):
    """Ordered pairs of snapshots from different settings: n^2 - sum over settings of shots^2."""
    return s["n"] ** 2 - s["n2"]
