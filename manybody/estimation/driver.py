"""From one shadow to the results dataset (INTERFACE.md names), with error bars.

One pass over the records in chunks; every quantity is accumulated as
partial sums per block of whole settings (setting position modulo B), and
the estimates are functions of those sums, so that the jackknife error bars
of :mod:`manybody.errorbars` cost only the per-block sums.

Unbiased products of means (connected correlations, <H>^2, purities) use
pairs of snapshots from different settings only: sum over such pairs =
(total)^2 - sum over settings of (setting total)^2 (DESIGN.md section 4).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import xarray as xr

from manybody import __version__
from manybody.errors import InputError
from manybody.estimation.errorbars import METHODS, analytic, jackknife, median_of_means
from manybody.estimation.kernels import (
    histogram_pair_sum,
    local_columns,
    local_products,
    site_factor_matrix,
    words,
)
from manybody.estimation.purity import (
    mi_purities,
    mi_purities_paulis,
    mi_within,
    outcome_within,
    pair_count_blocks,
    pair_count_jackknife,
    purity_chunk,
)
from manybody.measure.paulis import BASIS_PAULI, pauli_string_codes
from manybody.measure.propagation import snapshot_values

AXES = ("X", "Y", "Z")
#: one-qubit Pauli code -> axis index
CODE_AXIS = {1: 0, 3: 1, 2: 2}
MAX_SQUARED_TERMS = 20000


@dataclass(frozen=True)
class Subsystem:
    """A subsystem by its label as written (e.g. "0-3" or "0,2,5") and its sites."""

    label: str
    sites: tuple[int, ...]


def parse_subsystems(text: str | None, n_sites: int) -> list[Subsystem]:
    """'a-b' ranges or 'a,b,c' lists separated by ';' (INTERFACE.md); 'profile' = 0;0-1;...;0-(n/2-1)."""
    if not text:
        return []
    if text.strip() == "profile":  # the entropy profile: intervals 0..k-1 up to half the system
        text = ";".join(f"0-{k}" if k else "0" for k in range(max(n_sites // 2, 1)))
    out = []
    for part in text.split(";"):
        label = part.strip()
        if not label:
            continue
        try:
            if "-" in label and "," not in label:
                a, b = (int(x) for x in label.split("-"))
                if b < a:
                    raise ValueError
                sites = tuple(range(a, b + 1))
            else:
                sites = tuple(int(x) for x in label.split(","))
        except ValueError:
            raise InputError(f"--subsystems {label!r}: expected an inclusive range a-b or a list a,b,c of sites") \
                from None
        if len(set(sites)) != len(sites):
            raise InputError(f"--subsystems {label!r}: a site is repeated")
        bad = [s for s in sites if not 0 <= s < n_sites]
        if bad:
            raise InputError(f"--subsystems {label!r}: site {bad[0]} is outside the lattice (sites 0 to {n_sites - 1})")
        out.append(Subsystem(label, sites))
    return out


class Eigenvalues:
    """lambda_P of the shadow's ensemble, or calibrated (robust) values when given."""

    def __init__(self, ensemble, calibrated=None):
        self.ensemble = ensemble
        self.calibrated = calibrated  # a manybody.calibration.Calibration, or None

    def of(self, codes) -> float:
        support = np.asarray(codes) != 0
        source = self.calibrated if self.calibrated is not None else self.ensemble
        return source.eigenvalue(support)

    def inv_local(self, n: int) -> np.ndarray:
        if self.calibrated is not None:
            return self.calibrated.inv_local
        return np.full(n, 3.0)


def _term_table(ham, qubit_site, n_sites):
    """Codes, coefficients and energy-density weights of a Pauli sum."""
    op = ham.simplify()
    codes = pauli_string_codes(op.x_bits, op.z_bits)
    coeffs = op.real_if_close().real
    density = np.zeros((len(op), n_sites))
    anchor = op.anchor_bits
    for t in range(len(op)):
        sites = np.unique(qubit_site[np.flatnonzero(anchor[t])])
        if len(sites) == 0:
            sites = np.arange(n_sites)  # a constant is shared by all sites
        density[t, sites] = coeffs[t] / len(sites)
    return codes, coeffs, density


class _Sums:
    """Per-block partial sums: add(name, block_onehot, values (N, ...)) and add_blocks(name, (B, ...))."""

    def __init__(self, n_blocks: int):
        self.n_blocks = n_blocks
        self.data: dict[str, np.ndarray] = {}

    def add(self, name, onehot, values):
        values = np.asarray(values, dtype=float)
        flat = values.reshape(len(values), -1)
        part = (onehot.T @ flat).reshape((self.n_blocks,) + values.shape[1:])
        self.add_blocks(name, part)

    def add_blocks(self, name, part):
        if name in self.data:
            self.data[name] += part
        else:
            self.data[name] = np.array(part, dtype=float)

    def add_gram(self, name, runs, values):
        """Per block, values[run]^T values[run] over the rows of that block (runs: (block, slice) pairs)."""
        dim = values.shape[1]
        if name not in self.data:
            self.data[name] = np.zeros((self.n_blocks, dim, dim))
        acc = self.data[name]
        for b, rows in runs:
            part = values[rows]
            acc[b] += part.T @ part  # float32 chunks: exact for integer-valued entries below 2^24


def _block_runs(blocks):
    """(block, rows) pairs: contiguous slices when records come in setting order, index arrays otherwise."""
    cuts = np.flatnonzero(np.diff(blocks)) + 1
    starts = np.concatenate([[0], cuts])
    stops = np.concatenate([cuts, [len(blocks)]])
    if len(starts) <= 2 * len(np.unique(blocks)):
        return [(int(blocks[a]), slice(a, b)) for a, b in zip(starts, stops)]
    return [(int(b), np.flatnonzero(blocks == b)) for b in np.unique(blocks)]


def _within(per_setting: np.ndarray, setting_block: np.ndarray, n_blocks: int, outer: bool = False):
    """sum over settings of each block of S_s S_s (elementwise) or S_s S_s^T (outer)."""
    out = np.zeros((n_blocks,) + ((per_setting.shape[1],) * 2 if outer else per_setting.shape[1:]))
    for b in range(n_blocks):
        sel = per_setting[setting_block == b]
        out[b] = sel.T @ sel if outer else np.sum(sel * sel, axis=0)
    return out


def estimate(shadow, model=None, subsystems=(), calibration=None, n_blocks: int = 20, method: str = "jackknife",
             correlations: bool = True, mutual_information: bool = True, chunk: int = 8192, progress=None):
    """Estimates with error bars of everything the shadow and model allow, as an xarray Dataset."""
    if method not in METHODS:
        raise InputError(f"unknown error-bar method {method!r}; allowed: {', '.join(METHODS)}")
    ens, st = shadow.ensemble, shadow.settings
    n = ens.n_qubits
    if model is not None and model.n_qubits != n:
        raise InputError(f"the model has {model.n_qubits} qubits but the shadow has {n}")
    qubit_site = np.asarray(shadow.qubit_site if model is None else model.qubit_site)
    n_sites = int(qubit_site.max()) + 1
    spin_like = n_sites == n
    lam = Eigenvalues(ens, calibration)
    local = ens.kind == "local" or (ens.kind == "shallow" and ens.depth == 0)

    # snapshots per setting, blocks of whole settings
    k = len(st)
    per_setting = np.zeros(k)
    for pos, _, counts in shadow.chunks(chunk):
        per_setting += np.bincount(pos, weights=counts, minlength=k)
    active = np.flatnonzero(per_setting)
    if len(active) < 2:
        raise InputError("the shadow needs snapshots from at least two settings")
    n_blocks = int(min(n_blocks, len(active)))
    setting_block = np.full(k, -1)
    setting_block[active] = np.arange(len(active)) * n_blocks // len(active)  # contiguous runs of settings
    multi = bool(per_setting.max() > 1)
    sums = _Sums(n_blocks)
    sums.add_blocks("n", np.bincount(setting_block[active], weights=per_setting[active], minlength=n_blocks))
    sums.add_blocks("n2", np.bincount(setting_block[active], weights=per_setting[active] ** 2, minlength=n_blocks))

    # what to estimate
    terms = squared = None
    if model is not None:
        codes, coeffs, density = _term_table(model.hamiltonian, qubit_site, n_sites)
        lam_terms = np.array([lam.of(c) for c in codes])
        terms = (codes, coeffs, density, lam_terms)
        h2 = (model.hamiltonian * model.hamiltonian).combined(atol=1e-12)
        limit = MAX_SQUARED_TERMS if local else MAX_SQUARED_TERMS // 10
        squared = None
        if len(h2) <= limit:
            c2 = pauli_string_codes(h2.x_bits, h2.z_bits)
            squared = (c2, h2.real_if_close().real, np.array([lam.of(c) for c in c2]))
    qubits_of = [np.flatnonzero(np.isin(qubit_site, sub.sites)) for sub in subsystems]
    near_pairs = _near_pairs(ens, n) if correlations and not local else []
    per_set = {}  # per-setting sums for within-setting corrections (multi-shot only)

    def per_setting_add(name, pos, values):
        values = np.asarray(values, dtype=float)
        if name not in per_set:
            per_set[name] = np.zeros((k,) + values.shape[1:])
        np.add.at(per_set[name], pos, values)

    chunks = shadow.chunks(chunk)
    if progress:
        chunks = progress(chunks)
    pair_words = [[] for _ in subsystems]  # for pair counts of large local subsystems
    for pos, bits, counts in chunks:
        if counts.max() != 1 or counts.min() != 1:
            pos, bits = np.repeat(pos, counts, axis=0), np.repeat(bits, counts, axis=0)
        if len(pos) == 0:
            continue
        blocks = setting_block[pos]
        onehot = np.zeros((len(pos), n_blocks))
        onehot[np.arange(len(pos)), blocks] = 1.0
        basis = st.basis[pos] if st.basis is not None else None
        used, where = np.unique(pos, return_inverse=True)
        sub = st.take(used)  # circuits are propagated for the settings of this chunk only

        # one-site estimator columns f (N, 3, n)
        # float32 columns are exact for +-3 and their sums below 2^24 (uncalibrated local ensemble)
        exact32 = local and calibration is None and len(pos) * 9 < 2**24
        if local:
            f = local_columns(basis, bits, lam.inv_local(n), np.float32 if exact32 else np.float64)
        else:
            f = np.empty((len(pos), 3, n))
            for a in range(3):
                for q in range(n):
                    c = np.zeros(n, dtype=np.uint8)
                    c[q] = BASIS_PAULI[a]
                    f[:, a, q] = snapshot_values(c, ens, sub, where, bits) / lam.of(c)
        sums.add("mag", onehot, f)
        if multi and correlations:
            per_setting_add("mag", pos, f.reshape(len(pos), -1))
        runs = _block_runs(blocks)
        if correlations:
            sums.add_gram("corr", runs, f.reshape(len(pos), -1))
            if near_pairs:
                vals = np.empty((len(pos), len(near_pairs), 3, 3))
                for j, (qa, qb) in enumerate(near_pairs):
                    for a in range(3):
                        for b2 in range(3):
                            c = np.zeros(n, dtype=np.uint8)
                            c[qa], c[qb] = BASIS_PAULI[a], BASIS_PAULI[b2]
                            vals[:, j, a, b2] = snapshot_values(c, ens, sub, where, bits) / lam.of(c)
                sums.add("near", onehot, vals)

        # energy, density, H^2
        if terms is not None:
            values = _term_values(terms[0], terms[3], f, local, ens, sub, where, bits)
            energy = values @ terms[1]
            sums.add("energy", onehot, energy)
            sums.add("density", onehot, values @ terms[2])
            if multi:
                per_setting_add("energy", pos, energy[:, None])
            else:
                sums.add("energy_within", onehot, energy**2)
            sums.add("energy_sq_snap", onehot, energy**2)
            if squared is not None:
                v2 = _term_values(squared[0], squared[2], f, local, ens, sub, where, bits)
                sums.add("h2", onehot, v2 @ squared[1])

        # purities of the chosen subsystems
        for i, qs in enumerate(qubits_of):
            purity_chunk(i, qs, local, lam, ens, sub, where, pos, bits, basis, onehot, sums, multi,
                          per_setting_add, pair_words)
        # mutual information map (local: one matrix product of one-hot words)
        if mutual_information and local and spin_like:
            w = words(basis, bits)
            oh = np.zeros((len(pos), 6 * n), dtype=np.float32)  # counts: exact in float32 below 2^24
            oh[np.arange(len(pos))[:, None], 6 * np.arange(n) + w] = 1.0
            sums.add_gram("mi_hist", runs, oh)
            if multi:
                o2 = np.zeros((len(pos), 2 * n))
                o2[np.arange(len(pos))[:, None], 2 * np.arange(n) + bits] = 1.0
                if k * (2 * n) ** 2 <= 2e7:
                    per_setting_add("mi_joint", pos, o2[:, :, None] * o2[:, None, :])
        elif mutual_information and spin_like and correlations and not multi:
            # circuit ensembles: two-site Pauli vectors from one-site columns (exact where
            # light cones do not overlap) and the explicit near pairs; their squares give the i = j terms
            flat = f.reshape(len(pos), -1)
            sums.add_gram("corr_sq", runs, flat * flat)
            if near_pairs:
                sums.add("near_sq", onehot, vals**2)

    # within-setting sums, now that every setting is complete
    if multi:
        if "mag" in per_set:
            sums.add_blocks("mag_within", _within(per_set["mag"], setting_block, n_blocks, outer=True))
        if "energy" in per_set:
            sums.add_blocks("energy_within", _within(per_set["energy"], setting_block, n_blocks)[:, 0])
        for i, qs in enumerate(qubits_of):
            name = f"pv{i}"
            if name in per_set:
                sums.add_blocks(f"pw{i}", _within(per_set[name], setting_block, n_blocks).sum(axis=1))
            name = f"oh{i}"
            if name in per_set:
                sums.add_blocks(f"hw{i}", outcome_within(per_set[name], setting_block, n_blocks, len(qs),
                                                          lam.inv_local(n)[qs]))
        if "mi_joint" in per_set:
            sums.add_blocks("mi_within", mi_within(per_set["mi_joint"], setting_block, n_blocks, n,
                                                    lam.inv_local(n)))
    for i, qs in enumerate(qubits_of):
        if pair_words[i]:
            sums.add_blocks(f"pc{i}", pair_count_blocks(pair_words[i], qs, lam.inv_local(n), n_blocks, multi))

    return _dataset(shadow, model, sums, subsystems, qubits_of, n, n_sites, local, near_pairs, method,
                    _reciprocal_points(model) if correlations and spin_like else None,
                    correlations, mutual_information and spin_like and ("mi_hist" in sums.data or "corr_sq" in sums.data),
                    squared is not None, multi, lam, terms is not None,
                    calibration is not None)


def _near_pairs(ens, n):
    """Qubit pairs whose single-site light cones overlap (global: every pair)."""
    if ens.kind == "global":
        return [(a, b) for a in range(n) for b in range(a + 1, n)]
    from manybody.measure.eigenvalues import light_cone

    cones = [set(light_cone([q], ens.layers)[0]) for q in range(n)]
    return [(a, b) for a in range(n) for b in range(a + 1, n) if cones[a] & cones[b]]


def _term_values(codes, lam_terms, f, local, ens, st, pos, bits):
    """Per-snapshot single-snapshot estimates of every term: (N, T)."""
    out = np.empty((len(pos), len(codes)))
    weight = np.count_nonzero(codes, axis=1)
    if local:
        for w in np.unique(weight):
            sel = np.flatnonzero(weight == w)
            if w == 0:
                out[:, sel] = 1.0
                continue
            sup = np.array([np.flatnonzero(codes[t]) for t in sel])
            axes = np.vectorize(CODE_AXIS.get)(np.take_along_axis(codes[sel], sup, axis=1))
            out[:, sel] = local_products(f, sup, axes)
        return out
    for t, c in enumerate(codes):
        out[:, t] = 1.0 if weight[t] == 0 else snapshot_values(c, ens, st, pos, bits) / lam_terms[t]
    return out


def _reciprocal_points(model):
    """q = sum_i (m_i / L_i) b_i on a periodic lattice (a_i . b_j = 2 pi delta_ij) and the phases e^(i q . r)."""
    if model is None or model.lattice.kind == "graph" or any(b != "periodic" for b in model.lattice.boundary):
        return None
    lat = model.lattice
    vecs = lat.vectors
    recip = 2 * np.pi * np.linalg.pinv(vecs).T  # rows b_i with a_i . b_j = 2 pi delta_ij
    grids = np.meshgrid(*[np.arange(s) / s for s in lat.size], indexing="ij")
    q = np.stack([g.ravel() for g in grids], axis=1) @ recip
    return q, np.exp(1j * q @ lat.positions.T)


def structure_factor(corr: np.ndarray, phase: np.ndarray) -> np.ndarray:
    """S(q) = (1/n) sum_ab e^(i q.(r_a - r_b)) <s^x_a s^x_b> per axis x, with <s^x_a s^x_a> = 1.

    ``corr`` (3, 3, n, n) with NaN on the diagonal, ``phase`` (n_q, n) = e^(i q.r).
    """
    n = corr.shape[-1]
    same_axis = np.stack([np.nan_to_num(corr[a, a]) + np.eye(n) for a in range(3)])
    return np.real(np.einsum("qa,xab,qb->xq", phase, same_axis, phase.conj())) / n


def _dataset(shadow, model, sums, subsystems, qubits_of, n, n_sites, local, near_pairs, method, reciprocal,
             correlations, mutual_information, has_squared, multi, lam, has_energy, calibrated):
    blocks = dict(sums.data)
    pair_count = {name: blocks.pop(name) for name in list(blocks) if name.startswith("pc")}
    factors_inv = lam.inv_local(n) if local else None

    def pairs_of(s):
        return s["n"] ** 2 - s["n2"]

    def estimator(s):
        out = {}
        count = s["n"]
        pairs = pairs_of(s)
        if "mag" in s:
            mag = s["mag"] / count
            out["magnetization"] = mag
            if correlations:
                corr = (s["corr"] / count).reshape(3, n, 3, n)
                if "near" in s:
                    near = s["near"] / count
                    for j, (a, b) in enumerate(near_pairs):
                        corr[:, a, :, b] = near[j]
                        corr[:, b, :, a] = near[j].T
                corr = corr.transpose(0, 2, 1, 3).copy()
                for q in range(n):
                    corr[:, :, q, q] = np.nan
                out["correlation"] = corr
                total = s["mag"].reshape(-1)
                # one shot per setting: the within-setting sum is the diagonal sum, i.e. "corr"
                prod = (np.outer(total, total) - s.get("mag_within", s["corr"])) / pairs
                out["connected_correlation"] = corr - prod.reshape(3, n, 3, n).transpose(0, 2, 1, 3)
                if reciprocal is not None:
                    out["structure_factor"] = structure_factor(corr, reciprocal[1])
        if "energy" in s:
            out["energy"] = s["energy"] / count
            out["energy_density"] = s["density"] / count
            if "h2" in s:
                mean_sq = (s["energy"] ** 2 - s["energy_within"]) / pairs
                out["energy_variance"] = s["h2"] / count - mean_sq
        purities = []
        for i, qs in enumerate(qubits_of):
            kq = len(qs)
            if f"hist{i}" in s:
                factors = [site_factor_matrix(factors_inv[q]) for q in qs]
                total = histogram_pair_sum(s[f"hist{i}"], factors)
                purities.append((total - s[f"hw{i}"]) / pairs)
            elif f"pv{i}" in s:
                v = s[f"pv{i}"]
                purities.append((np.dot(v, v) - s[f"pw{i}"]) / (2**kq * pairs))
            elif f"pc{i}" in s:
                purities.append(s[f"pc{i}"] / pairs)
        if purities:
            out["purity"] = np.array(purities, dtype=float)
        if mutual_information and "mi_hist" in s and (not multi or "mi_within" in s):
            out["mi_purity"] = mi_purities(s, n, factors_inv, pairs, multi)
        elif mutual_information and "corr_sq" in s:
            out["mi_purity"] = mi_purities_paulis(s, n, near_pairs, pairs)
        return out

    # block sums for the pair-count purities: the leave-one-out sum is not total - block,
    # so they are evaluated separately and merged.
    full, err = jackknife(estimator, blocks)
    if pair_count:
        full_pc, err_pc = pair_count_jackknife(pair_count, blocks, qubits_of)
        if full_pc:
            order = [i for i in range(len(qubits_of))]
            purity = full.get("purity", np.array([]))
            perr = err.get("purity", np.array([]))
            merged, merged_err, j = [], [], 0
            for i in order:
                if i in full_pc:
                    merged.append(full_pc[i])
                    merged_err.append(err_pc[i])
                else:
                    merged.append(purity[j])
                    merged_err.append(perr[j])
                    j += 1
            full["purity"], err["purity"] = np.array(merged), np.array(merged_err)
    if method != "jackknife":
        _plain_mean_errors(method, blocks, full, err, n)
    return _to_dataset(shadow, model, full, err, subsystems, n, n_sites, method, multi, calibrated, blocks,
                       reciprocal)


def _plain_mean_errors(method, blocks, full, err, n):
    """Replace jackknife errors of plain means by median-of-means or analytic errors."""
    count = blocks["n"]
    for name, key in (("magnetization", "mag"), ("energy", "energy"), ("energy_density", "density")):
        if key not in blocks or name not in full:
            continue
        if method == "median-of-means":
            full[name], err[name] = median_of_means(blocks[key], count)
        elif method == "analytic" and name == "energy":
            full[name], err[name] = analytic(blocks[key].sum(0), blocks["energy_sq_snap"].sum(0), count.sum())


def _to_dataset(shadow, model, full, err, subsystems, n, n_sites, method, multi, calibrated, blocks,
                reciprocal=None):
    coords = {"axis": list(AXES), "axis_a": list(AXES), "axis_b": list(AXES)}
    if model is not None:
        pos = model.lattice.positions
    else:
        pos = np.column_stack([np.arange(n_sites), np.zeros(n_sites)])
    coords["site"] = np.arange(n_sites)
    coords["x"] = ("site", pos[:, 0])
    coords["y"] = ("site", pos[:, 1])
    data = {}

    def put(name, dims, value):
        data[name] = (dims, np.asarray(value, dtype=float))
        data[name + "_err"] = (dims, np.asarray(err.get(name, np.full(np.shape(value), np.nan)), dtype=float))

    if "energy" in full:
        put("energy", (), full["energy"])
        put("energy_density", ("site",), full["energy_density"])
        if "energy_variance" in full:
            put("energy_variance", (), full["energy_variance"])
    spin_like = n == n_sites
    if "magnetization" in full and spin_like:
        put("magnetization", ("axis", "site"), full["magnetization"])
    if "correlation" in full and spin_like:
        coords["site_a"] = np.arange(n)
        coords["site_b"] = np.arange(n)
        put("correlation", ("axis_a", "axis_b", "site_a", "site_b"), full["correlation"])
        put("connected_correlation", ("axis_a", "axis_b", "site_a", "site_b"), full["connected_correlation"])
    if "structure_factor" in full:
        coords["q"] = np.arange(len(reciprocal[0]))
        coords["qx"] = ("q", reciprocal[0][:, 0])
        coords["qy"] = ("q", reciprocal[0][:, 1])
        put("structure_factor", ("axis", "q"), full["structure_factor"])
    if "purity" in full and subsystems:
        coords["subsystem"] = [s.label for s in subsystems]
        coords["subsystem_size"] = ("subsystem", [len(s.sites) for s in subsystems])
        purity, perr = np.asarray(full["purity"], float), np.asarray(err["purity"], float)
        put("purity", ("subsystem",), purity)
        s2, s2_err = _renyi(purity, perr)
        data["renyi2"] = (("subsystem",), s2)
        data["renyi2_err"] = (("subsystem",), s2_err)
    if "mi_purity" in full:
        coords.setdefault("site_a", np.arange(n))
        coords.setdefault("site_b", np.arange(n))
        p = full["mi_purity"]
        pe = err["mi_purity"]
        single = np.diag(p)
        with np.errstate(invalid="ignore", divide="ignore"):
            s_single = -np.log(single)
            mi = s_single[:, None] + s_single[None, :] + np.log(p)
            # delta method, terms treated as independent (a conservative sum in quadrature)
            se_single = np.diag(pe) / single
            mi_err = np.sqrt(se_single[:, None] ** 2 + se_single[None, :] ** 2 + (pe / p) ** 2)
        mi[np.diag_indices(n)] = np.nan
        mi_err[np.diag_indices(n)] = np.nan
        data["mutual_information"] = (("site_a", "site_b"), mi)
        data["mutual_information_err"] = (("site_a", "site_b"), mi_err)
    ens = shadow.ensemble
    attrs = {"n_snapshots": int(blocks["n"].sum()), "n_settings": int(len(shadow.settings)),
             "ensemble": ens.kind, "depth": int(ens.depth), "error_method": method,
             "error_blocks": int(len(blocks["n"])), "calibrated": int(calibrated),
             "several_shots_per_setting": int(multi), "tool_version": __version__,
             "source": shadow.source, "label": str(shadow.label)}
    return xr.Dataset(data, coords=coords, attrs=attrs)


def _renyi(purity, perr):
    """S2 = -ln P with the delta-method error; NaN with a warning when P <= 0."""
    bad = ~(purity > 0)
    if bad.any():
        warnings.warn(f"{int(bad.sum())} purity estimate(s) <= 0: their Renyi-2 entropy is NaN "
                      "(too few snapshots for this subsystem size)", RuntimeWarning, stacklevel=3)
    with np.errstate(invalid="ignore", divide="ignore"):
        s2 = np.where(bad, np.nan, -np.log(np.where(bad, 1.0, purity)))
        s2_err = np.where(bad, np.nan, perr / np.where(bad, 1.0, purity))
    return s2, s2_err
