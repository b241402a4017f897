"""Moments of the partial transpose and the p3-PPT entanglement test (docs/design.md section 4.6).

For two disjoint subsystems A and B, p_n = tr[(rho_AB^{T_A})^n]. If rho_AB is
PPT then p3 >= p2^2 (Cauchy-Schwarz on the eigenvalues of rho^{T_A}), so
p3 < p2^2 proves that rho_AB is entangled (Elben et al., PRL 125, 200501
(2020)). Local ensemble only: a snapshot's estimate of rho_AB is a tensor
product of 2 x 2 factors sigma_w = I/2 + (|v_w><v_w| - I/2)/lambda per qubit
(3|v_w><v_w| - I uncalibrated), w = 2 basis + bit; the partial transpose
transposes the factors of the qubits of A.

Estimators are U-statistics over snapshots from distinct settings. With
S = sum_i rho_i^{T_A}, S_s the sum over the shots of setting s,
N = sum_s n_s, N2 = sum_s n_s^2 and N3 = sum_s n_s^3:

    p2 = [tr S^2 - sum_s tr S_s^2] / (N^2 - N2)
    p3 = [tr S^3 - 3 tr(S sum_s S_s^2) + 2 sum_s tr S_s^3] / (N^3 - 3 N N2 + 2 N3)

(inclusion-exclusion over triples of settings with coinciding members).
The triple sum over the word histogram h with the per-qubit 6 x 6 x 6 tables
T_q(a, b, c) = tr(sigma_a sigma_b sigma_c) factorizes through the 2 x 2
matrix indices of the tables, sum_{abc} h_a h_b h_c prod_q T_q = tr S^3,
with S = sum_w h_w (x)_q sigma_{w_q}: a 2^k x 2^k matrix built from the
histogram axis by axis. Within a setting the bases are fixed, so S_s is
diagonal in the measured eigenbasis with entries
d_s(o) = sum_o' h_s(o') prod_q (1 + (-1)^(o_q + o'_q)/lambda_q)/2 (a relabelling
of outcomes on the Y-measured qubits of A for the transpose, which leaves the
traces unchanged); sum_s S_s^2 is the histogram of words weighted by d_s(o)^2
mapped to operators with the projectors |v_w><v_w|.
"""

from __future__ import annotations

import numpy as np

from manybody.errors import InputError
from manybody.estimation.accumulators.base import Accumulator, pair_count, put
from manybody.estimation.kernels import histogram_index, words
from manybody.estimation.setup import parse_subsystems, subsystem_of
from manybody.simulation.statevector import BASIS_ROTATIONS

#: largest |A u B| in qubits: histograms of 6^k words, operators of 2^k x 2^k
PT_MAX_QUBITS = 6


def parse_bipartitions(text: str, n_sites: int) -> list[tuple[str, tuple[int, ...], tuple[int, ...]]]:
    """'A|B' pairs separated by ';', each side written like a subsystem ('0-1|2-3', '0,2|1,3')."""
    out = []
    for part in (text or "").split(";"):
        label = part.strip()
        if not label:
            continue
        sides = label.split("|")
        if len(sides) != 2 or not all(s.strip() for s in sides):
            raise InputError(f"bipartitions {label!r}: expected two subsystems A|B such as '0-1|2-3'",
                             argument="bipartitions")
        a, b = (_one_subsystem(s.strip(), label, n_sites) for s in sides)
        out.append(bipartition_of(label, a, b, n_sites))
    return out


def _one_subsystem(side: str, label: str, n_sites: int) -> tuple[int, ...]:
    if side == "profile":
        raise InputError(f"bipartitions {label!r}: each side is a range a-b or a list a,b,c of sites",
                         argument="bipartitions")
    return parse_subsystems(side, n_sites, argument="bipartitions")[0].sites


def bipartition_of(label: str, sites_a, sites_b, n_sites: int):
    """A checked (label, sites_A, sites_B): sites on the lattice, A and B disjoint."""
    a = subsystem_of(label, sites_a, n_sites, "bipartitions").sites
    b = subsystem_of(label, sites_b, n_sites, "bipartitions").sites
    if not a or not b:
        raise InputError(f"bipartitions {label!r}: A and B need at least one site each", argument="bipartitions")
    common = sorted(set(a) & set(b))
    if common:
        raise InputError(f"bipartitions {label!r}: site {common[0]} is in both A and B", argument="bipartitions")
    return label, a, b


def bipartitions_of(value, n_sites: int):
    """A text of 'A|B' labels, or a sequence of such labels and (label, sites_A, sites_B) or (sites_A, sites_B)."""
    if value is None:
        return []
    if isinstance(value, str):
        return parse_bipartitions(value, n_sites)
    out = []
    for item in value:
        if isinstance(item, str):
            out.extend(parse_bipartitions(item, n_sites))
        elif len(item) == 3:
            out.append(bipartition_of(str(item[0]), item[1], item[2], n_sites))
        elif len(item) == 2:
            label = ",".join(map(str, item[0])) + "|" + ",".join(map(str, item[1]))
            out.append(bipartition_of(label, item[0], item[1], n_sites))
        else:
            raise InputError(f"bipartitions {item!r}: expected 'A|B' or (label, sites_A, sites_B)",
                             argument="bipartitions")
    return out


# ------------------------------------------------------------------ kernels
def site_projectors() -> np.ndarray:
    """|v_w><v_w| for the six words w = 2 basis + bit: (6, 2, 2), from the basis rotations R (v = R^dag|bit>)."""
    eye = np.eye(2)
    return np.array([BASIS_ROTATIONS[w // 2].conj().T @ np.outer(eye[w % 2], eye[w % 2]) @ BASIS_ROTATIONS[w // 2]
                     for w in range(6)])


def site_snapshot_operators(inv_lambda: float, transpose: bool) -> np.ndarray:
    """sigma_w = I/2 + (|v_w><v_w| - I/2)/lambda for the six words (6, 2, 2); transposed on A."""
    sigma = np.eye(2) / 2 + inv_lambda * (site_projectors() - np.eye(2) / 2)
    return sigma.transpose(0, 2, 1) if transpose else sigma


def histogram_operator(hist: np.ndarray, tables) -> np.ndarray:
    """sum_w h_w (x)_q tables_q[w_q] for a histogram over 6^k words: (2^k, 2^k), first qubit most significant."""
    k = len(tables)
    g = np.asarray(hist, dtype=complex).reshape((6,) * k)
    for table in tables:  # contract the leading word axis; its (row, column) pair goes last
        g = np.tensordot(g, table, axes=([0], [0]))
    g = g.reshape((2, 2) * k).transpose(list(range(0, 2 * k, 2)) + list(range(1, 2 * k, 2)))
    return g.reshape(2**k, 2**k)


def setting_diagonals(outcome_hist: np.ndarray, inv_lambda) -> np.ndarray:
    """d_s(o) = sum_o' h_s(o') prod_q (1 + (-1)^(o_q + o'_q)/lambda_q)/2: eigenvalues of S_s, (K, 2^k)."""
    k = len(inv_lambda)
    g = outcome_hist.reshape((-1,) + (2,) * k)
    for q, inv in enumerate(inv_lambda):
        f = np.array([[1 + inv, 1 - inv], [1 - inv, 1 + inv]]) / 2
        g = np.moveaxis(np.tensordot(f, g, axes=([1], [q + 1])), 0, q + 1)
    return g.reshape(len(outcome_hist), -1)


def triple_count(s: dict):
    """Ordered triples of snapshots from three distinct settings: N^3 - 3 N N2 + 2 N3."""
    return s["n"] ** 3 - 3 * s["n"] * s["n2"] + 2 * s["n3"]


# ------------------------------------------------------------------ accumulator
class PartialTransposeMoments(Accumulator):
    """p2, p3 of rho_AB^{T_A} for each requested bipartition, and the p3-PPT violation p2^2 - p3."""

    def __init__(self, setup, bipartitions):
        super().__init__(setup)
        if not setup.local:
            raise InputError("bipartitions: moments of the partial transpose need the local ensemble (random "
                             f"X/Y/Z bases); this shadow has the {setup.ensemble.kind} ensemble",
                             argument="bipartitions")
        self.bipartitions = bipartitions
        site = np.asarray(setup.qubit_site)
        inv = setup.lam.inv_local(setup.n_qubits)
        self.qubits, self.sigma, self.square, self.proj, self.powers = [], [], [], [], []
        for label, a, b in bipartitions:
            qa, qb = np.flatnonzero(np.isin(site, a)), np.flatnonzero(np.isin(site, b))
            qs = np.concatenate([qa, qb])
            if len(qs) > PT_MAX_QUBITS:
                raise InputError(f"bipartitions {label!r}: A and B together have {len(qs)} qubits; moments of the "
                                 f"partial transpose are computed for at most {PT_MAX_QUBITS}",
                                 argument="bipartitions")
            on_a = [q in set(qa.tolist()) for q in qs]
            self.qubits.append(qs)
            self.sigma.append([site_snapshot_operators(inv[q], t) for q, t in zip(qs, on_a)])
            self.square.append([m @ m for m in self.sigma[-1]])
            proj = site_projectors()
            self.proj.append([proj.transpose(0, 2, 1) if t else proj for t in on_a])
            # tr sigma^2 and tr sigma^3 of one snapshot (the same for every word)
            x = inv[qs]
            self.powers.append([np.prod((1 + x**2) / 2), np.prod(((1 + x) ** 3 + (1 - x) ** 3) / 8)])

    @classmethod
    def build(cls, setup, options):
        bipartitions = bipartitions_of(options.get("bipartitions"), setup.n_sites)
        return cls(setup, bipartitions) if bipartitions else None

    def add(self, chunk):
        for i, qs in enumerate(self.qubits):
            idx = histogram_index(words(chunk.basis[:, qs], chunk.bits[:, qs]))
            part = np.zeros((self.setup.n_blocks, 6 ** len(qs)))
            np.add.at(part, (chunk.block_index, idx), 1.0)
            self.sums.add_blocks(f"h{i}", part)
            if self.setup.multi:
                o = np.zeros((len(chunk), 2 ** len(qs)))
                o[np.arange(len(chunk)), chunk.bits[:, qs] @ (2 ** np.arange(len(qs) - 1, -1, -1))] = 1.0
                self.per_setting.add(f"o{i}", chunk.pos, o)

    def finish(self):
        """Per block: sum_s S_s^2 as a weighted word histogram, sum_s tr S_s^2, sum_s tr S_s^3, and N3."""
        setup = self.setup
        shots = np.asarray(setup.setting_shots, dtype=float)
        active = setup.setting_block >= 0
        self.sums.add_blocks("n3", np.bincount(setup.setting_block[active], weights=shots[active] ** 3,
                                               minlength=setup.n_blocks))
        if not setup.multi:
            return
        inv = setup.lam.inv_local(setup.n_qubits)
        for i, qs in enumerate(self.qubits):
            k = len(qs)
            hist = self.per_setting[f"o{i}"][active]
            blocks = setup.setting_block[active]
            d = setting_diagonals(hist, inv[qs])
            outcomes = (np.arange(2**k)[:, None] >> np.arange(k - 1, -1, -1)) & 1  # (2^k, k) bits of o
            # word index of (basis of s, o): base-6 digits 2 basis_q + o_q, split into the two parts
            idx = histogram_index(2 * setup.settings.basis[active][:, qs].astype(np.int64))[:, None] \
                + histogram_index(outcomes)[None, :]
            weighted = np.zeros((setup.n_blocks, 6**k))
            np.add.at(weighted, (np.broadcast_to(blocks[:, None], idx.shape), idx), d**2)
            self.sums.add_blocks(f"sq{i}", weighted)
            for power in (2, 3):
                self.sums.add_blocks(f"tr{power}_{i}", np.bincount(blocks, weights=np.sum(d**power, axis=1),
                                                                   minlength=setup.n_blocks))

    def estimates(self, s):
        pairs, triples = pair_count(s), triple_count(s)
        p2, p3 = [], []
        for i in range(len(self.qubits)):
            total = histogram_operator(s[f"h{i}"], self.sigma[i])
            if self.setup.multi:
                squares = histogram_operator(s[f"sq{i}"], self.proj[i])
                tr2, tr3 = s[f"tr2_{i}"], s[f"tr3_{i}"]
            else:
                squares = histogram_operator(s[f"h{i}"], self.square[i])
                tr2, tr3 = s["n"] * self.powers[i][0], s["n"] * self.powers[i][1]
            total_sq = total @ total
            p2.append(np.real(np.trace(total_sq)) - tr2)
            p3.append(np.real(np.sum(total_sq * total.T) - 3 * np.sum(squares * total.T)) + 2 * tr3)
        p2 = np.array(p2) / pairs
        p3 = np.where(triples > 0, np.array(p3) / np.where(triples > 0, triples, 1), np.nan)
        return {"pt_moment2": p2, "pt_moment3": p3, "ppt_violation": p2**2 - p3}

    def variables(self, full, err, data, coords):
        coords["bipartition"] = [b[0] for b in self.bipartitions]
        for name in ("pt_moment2", "pt_moment3", "ppt_violation"):
            put(data, name, ("bipartition",), full[name], err)
        with np.errstate(invalid="ignore", divide="ignore"):
            err_v = np.asarray(err["ppt_violation"], dtype=float)
            sig = np.where(err_v > 0, np.asarray(full["ppt_violation"], float) / np.where(err_v > 0, err_v, 1), np.nan)
        data["ppt_significance"] = (("bipartition",), sig)
