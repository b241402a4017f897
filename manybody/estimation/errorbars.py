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
#: two-sided level of the intervals x_lo, x_hi: that of +-2 sigma for a normal estimate
INTERVAL_LEVEL = 0.9545


def jackknife(estimator, blocks: dict) -> tuple[dict, dict]:
    """Estimates and one-sigma errors of ``estimator(sums) -> dict of arrays``.

    ``blocks`` maps names to arrays whose first axis is the block.
    """
    full, loo = replicates(estimator, blocks)
    return full, {name: jackknife_error(values) for name, values in loo.items()}


def replicates(estimator, blocks: dict) -> tuple[dict, dict]:
    """The estimates on the totals and their delete-one-block replicates theta_(-b), stacked (B, ...)."""
    total = {k: v.sum(axis=0) for k, v in blocks.items()}
    with np.errstate(invalid="ignore", divide="ignore"):
        full = estimator(total)
    n_blocks = next(iter(blocks.values())).shape[0]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        loo = [estimator({k: total[k] - v[b] for k, v in blocks.items()}) for b in range(n_blocks)]
    return full, {name: np.array([x[name] for x in loo], dtype=float) for name in full}


def jackknife_error(loo: np.ndarray) -> np.ndarray:
    """sqrt((B - 1)/B sum_b (theta_(-b) - mean theta_(-b))^2) over the first axis."""
    b = len(loo)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return np.sqrt((b - 1) / b * np.sum((loo - loo.mean(axis=0)) ** 2, axis=0))


def bias_corrected(full: np.ndarray, loo: np.ndarray) -> np.ndarray:
    """Jackknife bias correction B theta - (B - 1) mean_b theta_(-b) (Quenouille, Biometrika 43, 353 (1956)).

    It removes the 1/N term of the bias of smooth nonlinear functions of means
    such as S2 = -ln P and I2; the jackknife error stays that of theta.
    """
    b = len(loo)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return b * np.asarray(full, float) - (b - 1) * loo.mean(axis=0)


def combination_weight(loo_a: np.ndarray, loo_b: np.ndarray) -> np.ndarray:
    """Weight w of a in w a + (1 - w) b minimising the variance of two unbiased estimators of one quantity.

    w = (V_b - C) / (V_a + V_b - 2C) from the jackknife (co)variances of the
    replicates (common practice, no source: the two-estimator case of
    inverse-covariance weighting), clipped to [0, 1]; 1 where b has no
    finite replicates.
    """
    da = loo_a - loo_a.mean(axis=0)
    db = loo_b - loo_b.mean(axis=0)
    va, vb, c = (np.sum(x * y, axis=0) for x, y in ((da, da), (db, db), (da, db)))
    with np.errstate(invalid="ignore", divide="ignore"):
        w = (vb - c) / (va + vb - 2 * c)
    w = np.clip(np.where(np.isfinite(w), w, 0.5), 0.0, 1.0)
    return np.where(np.all(np.isfinite(loo_b), axis=0), w, 1.0)


def effective_dof(loo: np.ndarray) -> np.ndarray:
    """Degrees of freedom of the jackknife variance: nu = 3 (sum_b d_b^2)^2 / sum_b d_b^4, in [1, B - 1].

    d_b = theta_(-b) - mean. Satterthwaite's nu = 2 E[s^2]^2 / Var(s^2)
    (Biometrics Bull. 2, 110 (1946)) with Var(d_b^2) = (2/3) d_b^4 as for
    normal d_b: about B - 1 when all blocks contribute alike, about the
    number of informative blocks when a few dominate (an entry measured by
    few settings, a skewed purity).
    """
    d2 = loo - loo.mean(axis=0)
    d2 *= d2
    with np.errstate(invalid="ignore", divide="ignore"):
        nu = 3 * np.sum(d2, axis=0) ** 2 / np.sum(d2 * d2, axis=0)
    return np.clip(np.where(np.isfinite(nu), nu, 1.0), 1.0, len(loo) - 1)


def interval_halfwidth(loo: np.ndarray, err: np.ndarray, level: float = INTERVAL_LEVEL) -> np.ndarray:
    """t_nu((1 + level)/2) err: the Student-t half-width of the interval with the effective degrees of freedom."""
    from scipy import stats

    nu = np.round(effective_dof(loo), 2)  # t quantiles on the distinct nu only (large maps share few)
    values, where = np.unique(nu, return_inverse=True)
    return stats.t.ppf((1 + level) / 2, values)[where.reshape(nu.shape)] * np.asarray(err, float)


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
