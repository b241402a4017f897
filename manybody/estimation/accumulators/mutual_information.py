"""The Renyi-2 mutual-information map I2(a:b) = S2(a) + S2(b) - S2(ab) of every site pair.

Local ensemble: every single-site and site-pair purity at once from the
Pauli-vector sums of the one-site columns — their per-block sums and Gram
matrix (3n columns), exactly the sums over all pairs of snapshots of the
one-hot (basis, outcome) word histogram (docs/design.md section 4) at a
quarter of its cost.
Circuit ensembles: two-site Pauli vectors from the one-site estimates
(exact where light cones do not overlap) and the explicit near pairs; with
several shots per setting, the pairs of shots within a setting are left out
through per-setting sums.
"""

from __future__ import annotations

import warnings

import numpy as np

from manybody.estimation.accumulators.base import Accumulator, pair_count
from manybody.estimation.errorbars import (
    bias_corrected,
    combination_weight,
    interval_halfwidth,
    jackknife_error,
    replicates,
)
from manybody.estimation.pair_sums import mi_purities, mi_purities_paulis, mi_purities_paulis_within, mi_within
from manybody.estimation.sums import within_sums

#: per-setting joint outcome counts are kept only while settings x (2n)^2 stays below this
MAX_JOINT_ENTRIES = 2e7


class MutualInformation(Accumulator):
    @classmethod
    def build(cls, setup, options):
        if not options.get("mutual_information", True) or not setup.spin_like:
            return None
        n = setup.n_qubits
        per_setting = setup.n_settings * ((2 if setup.local else 3) * n) ** 2  # per-setting two-site sums
        if setup.multi and per_setting > MAX_JOINT_ENTRIES:
            warnings.warn(f"no mutual-information map: with several shots per setting it keeps "
                          f"{per_setting:.3g} per-setting sums ({setup.n_settings} settings of {n} qubits), above "
                          f"the limit of {MAX_JOINT_ENTRIES:.0e}", RuntimeWarning, stacklevel=4)
            return None
        if setup.local:
            return LocalMutualInformation(setup)
        if options.get("correlations", True):
            return CircuitMutualInformation(setup)
        return None

    def estimates(self, s):
        """I2 itself, so that the jackknife sees the covariances of the three purities it is made of."""
        purity = self.pair_purities(s)
        if purity is None:
            return {}
        out = {"mutual_information": mutual_information(purity)}
        within = self.within_purities(s)
        if within is not None:
            out["mi_purity"], out["mi_purity_within"] = purity, within
        return out

    def within_purities(self, s):
        """Purities from pairs of shots of one setting (None unless several shots per setting)."""
        return None

    def errors(self, counts, method):
        """I2 from the variance-minimising mix of the two purity maps where both exist; bias-corrected I2."""
        full, loo = replicates(self.estimates, {**counts, **self.sums.data})
        if "mutual_information" not in full:
            return {}, {}
        mi, mi_reps = full["mutual_information"], loo["mutual_information"]
        if "mi_purity_within" in full:
            w = combination_weight(loo["mi_purity"], loo["mi_purity_within"])  # weight of the cross-setting map
            purity = w * full["mi_purity"] + (1 - w) * full["mi_purity_within"]
            mi = mutual_information(purity)
            mi_reps = np.array([mutual_information(w * a + (1 - w) * b)
                                for a, b in zip(loo["mi_purity"], loo["mi_purity_within"])])
        err = jackknife_error(mi_reps)
        full = {"mutual_information": bias_corrected(mi, mi_reps)}
        errors = {"mutual_information": err, "mutual_information:halfwidth": interval_halfwidth(mi_reps, err)}
        shells, index = distance_shells(self.setup)
        by_distance = np.array([shell_means(r, index, len(shells)) for r in mi_reps])
        full["mutual_information_distance"] = bias_corrected(shell_means(mi, index, len(shells)), by_distance)
        errors["mutual_information_distance"] = jackknife_error(by_distance)
        return full, errors

    def variables(self, full, err, data, coords):
        if "mutual_information" not in full:
            return
        n = self.setup.n_qubits
        coords.setdefault("site_a", np.arange(n))
        coords.setdefault("site_b", np.arange(n))
        mi, mi_err = np.array(full["mutual_information"], float), np.array(err["mutual_information"], float)
        mi[np.diag_indices(n)] = np.nan
        mi_err[np.diag_indices(n)] = np.nan
        data["mutual_information"] = (("site_a", "site_b"), mi)
        data["mutual_information_err"] = (("site_a", "site_b"), mi_err)
        half = np.asarray(err.get("mutual_information:halfwidth", 2 * mi_err), float)
        data["mutual_information_lo"] = (("site_a", "site_b"), mi - half)
        data["mutual_information_hi"] = (("site_a", "site_b"), mi + half)
        coords["distance"] = distance_shells(self.setup)[0]
        data["mutual_information_distance"] = (("distance",), np.asarray(full["mutual_information_distance"], float))
        data["mutual_information_distance_err"] = (("distance",),
                                                   np.asarray(err["mutual_information_distance"], float))


def distance_shells(setup):
    """Distinct distances between the sites (lattice positions; chain order without a model), and each pair's shell."""
    positions = (setup.model.lattice.positions if setup.model is not None
                 else np.column_stack([np.arange(setup.n_qubits), np.zeros(setup.n_qubits)]))
    dist = np.round(np.linalg.norm(positions[:, None, :] - positions[None, :, :], axis=2), 6)
    shells, index = np.unique(dist, return_inverse=True)
    return shells[1:], index.reshape(dist.shape) - 1  # shell -1: a site with itself


def shell_means(mi, index, n_shells):
    """Mean of I2 over the site pairs at each distance (NaN entries left out)."""
    ok = (index >= 0) & np.isfinite(mi)
    total = np.bincount(index[ok], weights=mi[ok], minlength=n_shells)
    count = np.bincount(index[ok], minlength=n_shells)
    with np.errstate(invalid="ignore", divide="ignore"):
        return total / count


def mutual_information(purity: np.ndarray) -> np.ndarray:
    """I2(a:b) = S2(a) + S2(b) - S2(ab) = ln(P_ab / (P_a P_b)) from single-site (diagonal) and pair purities.

    NaN where a purity estimate is not positive (too few snapshots for a logarithm).
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        log_p = np.log(np.where(purity > 0, purity, np.nan))
    single = np.diag(log_p)
    mi = log_p - single[:, None] - single[None, :]
    mi[np.diag_indices(len(mi))] = np.nan
    return mi


class LocalMutualInformation(MutualInformation):
    def add(self, chunk):
        n = self.setup.n_qubits
        f = chunk.columns  # (N, 3, n): float32 where exact
        self.sums.add("mi_mag", chunk.onehot, f)
        self.sums.add_grams("mi_corr", chunk.column_grams, 3 * n)
        if self.setup.multi:  # build() left out maps whose per-setting sums exceed MAX_JOINT_ENTRIES
            o2 = np.zeros((len(chunk), 2 * n))
            o2[np.arange(len(chunk))[:, None], 2 * np.arange(n) + chunk.bits] = 1.0
            step = max(1, int(4e6 // (2 * n) ** 2))  # bounded temporaries of shots x (2n)^2
            for start in range(0, len(chunk), step):
                rows = slice(start, start + step)
                self.per_setting.add("mi_joint", chunk.pos[rows], o2[rows, :, None] * o2[rows, None, :])

    def finish(self):
        if "mi_joint" in self.per_setting:
            setup = self.setup
            n = setup.n_qubits
            joint, inv = self.per_setting["mi_joint"], setup.lam.inv_local(n)
            self.sums.add_blocks("mi_within", mi_within(joint, setup.setting_block, setup.n_blocks, n, inv))
            # the within-setting kernel: per-site factors 1/2 +- inv^2/6 = (1 +- (inv/sqrt 3)^2)/2
            self.sums.add_blocks("mi_brydges", mi_within(joint, setup.setting_block, setup.n_blocks, n,
                                                         inv / np.sqrt(3)))

    def within_purities(self, s):
        if "mi_brydges" not in s:
            return None
        n = self.setup.n_qubits
        own = 0.5 + self.setup.lam.inv_local(n) ** 2 / 6  # the s = s' term per site
        pair_own = np.outer(own, own)
        pair_own[np.diag_indices(n)] = own
        return (s["mi_brydges"] - s["n"] * pair_own) / (s["n2"] - s["n"])

    def pair_purities(self, s):
        if self.setup.multi and "mi_within" not in s:
            return None  # no per-setting joint counts were added (no records)
        n = self.setup.n_qubits
        return mi_purities(s, n, self.setup.lam.inv_local(n), pair_count(s))


class CircuitMutualInformation(MutualInformation):
    """Two-site Pauli vectors; with several shots per setting, per-setting sums leave out pairs within a setting."""

    def add(self, chunk):
        f = chunk.columns
        flat = f.reshape(len(chunk), -1)
        self.sums.add("mag", chunk.onehot, f)
        self.sums.add_grams("corr", chunk.column_grams, flat.shape[1])
        near = chunk.near_values if self.setup.near_pairs else None
        if near is not None:
            self.sums.add("near", chunk.onehot, near)
        if self.setup.multi:
            self.per_setting.add("mag", chunk.pos, flat)
            step = max(1, int(4e6 // flat.shape[1] ** 2))  # bounded temporaries of shots x (3n)^2
            for start in range(0, len(chunk), step):
                rows = slice(start, start + step)
                self.per_setting.add("gram", chunk.pos[rows], flat[rows, :, None] * flat[rows, None, :])
            if near is not None:
                self.per_setting.add("near", chunk.pos, near)
            return
        self.sums.add_gram("corr_sq", chunk.runs, flat * flat)
        if near is not None:
            self.sums.add("near_sq", chunk.onehot, near**2)

    def finish(self):
        if not self.setup.multi:
            return
        setup = self.setup
        for name, key in (("mag", "mag_w"), ("gram", "corr_w"), ("near", "near_w")):
            if name in self.per_setting:
                values = self.per_setting[name]
                flat = values.reshape(len(values), -1)
                within = within_sums(flat, setup.setting_block, setup.n_blocks)
                self.sums.add_blocks(key, within.reshape((setup.n_blocks,) + values.shape[1:]))

    def pair_purities(self, s):
        n, near = self.setup.n_qubits, self.setup.near_pairs
        if self.setup.multi:
            return mi_purities_paulis_within(s, n, near, pair_count(s))
        return mi_purities_paulis(s, n, near, pair_count(s))
