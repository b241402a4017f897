"""Purities tr rho_A^2 and Renyi-2 entropies of chosen subsystems (docs/design.md section 4).

The unbiased estimator is the U-statistic over pairs of snapshots from
different settings, (1/#pairs) sum_{i != j} tr(rho_i^A rho_j^A). Three exact
algorithms, chosen per subsystem:

- local ensemble, up to HISTOGRAM_MAX_SITES sites: histogram of the 6^|A|
  (basis, outcome) words, contracted with the per-site factor matrix;
- local ensemble, larger: pair counts (matrix products of one-hot words);
- circuit ensembles: Pauli vectors v_i(P) = tr(P rho_i)/lambda_P on A,
  sum_{i != j} v_i . v_j = |V|^2 - sum_i |v_i|^2, built per setting from the
  stabilizer group of the snapshot on A by a Walsh-Hadamard transform
  (:mod:`manybody.estimation.stabilizer`); nested subsystems share one pass,
  the largest covering the others.

Pairs of shots of one setting are left out via per-setting sums.

With several shots per setting (local ensemble, histogram subsystems) a
second unbiased estimator uses exactly those pairs: for the shots s != s'
of one setting, 2^|A| (-2)^(-D(s, s')) with D the Hamming distance on A
(Elben et al., PRL 120, 050406 (2018); Brydges et al., Science 364, 260
(2019)); robust shadows replace the per-site factors 2 and -1 by
1/2 +- 1/(6 lambda_q^2). The reported purity is w P_cross + (1 - w) P_within
with w minimising the jackknife variance (docs/design.md section 5).
S2 = -ln P: the jackknife of -ln P itself with its bias correction (delta
method for pair-count and circuit subsystems); NaN with a warning when P <= 0.
"""

from __future__ import annotations

import warnings

import numpy as np

from manybody.errors import InputError
from manybody.estimation.accumulators.base import Accumulator, interval_key, pair_count, put
from manybody.estimation.errorbars import (
    bias_corrected,
    combination_weight,
    interval_halfwidth,
    jackknife_error,
    replicates,
)
from manybody.estimation.kernels import histogram_index, histogram_pair_sum, site_factor_matrix, words
from manybody.estimation.pair_sums import outcome_within, pair_count_blocks, pair_count_jackknife
from manybody.estimation.stabilizer import (
    add_sums,
    pauli_vector_sums,
    purities_from_sums,
    support_products,
)

HISTOGRAM_MAX_SITES = 8
#: cross-setting pairs of snapshots beyond which pair-count purities are announced before the pass
#: (about 10 ns a pair on one core here, so this is a few minutes per subsystem)
PAIR_COUNT_NOTICE = 2e10
#: circuit ensembles: largest subsystem (qubits); the eigenvalues of its 2^|A| support patterns dominate the cost
PAULI_VECTOR_MAX_QUBITS = 14


def warn_long_pair_counts(setup, counts) -> None:
    """A warning, before the pass, when local purities of more than 8 sites will sum over very many pairs.

    ``counts``: the per-block snapshot counts n and n2 of the driver's setup.
    """
    if not setup.local or not setup.subsystems:
        return
    big = [s.label for s in setup.subsystems if len(setup.qubits_of(s)) > HISTOGRAM_MAX_SITES]
    pairs = (counts["n"].sum() ** 2 - counts["n2"].sum()) / 2
    if big and pairs > PAIR_COUNT_NOTICE:
        warnings.warn(f"purities of {', '.join(big)} (more than {HISTOGRAM_MAX_SITES} sites) sum over {pairs:.1e} "
                      f"pairs of snapshots each: about {pairs * 1e-8 / 60:.0f} min each at 10 ns a pair; subsystems "
                      f"of at most {HISTOGRAM_MAX_SITES} sites, or fewer snapshots, cost far less", RuntimeWarning,
                      stacklevel=3)


class Purity(Accumulator):
    """Purities of the requested subsystems: local algorithms (histograms, pair counts) or circuit Pauli vectors."""

    @classmethod
    def build(cls, setup, options):
        if not setup.subsystems:
            return None
        return LocalPurity(setup) if setup.local else CircuitPurity(setup)

    def variables(self, full, err, data, coords):
        subsystems = self.setup.subsystems
        coords["subsystem"] = [s.label for s in subsystems]
        coords["subsystem_size"] = ("subsystem", [len(s.sites) for s in subsystems])
        purity, perr = np.asarray(full["purity"], float), np.asarray(err["purity"], float)
        put(data, "purity", ("subsystem",), purity, err)
        known = getattr(self, "purity_interval", {})  # else 2 sigma
        bounds = np.array([known.get(i, (p - 2 * e, p + 2 * e)) for i, (p, e) in enumerate(zip(purity, perr))])
        data["purity_lo"], data["purity_hi"] = (("subsystem",), bounds[:, 0]), (("subsystem",), bounds[:, 1])
        s2, s2_err = renyi2(purity, perr)
        if "renyi2" in full:  # the jackknife of -ln P where it is known
            known = np.isfinite(full["renyi2"]) & np.isfinite(s2)
            s2, s2_err = np.where(known, full["renyi2"], s2), np.where(known, err["renyi2"], s2_err)
        data["renyi2"] = (("subsystem",), s2)
        data["renyi2_err"] = (("subsystem",), s2_err)
        half = np.asarray(err.get(interval_key("renyi2"), np.full(len(s2), np.nan)), float)
        half = np.where(np.isfinite(half), half, 2 * s2_err)  # else 2 sigma
        data["renyi2_lo"], data["renyi2_hi"] = (("subsystem",), s2 - half), (("subsystem",), s2 + half)

class LocalPurity(Purity):
    def __init__(self, setup):
        super().__init__(setup)
        self.qubits = [setup.qubits_of(s) for s in setup.subsystems]
        self.pair_words = {}  # subsystem index -> list of (words, setting positions, blocks) chunks

    def add(self, chunk):
        for i, qs in enumerate(self.qubits):
            if len(qs) <= HISTOGRAM_MAX_SITES:
                self._add_histogram(i, qs, chunk)
            else:
                self.pair_words.setdefault(i, []).append(
                    (words(chunk.basis[:, qs], chunk.bits[:, qs]), chunk.pos, chunk.block_index))

    def merge_state(self, other):
        """dask parts: the word lists of the pair-count subsystems (their sums are not per block)."""
        for i, parts in other.pair_words.items():
            self.pair_words.setdefault(i, []).extend(parts)

    def _add_histogram(self, i, qs, chunk):
        k = len(qs)
        idx = histogram_index(words(chunk.basis[:, qs], chunk.bits[:, qs]))
        part = np.zeros((self.setup.n_blocks, 6**k))
        np.add.at(part, (chunk.block_index, idx), 1.0)
        self.sums.add_blocks(f"hist{i}", part)
        if self.setup.multi:
            out_idx = chunk.bits[:, qs] @ (2 ** np.arange(k - 1, -1, -1))
            o = np.zeros((len(chunk), 2**k))
            o[np.arange(len(chunk)), out_idx] = 1.0
            self.per_setting.add(f"oh{i}", chunk.pos, o)
        else:
            inv = self.setup.lam.inv_local(self.setup.n_qubits)[qs]
            diag = np.prod((1 + inv**2) / 2)  # tr(rho_i^A rho_i^A) of one snapshot
            self.sums.add(f"hw{i}", chunk.onehot, np.full(len(chunk), diag))

    def finish(self):
        setup = self.setup
        inv = setup.lam.inv_local(setup.n_qubits)
        for i, qs in enumerate(self.qubits):
            if f"oh{i}" in self.per_setting:
                hists = self.per_setting[f"oh{i}"]
                self.sums.add_blocks(f"hw{i}", outcome_within(hists, setup.setting_block, setup.n_blocks,
                                                              len(qs), inv[qs]))
                # per-site factors 1/2 +- inv^2/6 = (1 +- (inv/sqrt 3)^2)/2: the within-setting kernel
                self.sums.add_blocks(f"bw{i}", outcome_within(hists, setup.setting_block, setup.n_blocks,
                                                              len(qs), inv[qs] / np.sqrt(3)))
        # pair counts: block-by-block matrices, whose leave-one-out sums are not total - block
        self.pair_counts = {f"pc{i}": pair_count_blocks(parts, self.qubits[i], inv, setup.n_blocks, setup.multi)
                            for i, parts in self.pair_words.items()}

    def estimates(self, s, inv=None):
        """Cross-setting U-statistics ``purity`` and, with several shots per setting, ``purity_within``."""
        pairs = pair_count(s)
        inv = self.setup.lam.inv_local(self.setup.n_qubits) if inv is None else inv
        cross, within = [], []
        for i, qs in enumerate(self.qubits):
            if f"hist{i}" in s:
                total = histogram_pair_sum(s[f"hist{i}"], [site_factor_matrix(inv[q]) for q in qs])
                cross.append((total - s[f"hw{i}"]) / pairs)
            if f"bw{i}" in s:
                own = np.prod(0.5 + inv[qs] ** 2 / 6)  # the s = s' term of the within-setting kernel
                within.append((s[f"bw{i}"] - s["n"] * own) / (s["n2"] - s["n"]))
        out = {"purity": np.array(cross, dtype=float)} if cross else {}
        if within:
            out["purity_within"] = np.array(within, dtype=float)
        return out

    def errors(self, counts, method):
        """Combined purities, the jackknife of S2 = -ln P with its bias correction, and pair-count subsystems."""
        full, loo = replicates(self.estimates, {**counts, **self.sums.data})
        k = len(self.qubits)
        out = {name: np.full(k, np.nan) for name in ("purity", "renyi2")}
        err = {name: np.full(k, np.nan) for name in ("purity", "renyi2")}
        hist = [i for i in range(k) if i not in self.pair_words]
        if hist:
            p, reps = full["purity"], loo["purity"]
            self.within_weight = np.ones(len(hist))
            if "purity_within" in full:
                self.within_weight = w = 1 - combination_weight(reps, loo["purity_within"])
                p, reps = (1 - w) * p + w * full["purity_within"], (1 - w) * reps + w * loo["purity_within"]
            with np.errstate(invalid="ignore", divide="ignore"):
                s2, s2_reps = -np.log(np.where(p > 0, p, np.nan)), -np.log(np.where(reps > 0, reps, np.nan))
            out["purity"][hist], err["purity"][hist] = p, jackknife_error(reps)
            out["renyi2"][hist], err["renyi2"][hist] = bias_corrected(s2, s2_reps), jackknife_error(s2_reps)
            err[interval_key("renyi2")] = np.full(k, np.nan)
            err[interval_key("renyi2")][hist] = interval_halfwidth(s2_reps, err["renyi2"][hist])
            self.add_calibration_noise(out, err, counts)
            half = err[interval_key("renyi2")][hist]
            s2 = out["renyi2"][hist]
            # P is skewed when few settings inform it, ln P much less: the interval of P is exp(-S2 interval)
            self.purity_interval = {i: (np.exp(-(s2[j] + half[j])), np.exp(-(s2[j] - half[j])))
                                    for j, i in enumerate(hist)}
        if self.pair_counts:
            full_pc, err_pc = pair_count_jackknife(self.pair_counts, counts, self.qubits)
            for i in full_pc:
                out["purity"][i], err["purity"][i] = full_pc[i], err_pc[i]
        return out, err

    def calibration_gradients(self, full, counts):
        """d P / d ln lambda_q by central differences of the estimator on the same sums (and of S2 = -ln P).

        Local ensemble only: circuit purities' calibration noise is not propagated (docs/design.md section 5).
        """
        if not self.setup.local:
            return {}
        hist = [i for i in range(len(self.qubits)) if i not in self.pair_words]
        n = self.setup.n_qubits
        inv0 = self.setup.lam.inv_local(n)
        grad = np.zeros((len(self.qubits), n))
        step = 1e-4
        for q in np.unique(np.concatenate([self.qubits[i] for i in hist])):
            shifted = []
            for sign in (1, -1):
                inv = inv0.copy()
                inv[q] *= np.exp(-sign * step)  # ln lambda_q -> ln lambda_q + sign step
                shifted.append(self._purity_at(inv, counts))
            grad[hist, q] = (shifted[0] - shifted[1]) / (2 * step)
        with np.errstate(invalid="ignore", divide="ignore"):
            return {"purity": grad, "renyi2": -grad / np.asarray(full["purity"])[:, None]}

    def _purity_at(self, inv, counts):
        """The reported (combined) purities of the histogram subsystems with other inverse eigenvalues."""
        setup = self.setup
        s = {k: v.sum(axis=0) for k, v in self.sums.data.items()}
        s["n"], s["n2"] = counts["n"].sum(), counts["n2"].sum()
        one_block = np.where(setup.setting_block >= 0, 0, -1)
        for i, qs in enumerate(self.qubits):
            if f"oh{i}" in self.per_setting:
                hists = self.per_setting[f"oh{i}"]
                s[f"hw{i}"] = outcome_within(hists, one_block, 1, len(qs), inv[qs])[0]
                s[f"bw{i}"] = outcome_within(hists, one_block, 1, len(qs), inv[qs] / np.sqrt(3))[0]
            elif f"hw{i}" in s:
                s[f"hw{i}"] = s["n"] * np.prod((1 + inv[qs] ** 2) / 2)
        est = self.estimates(s, inv)
        if "purity_within" not in est:
            return est["purity"]
        w = self.within_weight
        return (1 - w) * est["purity"] + w * est["purity_within"]


class CircuitPurity(Purity):
    """Circuit ensembles: per-block Pauli-vector sums of covering subsystems, from whole settings."""

    def __init__(self, setup):
        super().__init__(setup)
        qubits = [setup.qubits_of(s) for s in setup.subsystems]
        biggest = max(len(qs) for qs in qubits)
        if biggest > PAULI_VECTOR_MAX_QUBITS:
            raise InputError(f"subsystems: purities of {biggest} qubits from circuit ensembles take too long here; "
                             f"at most {PAULI_VECTOR_MAX_QUBITS} qubits (the local ensemble takes any size)",
                             argument="subsystems")
        self.covers, self.members = covering_subsystems(qubits)
        self.eigenvalue = setup.lam.of_support  # each support met computed once (Eigenvalues caches it)
        self.parts = [dict() for _ in self.covers]  # cover -> block -> PauliVectorSums
        self.pending = (np.zeros(0, dtype=np.int64), np.zeros((0, setup.n_qubits), dtype=np.uint8))

    def add(self, chunk):
        """Hand on the snapshots of complete settings; keep a setting's first shots until its last arrive."""
        pos = np.concatenate([self.pending[0], chunk.pos])
        bits = np.concatenate([self.pending[1], chunk.bits])
        seen = np.bincount(pos, minlength=self.setup.n_settings)
        complete = seen[pos] >= self.setup.setting_shots[pos]
        self.pending = (pos[~complete], bits[~complete])
        self._add_settings(pos[complete], bits[complete])

    def merge_state(self, other):
        """dask parts: per-block Pauli-vector sums, and the shots of settings still open in either part."""
        for mine, theirs in zip(self.parts, other.parts):
            for block, part in theirs.items():
                mine[block] = part if block not in mine else add_sums(mine[block], part)
        self.pending = tuple(np.concatenate([a, b]) for a, b in zip(self.pending, other.pending))

    def finish(self):
        self._add_settings(*self.pending)
        self.pending = (self.pending[0][:0], self.pending[1][:0])

    def _add_settings(self, pos, bits):
        setup = self.setup
        blocks = setup.setting_block[pos]
        for c, cover in enumerate(self.covers):
            for b in np.unique(blocks):
                rows = blocks == b
                part = pauli_vector_sums(setup.ensemble, setup.settings, pos[rows], bits[rows], None, cover,
                                         self.eigenvalue)
                self.parts[c][b] = part if b not in self.parts[c] else add_sums(self.parts[c][b], part)

    def errors(self, counts, method):
        """Purities of every subsystem and their delete-one-block jackknife errors (sums are not linear here)."""
        full, err = np.zeros(len(self.setup.subsystems)), np.zeros(len(self.setup.subsystems))
        for c, members in enumerate(self.members):
            value, error = self._jackknife(self.parts[c], counts)
            for i, pattern in members:
                full[i], err[i] = value[pattern], error[pattern]
        return {"purity": full}, {"purity": err}

    def _jackknife(self, parts, counts):
        blocks = sorted(parts)
        total = parts[blocks[0]]
        for b in blocks[1:]:
            total = add_sums(total, parts[b])
        diag = (lambda x: x.within_by_support) if self.setup.multi else (lambda x: x.self_by_support)
        n, n2 = counts["n"].sum(), counts["n2"].sum()
        vv = support_products(total)
        value = purities_from_sums(vv, diag(total), n**2 - n2)
        loo = np.array([purities_from_sums(vv - 2 * support_products(total, parts[b]) + support_products(parts[b]),
                                           diag(total) - diag(parts[b]),
                                           (n - counts["n"][b]) ** 2 - (n2 - counts["n2"][b])) for b in blocks])
        nb = len(blocks)
        return value, np.sqrt((nb - 1) / nb * np.sum((loo - loo.mean(axis=0)) ** 2, axis=0))


def memoized(eigenvalue):
    """The eigenvalue of a support mask, each support computed once (calibrated values can be costly)."""
    cache = {}

    def of_support(mask):
        key = np.packbits(mask).tobytes()
        if key not in cache:
            cache[key] = eigenvalue(mask)
        return cache[key]

    return of_support


def covering_subsystems(qubits):
    """Fewest covers, largest first: every subsystem is a subset of one cover (nested profiles share one).

    Returns the covers (qubit arrays) and, per cover, (subsystem index, support pattern within the cover).
    """
    order = sorted(range(len(qubits)), key=lambda i: -len(qubits[i]))
    covers, members = [], []
    for i in order:
        target = set(qubits[i].tolist())
        for c, cover in enumerate(covers):
            if target <= set(cover.tolist()):
                break
        else:
            covers.append(np.asarray(qubits[i]))
            members.append([])
            c = len(covers) - 1
        index = {q: t for t, q in enumerate(covers[c].tolist())}
        members[c].append((i, sum(1 << index[q] for q in target)))
    return covers, members


def renyi2(purity, perr):
    """S2 = -ln P with the delta-method error; NaN with a warning when P <= 0."""
    bad = ~(purity > 0)
    if bad.any():
        warnings.warn(f"{int(bad.sum())} purity estimate(s) <= 0: their Renyi-2 entropy is NaN "
                      "(too few snapshots for this subsystem size)", RuntimeWarning, stacklevel=3)
    with np.errstate(invalid="ignore", divide="ignore"):
        s2 = np.where(bad, np.nan, -np.log(np.where(bad, 1.0, purity)))
        s2_err = np.where(bad, np.nan, perr / np.where(bad, 1.0, purity))
    return s2, s2_err
