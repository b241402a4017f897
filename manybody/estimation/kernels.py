"""Estimator kernels: arrays in, arrays out, snapshots first (docs/design.md section 4).

Single-snapshot Pauli estimates are o_P = <b|U P U^dagger|b> / lambda_P
(Huang, Kueng, Preskill, Nat. Phys. 16, 1050 (2020)). Every kernel here
returns per-snapshot values or partial sums over a chunk of snapshots, so
that estimators are "sum over chunks, then combine" (error bars come from
per-block sums).
"""

from __future__ import annotations

import numpy as np


def local_columns(basis: np.ndarray, bits: np.ndarray, inv_lambda, dtype=np.float64) -> np.ndarray:
    """e[s, a, q] = [basis_q(s) = a] (-1)^(b_q(s)) / lambda_q for the local ensemble: (N, 3, n).

    With lambda_q = 1/3 these are the one-site estimators 3 [basis = a] (-1)^b;
    calibrated (robust) shadows pass one noisy lambda per qubit. With
    dtype float32 the values +-3 and their products are exact.
    """
    count, n = bits.shape
    inv = np.broadcast_to(np.asarray(inv_lambda, dtype=dtype), (n,))
    out = np.zeros((count, 3 * n), dtype=dtype)
    # one scatter: entry (s, basis * n + q) = (-1)^b / lambda_q, all others zero
    index = basis.astype(np.intp) * n + np.arange(n, dtype=np.intp)
    index += (3 * n) * np.arange(count, dtype=np.intp)[:, None]
    out.ravel()[index] = (1 - 2 * bits.astype(dtype)) * inv
    return out.reshape(count, 3, n)


def local_products(columns: np.ndarray, supports: np.ndarray, axes: np.ndarray) -> np.ndarray:
    """Products of one-site columns: for term t, prod_k e[:, axes[t, k], supports[t, k]]: (N, T).

    Terms of one weight at a time: ``supports`` and ``axes`` are (T, w).
    On disjoint sites the local estimator factorizes exactly (lambda_P is a
    product over sites and so is the snapshot value). The gathers run on the
    transposed columns (whole rows copied) and the result is their transpose
    (a Fortran-ordered view), since gathering columns of a C-ordered array is
    several times slower.
    """
    n = columns.shape[2]
    rows = np.ascontiguousarray(columns.reshape(len(columns), -1).T)  # (3n, N)
    idx = axes * n + supports
    out = rows[idx[:, 0]]
    for k in range(1, idx.shape[1]):
        out *= rows[idx[:, k]]
    return out.T


# --------------------------------------------------------------- purity
def site_factor_matrix(inv_lambda: float = 3.0) -> np.ndarray:
    """6 x 6 factor tr(rho_i rho_j) of one site between (basis, outcome) words w = 2 basis + bit.

    Per site, tr(rho_i rho_j) = (1/2) sum_P v_i(P) v_j(P) with v(I) = 1 and
    v(P) = [basis = P] (-1)^b / lambda: (1 + 1/lambda^2)/2 for the same basis
    and outcome, (1 - 1/lambda^2)/2 for the same basis and opposite outcomes,
    1/2 for different bases. With lambda = 1/3: 5, -4, 1/2 (Elben et al.,
    PRL 120, 050406 (2018); Huang, Kueng, Preskill 2020).
    """
    s = inv_lambda**2
    f = np.full((6, 6), 0.5)
    for b in range(3):
        f[2 * b, 2 * b] = f[2 * b + 1, 2 * b + 1] = (1 + s) / 2
        f[2 * b, 2 * b + 1] = f[2 * b + 1, 2 * b] = (1 - s) / 2
    return f


def words(basis: np.ndarray, bits: np.ndarray) -> np.ndarray:
    """(basis, outcome) word 2 basis + bit per snapshot and qubit."""
    return 2 * basis.astype(np.int64) + bits


def histogram_index(word_rows: np.ndarray) -> np.ndarray:
    """Base-6 index of the words on A for every snapshot (first qubit most significant)."""
    k = word_rows.shape[1]
    return word_rows @ (6 ** np.arange(k - 1, -1, -1, dtype=np.int64))


def histogram_pair_sum(hist: np.ndarray, factors) -> float:
    """sum_{i,j} prod_q F_q(w_iq, w_jq) from the histogram of words (all pairs, i = j included).

    The histogram tensor (6,)*k is multiplied by F_q on every axis, then
    contracted with itself: cost O(k 6^(k+1)) (docs/design.md section 4).
    """
    k = len(factors)
    t = hist.reshape((6,) * k) if k else hist.reshape(())
    g = t
    for axis, f in enumerate(factors):
        g = np.moveaxis(np.tensordot(f, g, axes=([1], [axis])), 0, axis)
    return float(np.sum(g * t))


def pair_count_sum(word_rows: np.ndarray, inv_lambda, chunk: int = 2048, exclude=None, blocks=None,
                   n_blocks: int = 1):
    """sum_{i != j} prod_q F(w_iq, w_jq) by pair counts (cost O(N^2 |A|), chunked).

    For each pair, a = number of sites with the same basis and outcome, b =
    same basis and opposite outcomes, c = different bases; with one-hot
    matrices these counts are matrix products. The factor is
    prod over sites of (1+s)/2, (1-s)/2 or 1/2 with s = 1/lambda_q^2: when
    lambda is the same on every site, one matrix product per chunk gives
    (k + 1) a + (a + b) and the factor is looked up in a table (about 10 ns
    per pair here); calibrated lambdas multiply site by site.
    ``exclude`` (N,) labels: pairs with equal labels are left out (same
    setting); the rows are sorted by label first, so those pairs are blocks.
    With ``blocks`` (N,) labels, returns the (n_blocks, n_blocks) matrix of
    sums over pairs (i in block b1, j in block b2) instead of the total.
    """
    n_snap, k = word_rows.shape
    if exclude is not None:  # rows of one label side by side: the excluded pairs are blocks on the diagonal
        order = np.argsort(exclude, kind="stable")
        word_rows, exclude = word_rows[order], np.asarray(exclude)[order]
        blocks = None if blocks is None else np.asarray(blocks)[order]
        run_start = np.flatnonzero(np.r_[True, exclude[1:] != exclude[:-1]])
        run_stop = np.r_[run_start[1:], n_snap]
    inv = np.broadcast_to(np.asarray(inv_lambda, dtype=float), (k,))
    s = inv**2
    same_out = np.zeros((n_snap, 6 * k))
    same_out[np.arange(n_snap)[:, None], 6 * np.arange(k) + word_rows] = 1.0
    basis_onehot = np.zeros((n_snap, 3 * k))
    basis_onehot[np.arange(n_snap)[:, None], 3 * np.arange(k) + word_rows // 2] = 1.0
    total = 0.0
    by_block = np.zeros((n_blocks, n_blocks))
    onehot = None
    if blocks is not None:
        onehot = np.zeros((n_snap, n_blocks))
        onehot[np.arange(n_snap), blocks] = 1.0
    uniform = np.allclose(s, s[0])
    if uniform:
        # one matrix product gives code = (k + 1) a + (a + b) for every pair (exact small integers), and
        # the factor of each code is looked up: x^a y^b (1/2)^(k - a - b), x, y = (1 +- s)/2
        left = np.concatenate([(k + 1) * same_out, basis_onehot], axis=1)
        right = np.concatenate([same_out, basis_onehot], axis=1).T.copy()
        a_grid, ab_grid = np.divmod(np.arange((k + 1) ** 2), k + 1)
        b_grid = ab_grid - a_grid
        table = np.where(b_grid >= 0, ((1 + s[0]) / 2) ** a_grid * ((1 - s[0]) / 2) ** np.maximum(b_grid, 0)
                         * 0.5 ** (k - ab_grid), 0.0)
    for start in range(0, n_snap, chunk):
        sl = slice(start, start + chunk)
        if uniform:
            term = table[(left[sl] @ right).astype(np.intp)]  # exact integers: no rounding needed
        else:
            term = np.ones((min(chunk, n_snap - start), n_snap))
            for q in range(k):
                wq = word_rows[:, q]
                same_b = (wq[sl, None] // 2) == (wq[None, :] // 2)
                same_o = wq[sl, None] == wq[None, :]
                term *= np.where(same_o, (1 + s[q]) / 2, np.where(same_b, (1 - s[q]) / 2, 0.5))
        rows = np.arange(start, min(start + chunk, n_snap))
        term[np.arange(len(rows)), rows] = 0.0  # i = j
        if exclude is not None:
            stop = rows[-1] + 1
            for lo, hi in zip(run_start[(run_stop > start) & (run_start < stop)],
                              run_stop[(run_stop > start) & (run_start < stop)]):
                term[max(lo, start) - start:min(hi, stop) - start, lo:hi] = 0.0
        if onehot is not None:
            by_block += onehot[rows].T @ (term @ onehot)
        else:
            total += float(term.sum())
    return by_block if blocks is not None else total


def setting_purity_estimate(bits_per_setting, qubits) -> float:
    """Per-setting purity estimator, averaged over settings (Brydges et al., Science 364, 260 (2019)).

    For one setting with shots s, s': P_U = 2^|A| sum_{s != s'} (-2)^(-D(s, s')) / (M (M - 1)),
    D the Hamming distance on A; this unbiased form over distinct shots is
    averaged over the settings. ``bits_per_setting`` is a list of (M, n) arrays.
    """
    k = len(qubits)
    values = []
    for bits in bits_per_setting:
        m = len(bits)
        if m < 2:
            continue
        b = bits[:, qubits].astype(float)
        hamming = b @ (1 - b).T + (1 - b) @ b.T
        weights = (-2.0) ** (-hamming)
        values.append(2**k * (weights.sum() - m) / (m * (m - 1)))
    return float(np.mean(values))
