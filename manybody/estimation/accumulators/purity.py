"""Purities tr rho_A^2 and Renyi-2 entropies of chosen subsystems (docs/design.md section 4).

The unbiased estimator is the U-statistic over pairs of snapshots from
different settings, (1/#pairs) sum_{i != j} tr(rho_i^A rho_j^A). Three exact
algorithms, chosen per subsystem:

- local ensemble, up to HISTOGRAM_MAX_SITES sites: histogram of the 6^|A|
  (basis, outcome) words, contracted with the per-site factor matrix;
- local ensemble, larger: pair counts (matrix products of one-hot words);
- circuit ensembles: Pauli vectors v_i(P) = tr(P rho_i)/lambda_P over the
  4^|A| Paulis on A, sum_{i != j} v_i . v_j = |V|^2 - sum_i |v_i|^2.

Pairs of shots of one setting are left out via per-setting sums.
S2 = -ln P with the delta-method error; NaN with a warning when P <= 0.
"""

from __future__ import annotations

import warnings

import numpy as np

from manybody.errors import InputError
from manybody.estimation.accumulators.base import Accumulator, pair_count, put
from manybody.estimation.errorbars import jackknife
from manybody.estimation.kernels import histogram_index, histogram_pair_sum, site_factor_matrix, words
from manybody.estimation.pair_sums import outcome_within, pair_count_blocks, pair_count_jackknife
from manybody.estimation.sums import within_sums
from manybody.measure.paulis import paulis_on

HISTOGRAM_MAX_SITES = 8
PAULI_VECTOR_MAX_QUBITS = 6


class Purity(Accumulator):
    def __init__(self, setup):
        super().__init__(setup)
        self.qubits = [setup.qubits_of(s) for s in setup.subsystems]
        self.pair_words = {}  # subsystem index -> list of (words, setting positions, blocks) chunks
        for qs in self.qubits:
            if not setup.local and len(qs) > PAULI_VECTOR_MAX_QUBITS:
                raise InputError(f"purities of {len(qs)} qubits need the local ensemble; circuit ensembles take "
                                 f"subsystems of at most {PAULI_VECTOR_MAX_QUBITS} qubits", argument="subsystems")

    @classmethod
    def build(cls, setup, options):
        return cls(setup) if setup.subsystems else None

    def add(self, chunk):
        for i, qs in enumerate(self.qubits):
            if not self.setup.local:
                self._add_pauli_vector(i, qs, chunk)
            elif len(qs) <= HISTOGRAM_MAX_SITES:
                self._add_histogram(i, qs, chunk)
            else:
                self.pair_words.setdefault(i, []).append(
                    (words(chunk.basis[:, qs], chunk.bits[:, qs]), chunk.pos, chunk.block_index))

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

    def _add_pauli_vector(self, i, qs, chunk):
        codes = paulis_on(qs, self.setup.n_qubits)
        v = np.ones((len(chunk), len(codes)))
        for r in range(1, len(codes)):
            v[:, r] = chunk.values(codes[r])
        self.sums.add(f"pv{i}", chunk.onehot, v)
        if self.setup.multi:
            self.per_setting.add(f"pv{i}", chunk.pos, v)
        else:
            self.sums.add(f"pw{i}", chunk.onehot, np.sum(v * v, axis=1))

    def finish(self):
        setup = self.setup
        inv = setup.lam.inv_local(setup.n_qubits) if setup.local else None
        for i, qs in enumerate(self.qubits):
            if f"pv{i}" in self.per_setting:
                within = within_sums(self.per_setting[f"pv{i}"], setup.setting_block, setup.n_blocks)
                self.sums.add_blocks(f"pw{i}", within.sum(axis=1))
            if f"oh{i}" in self.per_setting:
                self.sums.add_blocks(f"hw{i}", outcome_within(self.per_setting[f"oh{i}"], setup.setting_block,
                                                              setup.n_blocks, len(qs), inv[qs]))
        # pair counts: block-by-block matrices, whose leave-one-out sums are not total - block
        self.pair_counts = {f"pc{i}": pair_count_blocks(parts, self.qubits[i], inv, setup.n_blocks, setup.multi)
                            for i, parts in self.pair_words.items()}

    def estimates(self, s):
        pairs = pair_count(s)
        inv = self.setup.lam.inv_local(self.setup.n_qubits) if self.setup.local else None
        purities = []
        for i, qs in enumerate(self.qubits):
            if f"hist{i}" in s:
                total = histogram_pair_sum(s[f"hist{i}"], [site_factor_matrix(inv[q]) for q in qs])
                purities.append((total - s[f"hw{i}"]) / pairs)
            elif f"pv{i}" in s:
                v = s[f"pv{i}"]
                purities.append((np.dot(v, v) - s[f"pw{i}"]) / (2 ** len(qs) * pairs))
        return {"purity": np.array(purities, dtype=float)} if purities else {}

    def errors(self, counts, method):
        full, err = jackknife(self.estimates, {**counts, **self.sums.data})
        if not self.pair_counts:
            return full, err
        full_pc, err_pc = pair_count_jackknife(self.pair_counts, counts, self.qubits)
        rest, rest_err = iter(full.get("purity", [])), iter(err.get("purity", []))
        merged = [(full_pc[i], err_pc[i]) if i in full_pc else (next(rest), next(rest_err))
                  for i in range(len(self.qubits))]
        return {"purity": np.array([m[0] for m in merged])}, {"purity": np.array([m[1] for m in merged])}

    def variables(self, full, err, data, coords):
        subsystems = self.setup.subsystems
        coords["subsystem"] = [s.label for s in subsystems]
        coords["subsystem_size"] = ("subsystem", [len(s.sites) for s in subsystems])
        purity, perr = np.asarray(full["purity"], float), np.asarray(err["purity"], float)
        put(data, "purity", ("subsystem",), purity, err)
        s2, s2_err = renyi2(purity, perr)
        data["renyi2"] = (("subsystem",), s2)
        data["renyi2_err"] = (("subsystem",), s2_err)


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
