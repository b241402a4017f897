"""Sums over pairs of snapshots for purities and mutual information (docs/design.md section 4).

Local ensemble: within-setting pair sums from per-setting outcome
histograms, cross-setting pair counts for large subsystems, and every
single-site and site-pair purity at once from the Gram matrix of one-hot
(basis, outcome) words. Circuit ensembles: two-site purities from Pauli-
vector sums built out of one- and two-site estimates.
"""

from __future__ import annotations

import numpy as np

from manybody.estimation.kernels import pair_count_sum


def outcome_within(hists, setting_block, n_blocks, k, inv):
    """Within-setting pair sums of tr(rho_i rho_j) from per-setting outcome histograms (same bases)."""
    out = np.zeros(n_blocks)
    for b in range(n_blocks):
        h = hists[setting_block == b]
        g = h.reshape((-1,) + (2,) * k)
        for q in range(k):
            f2 = np.array([[(1 + inv[q] ** 2) / 2, (1 - inv[q] ** 2) / 2],
                           [(1 - inv[q] ** 2) / 2, (1 + inv[q] ** 2) / 2]])
            g = np.moveaxis(np.tensordot(f2, g, axes=([1], [q + 1])), 0, q + 1)
        out[b] = np.sum(g.reshape(len(h), -1) * h)
    return out


def mi_within(joint, setting_block, n_blocks, n, inv):
    """Within-setting pair sums for every site pair (off-diagonal) and every site (diagonal).

    ``joint`` (K, 2n, 2n) holds per setting the counts of outcome pairs
    (site a outcome u, site b outcome v); the bases are fixed within a setting.
    """
    out = np.zeros((n_blocks, n, n))
    f2 = np.zeros((n, 2, 2))
    for q in range(n):
        s = inv[q] ** 2
        f2[q] = [[(1 + s) / 2, (1 - s) / 2], [(1 - s) / 2, (1 + s) / 2]]
    for b in range(n_blocks):
        j = joint[setting_block == b].reshape(-1, n, 2, n, 2)
        g = np.einsum("auv,savbw,bwx->saubx", f2, j, f2)
        out[b] = np.einsum("saubx,saubx->ab", g, j)
        single = np.einsum("sauau->sau", j)  # outcome counts of each site
        out[b][np.diag_indices(n)] = np.einsum("sau,auv,sav->a", single, f2, single)
    return out


def pair_count_blocks(parts, qs, inv_local, n_blocks, multi):
    """Block-by-block matrix of cross-setting pair sums for a large local subsystem."""
    w = np.concatenate([p[0] for p in parts])
    setting = np.concatenate([p[1] for p in parts])
    block = np.concatenate([p[2] for p in parts])
    return pair_count_sum(w, inv_local[qs], exclude=setting, blocks=block, n_blocks=n_blocks)


def pair_count_jackknife(pair_count, blocks, qubits_of):
    n_tot = blocks["n"].sum()
    n2_tot = blocks["n2"].sum()
    full, err = {}, {}
    for name, mat in pair_count.items():
        i = int(name[2:])
        nb = len(mat)
        total = mat.sum()
        pairs = n_tot**2 - n2_tot
        full[i] = total / pairs
        loo = []
        for b in range(nb):
            sub = total - 2 * mat[b].sum() + mat[b, b]
            nn = n_tot - blocks["n"][b]
            pp = nn**2 - (n2_tot - blocks["n2"][b])
            loo.append(sub / pp)
        loo = np.array(loo)
        err[i] = np.sqrt((nb - 1) / nb * np.sum((loo - loo.mean()) ** 2))
    return full, err


def correlation_matrix(s, n, near_pairs, gram="corr", near="near"):
    """Summed products (3, n, 3, n) from the Gram sums, near pairs replaced by their explicit sums."""
    corr = s[gram].reshape(3, n, 3, n).copy()
    if near in s:
        for j, (a, b) in enumerate(near_pairs):
            corr[:, a, :, b] = s[near][j]
            corr[:, b, :, a] = s[near][j].T
    return corr


def mi_purities_paulis(s, n, near_pairs, pairs):
    """Single-site (diagonal) and two-site purities from Pauli-vector sums, one shot per setting.

    tr rho_ab^2 = (|V|^2 - sum_i |v_i|^2) / (4 pairs) with v_i over the 16 Paulis on (a, b):
    |V|^2 = N^2 + sum M_a^2 + sum M_b^2 + sum C_ab^2 and sum_i |v_i|^2 = N + S_a + S_b + Q_ab,
    M the one-site sums, C the two-site sums, S and Q the sums of squares.
    """
    count = s["n"]
    mag = s["mag"]  # (3, n)
    corr = correlation_matrix(s, n, near_pairs)
    squares = correlation_matrix(s, n, near_pairs, "corr_sq", "near_sq")
    m2 = np.sum(mag**2, axis=0)  # (n,)
    own = np.einsum("xaxa->a", s["corr"].reshape(3, n, 3, n))  # sum_i f_ia^2 over axes
    vv = count**2 + m2[:, None] + m2[None, :] + np.einsum("xayb,xayb->ab", corr, corr)
    ww = count + own[:, None] + own[None, :] + np.einsum("xayb->ab", squares)
    out = (vv - ww) / (4 * pairs)
    out[np.diag_indices(n)] = (count**2 + m2 - count - own) / (2 * pairs)
    return out


def mi_pair_sums(s, n):
    """sum over all ordered pairs (i, j), i = j included, of tr(rho_i rho_j) on every site pair and site (diagonal).

    Local ensemble, from Pauli vectors (docs/design.md section 4): per site
    tr(rho_i rho_j) = (1/2) sum_P v_i(P) v_j(P) over P in {I, X, Y, Z}, v(I) = 1,
    v(sigma^x) = [basis = x] (-1)^b / lambda (the one-site columns; with
    lambda = 1/3 the factors 5, -4, 1/2 of Elben et al., PRL 120, 050406 (2018)).
    So the sum over pairs is (1/4) |V|^2 on two sites and (1/2) |V|^2 on one,
    with V(P) = sum_i v_i(P): N for the identity, the column sums M ("mi_mag")
    and their Gram sums C ("mi_corr"):
        (N^2 + sum_x M_xa^2 + sum_y M_yb^2 + sum_xy C_xa,yb^2) / 4,   (N^2 + sum_x M_xa^2) / 2.
    """
    count = s["n"]
    m2 = np.sum(s["mi_mag"].reshape(3, n) ** 2, axis=0)
    corr = s["mi_corr"].reshape(3, n, 3, n)
    out = (count**2 + m2[:, None] + m2[None, :] + np.einsum("xayb,xayb->ab", corr, corr)) / 4
    out[np.diag_indices(n)] = (count**2 + m2) / 2
    return out


def mi_purities(s, n, inv, pairs):
    """Purities of every single site (diagonal) and site pair: all pairs of snapshots minus those within a setting.

    The within-setting sums are the i = j terms, tr(rho_i^2) = prod over the sites of (1 + 1/lambda^2)/2,
    or with several shots per setting the per-setting sums ``mi_within``.
    """
    total = mi_pair_sums(s, n)
    diag_each = (1 + inv**2) / 2
    if "mi_within" in s:  # several shots per setting
        within_pair = s["mi_within"]
        within_single = np.diagonal(within_pair).copy()
    else:  # one shot per setting: only i = j pairs
        within_pair = s["n"] * np.outer(diag_each, diag_each)
        within_single = s["n"] * diag_each
    out = (total - within_pair) / pairs
    out[np.diag_indices(n)] = (np.diagonal(total) - within_single) / pairs
    return out


def mi_purities_paulis_within(s, n, near_pairs, pairs):
    """As :func:`mi_purities_paulis` for several shots per setting: the pairs within a setting left out.

    sum over pairs from different settings = |V|^2 - sum_s |V_s|^2, with per setting
    |V_s|^2 = n_s^2 + sum M_sa^2 + sum M_sb^2 + sum C_sab^2 (M, C: the setting's one- and
    two-site sums); with one shot per setting this is the sum of squares of the one-shot form.
    """
    count, n2 = s["n"], s["n2"]
    mag = s["mag"]  # (3, n)
    corr = correlation_matrix(s, n, near_pairs)
    within = correlation_matrix(s, n, near_pairs, "corr_w", "near_w")
    m2 = np.sum(mag**2, axis=0)
    m2w = s["mag_w"].reshape(3, n).sum(axis=0)
    vv = count**2 + m2[:, None] + m2[None, :] + np.einsum("xayb,xayb->ab", corr, corr)
    ww = n2 + m2w[:, None] + m2w[None, :] + np.einsum("xayb->ab", within)
    out = (vv - ww) / (4 * pairs)
    out[np.diag_indices(n)] = (count**2 + m2 - n2 - m2w) / (2 * pairs)
    return out

