"""Error bars from per-block partial sums (docs/design.md section 5).

Snapshots of one setting are correlated, so blocks are made of whole
settings. Every estimator is a function of additive sums; the delete-one-
block jackknife evaluates it on (total - block) for each block:

    var = (B - 1)/B sum_b (theta_(-b) - mean_b theta_(-b))^2

which serves plain means and U-statistics alike. Median-of-means (Huang,
Kueng, Preskill, Nat. Phys. 16, 1050 (2020)) and the analytic standard
error are offered for plain means.
"""

from __future__ import annotations

import warnings

import numpy as np

METHODS = ("jackknife", "median-of-means", "analytic")


def jackknife(estimator, blocks: dict) -> tuple[dict, dict]:
    """Estimates and one-sigma errors of ``estimator(sums) -> dict of arrays``.

    ``blocks`` maps names to arrays whose first axis is the block.
    """
    total = {k: v.sum(axis=0) for k, v in blocks.items()}
    full = estimator(total)
    n_blocks = next(iter(blocks.values())).shape[0]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        loo = [estimator({k: total[k] - v[b] for k, v in blocks.items()}) for b in range(n_blocks)]
        err = {}
        for name in full:
            values = np.array([x[name] for x in loo], dtype=float)
            err[name] = np.sqrt((n_blocks - 1) / n_blocks * np.sum((values - values.mean(axis=0)) ** 2, axis=0))
    return full, err


def median_of_means(block_sums: np.ndarray, block_counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Median of the block means, with error sqrt(pi/2) * std(block means) / sqrt(B).

    sqrt(pi/2) is the asymptotic efficiency loss of the median of normal
    samples (a fact of the trade).
    """
    means = block_sums / block_counts.reshape((-1,) + (1,) * (block_sums.ndim - 1))
    b = len(means)
    return np.median(means, axis=0), np.sqrt(np.pi / 2) * means.std(axis=0, ddof=1) / np.sqrt(b)


def analytic(total: np.ndarray, total_sq: np.ndarray, count: float) -> tuple[np.ndarray, np.ndarray]:
    """Mean and standard error sqrt(var / N) from the sum and the sum of squares."""
    mean = total / count
    var = np.maximum(total_sq / count - mean**2, 0.0) * count / max(count - 1, 1)
    return mean, np.sqrt(var / count)
