"""Overlap tr(rho_1 rho_2) of the states behind two shadows, and its normalised form.

Two independent experiments give snapshots rho_i (shadow 1) and sigma_j
(shadow 2), each an unbiased estimate of its state, so every cross pair is
an unbiased estimate of the overlap (Elben et al., PRL 124, 010504 (2020)):

    O = tr(rho_1 rho_2) ~ (1 / (N_1 N_2)) sum_(i, j) tr(rho_i^A sigma_j^A),

on the qubits A (all by default). All N_1 N_2 cross pairs are used, since
the two experiments are independent. The purities tr rho_1^2 and tr rho_2^2
are the usual U-statistics over pairs of snapshots of different settings
(docs/design.md section 4.3), and the normalised overlap is

    O / max(tr rho_1^2, tr rho_2^2)

(1 for equal states, 0 for orthogonal ones; Elben et al. 2020). The pair
kernel tr(rho_i^A sigma_j^A) is the one of the purities:

- both shadows local: a product over qubits of the 6 x 6 factor matrix of
  (basis, outcome) words (:func:`manybody.estimation.kernels.site_factor_matrix`),
  summed from word histograms up to 8 qubits, by pair counts beyond;
- otherwise (shallow or global circuits): Pauli vectors, 2^-|A| V_1 . V_2 with
  V the per-block sums of v_i(P) = tr(P rho_i) / lambda_P over the Paulis on A,
  built per setting from stabilizer groups (:mod:`manybody.estimation.stabilizer`),
  up to 14 qubits.

Error bars. Each shadow's settings are cut into B contiguous blocks, as in
docs/design.md section 5 (the same B for both, at most ``n_blocks``). Every
sum is kept as a B x B matrix of pair sums between blocks (shadow 1 x
shadow 2 for the overlap, within each shadow for the purities); replicate b
removes block b of *both* shadows, and the error is the delete-one-block
jackknife spread of the replicates, (B-1)/B sum_b (theta_(-b) - mean)^2 under
the root. Block b of shadow 1 and block b of shadow 2 form one deletion unit;
since the experiments are independent, which blocks are paired does not
matter. The normalised overlap is jackknifed as a whole (its numerator and
denominator are correlated). The jackknife of such two-sample U-statistics
is treated by Arvesen, Ann. Math. Stat. 40, 2076 (1969) (from memory).
Calibrated (robust) eigenvalues are not used here.
"""

from __future__ import annotations

import warnings

import numpy as np
import xarray as xr

from manybody import __version__
from manybody.errors import InputError
from manybody.estimation.accumulators.purity import HISTOGRAM_MAX_SITES, PAULI_VECTOR_MAX_QUBITS, memoized
from manybody.estimation.errorbars import jackknife_error
from manybody.estimation.kernels import histogram_index, pair_count_sum, site_factor_matrix, words
from manybody.estimation.pair_sums import outcome_within
from manybody.estimation.stabilizer import add_sums, pauli_vector_sums, support_products


def overlap(shadow_a, shadow_b, qubits=None, n_blocks: int = 20, chunk: int = 8192) -> xr.Dataset:
    """tr(rho_a rho_b), tr(rho_a rho_b) / max(tr rho_a^2, tr rho_b^2) and both purities, with jackknife errors."""
    if shadow_a is shadow_b:
        raise InputError("overlap: the two shadows are the same object; the overlap of a state with itself is its "
                         "purity, estimated from two independent shadows", argument="shadow_b")
    n = shadow_a.ensemble.n_qubits
    if shadow_b.ensemble.n_qubits != n:
        raise InputError(f"overlap: the shadows have {n} and {shadow_b.ensemble.n_qubits} qubits; they must measure "
                         "the same qubits", argument="shadow_b")
    qubits = _qubits(qubits, n)
    shots = [_setting_shots(s, chunk) for s in (shadow_a, shadow_b)]
    active = [int(np.count_nonzero(s)) for s in shots]
    if min(active) < 2:
        raise InputError("overlap: each shadow needs snapshots from at least two settings", argument="shadow_a")
    b = int(min(n_blocks, *active))
    blocks = [_setting_blocks(s, b) for s in shots]
    local = shadow_a.ensemble.is_local and shadow_b.ensemble.is_local
    if local:
        method = "histogram" if len(qubits) <= HISTOGRAM_MAX_SITES else "pair counts"
        mats = _local_matrices(shadow_a, shadow_b, blocks, qubits, b, chunk)
    else:
        if len(qubits) > PAULI_VECTOR_MAX_QUBITS:
            raise InputError(f"qubits: overlaps of {len(qubits)} qubits from circuit ensembles take too long here; "
                             f"choose at most {PAULI_VECTOR_MAX_QUBITS} (qubits=, on the command line "
                             "--overlap-qubits); two local shadows take any number", argument="qubits")
        method = "Pauli vectors"
        mats = _pauli_matrices(shadow_a, shadow_b, blocks, qubits, b, chunk)
    counts = [(np.bincount(bl[s > 0], weights=s[s > 0], minlength=b),
               np.bincount(bl[s > 0], weights=s[s > 0] ** 2, minlength=b)) for s, bl in zip(shots, blocks)]
    full, err = _jackknife(*mats, counts)
    attrs = {"method": method, "qubits": ",".join(map(str, qubits)), "error_blocks": b,
             "n_snapshots_a": int(shots[0].sum()), "n_snapshots_b": int(shots[1].sum()),
             "ensemble_a": shadow_a.ensemble.kind, "ensemble_b": shadow_b.ensemble.kind,
             "depth_a": int(shadow_a.ensemble.depth), "depth_b": int(shadow_b.ensemble.depth),
             "source_a": shadow_a.source, "source_b": shadow_b.source, "tool_version": __version__}
    data = {}
    for name in ("overlap", "normalized_overlap", "purity_a", "purity_b"):
        data[name] = ((), float(full[name]))
        data[name + "_err"] = ((), float(err[name]))
    return xr.Dataset(data, attrs=attrs)


def _qubits(qubits, n):
    if qubits is None:
        return list(range(n))
    try:
        qubits = [int(q) for q in np.atleast_1d(qubits)]
    except (TypeError, ValueError):
        raise InputError(f"qubits: expected a list of qubit numbers, not {qubits!r}", argument="qubits") from None
    if not qubits or len(set(qubits)) != len(qubits) or not all(0 <= q < n for q in qubits):
        shown = str(qubits) if len(qubits) <= 8 else f"[{', '.join(map(str, qubits[:3]))}, ..., {qubits[-1]}] " \
                                                      f"({len(qubits)} given)"
        raise InputError(f"qubits {shown}: give distinct qubit numbers from 0 to {n - 1}", argument="qubits")
    return sorted(qubits)


def _setting_shots(shadow, chunk):
    shots = np.zeros(len(shadow.settings))
    for pos, _, weights in shadow.chunks(chunk):
        shots += np.bincount(pos, weights=weights, minlength=len(shots))
    return shots


def _setting_blocks(shots, n_blocks):
    """Block of each setting: contiguous runs of the settings that have snapshots (-1 for the others)."""
    active = np.flatnonzero(shots)
    out = np.full(len(shots), -1)
    out[active] = np.arange(len(active)) * n_blocks // len(active)
    return out


def _snapshots(shadow, chunk):
    """(setting positions, outcome bits) per chunk, one row per shot."""
    for pos, bits, weights in shadow.chunks(chunk):
        if weights.max(initial=1) != 1 or weights.min(initial=1) != 1:
            pos, bits = np.repeat(pos, weights, axis=0), np.repeat(bits, weights, axis=0)
        if len(pos):
            yield pos, bits


# ------------------------------------------------------------------ local ensemble
def _local_matrices(shadow_a, shadow_b, blocks, qubits, n_blocks, chunk):
    """B x B pair sums (a x b, a x a, b x b) of prod_q F(w_iq, w_jq); same-setting pairs left out within a shadow."""
    factors = [site_factor_matrix(3.0)] * len(qubits)
    if len(qubits) <= HISTOGRAM_MAX_SITES:
        hists = [_block_histograms(s, bl, qubits, n_blocks, chunk) for s, bl in zip((shadow_a, shadow_b), blocks)]
        applied = [np.array([_apply(h, factors) for h in hs]) for hs in hists]  # (F x ... x F) h per block
        t_ab, t_aa, t_bb = hists[0] @ applied[1].T, hists[0] @ applied[0].T, hists[1] @ applied[1].T
        for t, s, bl in ((t_aa, shadow_a, blocks[0]), (t_bb, shadow_b, blocks[1])):
            t[np.diag_indices(n_blocks)] -= _within(s, bl, qubits, n_blocks, chunk)
        return t_ab, t_aa, t_bb
    data = [_words(s, bl, qubits, chunk) for s, bl in zip((shadow_a, shadow_b), blocks)]
    t_aa, t_bb = (pair_count_sum(w, 3.0, exclude=pos, blocks=blk, n_blocks=n_blocks) for w, pos, blk in data)
    return cross_pair_blocks(data[0][0], data[0][2], data[1][0], data[1][2], n_blocks), t_aa, t_bb


def _block_histograms(shadow, setting_block, qubits, n_blocks, chunk):
    hist = np.zeros((n_blocks, 6 ** len(qubits)))
    for pos, bits in _snapshots(shadow, chunk):
        idx = histogram_index(words(shadow.settings.basis[pos][:, qubits], bits[:, qubits]))
        np.add.at(hist, (setting_block[pos], idx), 1.0)
    return hist


def _apply(hist, factors):
    """(F_1 x ... x F_k) h as a flat vector (F symmetric, so h^T F g is a dot product)."""
    k = len(factors)
    g = hist.reshape((6,) * k)
    for axis, f in enumerate(factors):
        g = np.moveaxis(np.tensordot(f, g, axes=([1], [axis])), 0, axis)
    return g.ravel()


def _within(shadow, setting_block, qubits, n_blocks, chunk):
    """Per block, sum over same-setting ordered pairs (i = j included) of the pair kernel."""
    k = len(qubits)
    inv = np.full(k, 3.0)
    per = np.zeros((len(shadow.settings), 2**k))
    for pos, bits in _snapshots(shadow, chunk):
        np.add.at(per, (pos, bits[:, qubits] @ (2 ** np.arange(k - 1, -1, -1))), 1.0)
    if per.sum(axis=1).max() <= 1:  # one shot per setting: only i = j, each (1 + 1/lambda^2)/2 per qubit
        return np.bincount(setting_block[per.sum(1) > 0], minlength=n_blocks) * 5.0**k
    return outcome_within(per, setting_block, n_blocks, k, inv)


def _words(shadow, setting_block, qubits, chunk):
    parts = [(words(shadow.settings.basis[pos][:, qubits], bits[:, qubits]), pos, setting_block[pos])
             for pos, bits in _snapshots(shadow, chunk)]
    return tuple(np.concatenate([p[i] for p in parts]) for i in range(3))


def cross_pair_blocks(words_a, blocks_a, words_b, blocks_b, n_blocks, inv_lambda: float = 3.0, chunk: int = 2048):
    """T[b1, b2] = sum over (i in block b1 of a, j in block b2 of b) of prod_q F(w_iq, w_jq): (B, B).

    Per pair, with a = qubits of equal (basis, outcome) words and c = qubits of
    equal bases, the kernel is ((1+s)/2)^a ((1-s)/2)^(c-a) (1/2)^(k-c), s = 1/lambda^2
    (docs/design.md section 4.3); a and c are products of one-hot matrices and
    the kernel a look-up in a table over (a, c). Cost O(N_a N_b k), rows of a in chunks.
    """
    k = words_a.shape[1]
    s = inv_lambda**2

    def onehots(w):
        rows = np.arange(len(w))[:, None]
        word = np.zeros((len(w), 6 * k))
        word[rows, 6 * np.arange(k) + w] = 1.0
        basis = np.zeros((len(w), 3 * k))
        basis[rows, 3 * np.arange(k) + w // 2] = 1.0
        return word, basis

    (wa, ba), (wb, bb) = onehots(words_a), onehots(words_b)
    a, c = np.divmod(np.arange((k + 1) ** 2), k + 1)
    with np.errstate(divide="ignore", invalid="ignore"):  # a table look-up instead of powers per pair
        table = np.where(a <= c, ((1 + s) / 2) ** a * ((1 - s) / 2) ** np.maximum(c - a, 0) * 0.5 ** (k - c), 0.0)
    block_b = np.zeros((len(words_b), n_blocks))
    block_b[np.arange(len(words_b)), blocks_b] = 1.0
    out = np.zeros((n_blocks, n_blocks))
    for start in range(0, len(words_a), chunk):
        sl = slice(start, start + chunk)
        index = (wa[sl] @ wb.T) * (k + 1) + ba[sl] @ bb.T  # (a, c) of every pair, exact small integers
        term = table[index.astype(np.intp)]
        block_a = np.zeros((len(term), n_blocks))
        block_a[np.arange(len(term)), blocks_a[sl]] = 1.0
        out += block_a.T @ (term @ block_b)
    return out


# ------------------------------------------------------------------ circuit ensembles
def _pauli_matrices(shadow_a, shadow_b, blocks, qubits, n_blocks, chunk):
    """B x B sums 2^-|A| V_x(b1) . V_y(b2) between block Pauli vectors; same-setting pairs out of the diagonals."""
    parts = [_block_vectors(s, bl, qubits, chunk) for s, bl in zip((shadow_a, shadow_b), blocks)]
    scale = 2.0 ** -len(qubits)

    def gram(x, y):
        return np.array([[support_products(x[b1], y[b2]).sum() * scale if b1 in x and b2 in y else 0.0
                          for b2 in range(n_blocks)] for b1 in range(n_blocks)])

    t_ab, t_aa, t_bb = gram(parts[0], parts[1]), gram(parts[0], parts[0]), gram(parts[1], parts[1])
    for t, part in ((t_aa, parts[0]), (t_bb, parts[1])):
        for b, sums in part.items():
            multi = sums.shots.max(initial=0) > 1
            t[b, b] -= (sums.within_by_support if multi else sums.self_by_support).sum() * scale
    return t_ab, t_aa, t_bb


def _block_vectors(shadow, setting_block, qubits, chunk):
    """Per block, the Pauli-vector sums on ``qubits``; all shots of a setting enter in one call."""
    ens, settings = shadow.ensemble, shadow.settings
    eigenvalue = memoized(ens.eigenvalue)
    out = {}
    pending_pos, pending_bits = np.zeros(0, np.int64), np.zeros((0, ens.n_qubits), np.uint8)
    shots = _setting_shots(shadow, chunk)

    def add(pos, bits):
        blk = setting_block[pos]
        for b in np.unique(blk).tolist():
            rows = blk == b
            part = pauli_vector_sums(ens, settings, pos[rows], bits[rows], None, qubits, eigenvalue)
            out[b] = part if b not in out else add_sums(out[b], part)

    for pos, bits in _snapshots(shadow, chunk):
        pos, bits = np.concatenate([pending_pos, pos]), np.concatenate([pending_bits, bits])
        complete = np.bincount(pos, minlength=len(shots))[pos] >= shots[pos]
        pending_pos, pending_bits = pos[~complete], bits[~complete]
        if complete.any():
            add(pos[complete], bits[complete])
    if len(pending_pos):
        add(pending_pos, pending_bits)
    return out


# ------------------------------------------------------------------ estimates and errors
def _estimates(t_ab, t_aa, t_bb, na, na2, nb, nb2):
    with np.errstate(invalid="ignore", divide="ignore"):
        value = t_ab / (na * nb)
        pa, pb = t_aa / (na**2 - na2), t_bb / (nb**2 - nb2)
        biggest = np.maximum(pa, pb)
        norm = np.where(biggest > 0, value / np.where(biggest > 0, biggest, 1.0), np.nan)
    return {"overlap": value, "normalized_overlap": norm, "purity_a": pa, "purity_b": pb}


def _jackknife(t_ab, t_aa, t_bb, counts):
    """Estimates on all pairs and delete-one-block jackknife errors (block b of both shadows removed)."""
    (na, na2), (nb, nb2) = counts

    def without(t, b):
        return t.sum() - t[b].sum() - t[:, b].sum() + t[b, b]

    full = _estimates(t_ab.sum(), t_aa.sum(), t_bb.sum(), na.sum(), na2.sum(), nb.sum(), nb2.sum())
    loo = [_estimates(without(t_ab, b), without(t_aa, b), without(t_bb, b), na.sum() - na[b],
                      na2.sum() - na2[b], nb.sum() - nb[b], nb2.sum() - nb2[b]) for b in range(len(na))]
    err = {name: float(jackknife_error(np.array([x[name] for x in loo], dtype=float))) for name in full}
    if not np.isfinite(full["normalized_overlap"]):
        warnings.warn("overlap: both purity estimates are <= 0 (too few snapshots): the normalised overlap is NaN",
                      RuntimeWarning, stacklevel=3)
    elif not np.isfinite(err["normalized_overlap"]):
        warnings.warn("overlap: without some blocks both purity estimates are <= 0 (too few snapshots): the error "
                      "of the normalised overlap is NaN", RuntimeWarning, stacklevel=3)
    return full, err
