"""Budget planning (docs/design.md section 6): snapshots needed per depth for a target error.

Per snapshot the estimator of a Pauli P has variance 1/lambda_P - <P>^2 for
these Clifford ensembles. Without knowing the state the planner uses the
worst cases:

- a single Pauli (one-site, correlations): 1/lambda_P;
- a Pauli sum (energy, energy per site): (sum_P |c_P| / sqrt(lambda_P))^2;
- a purity of k sites, a U-statistic of order two (Hoeffding, Ann. Math. Stat.
  19, 293 (1948)): Var ~ 4 V1 / N + 2 V2 / N^2 with
  V1 = 4^-k sum_P 1/lambda_P and V2 = 4^-k sum_P 1/lambda_P^2 over the Paulis on A.

With a pilot shadow the estimated <P> replace the worst cases: a single
Pauli gets 1/lambda_P - <P>^2; the energy gets, for the local ensemble, the
exact sum over pairs of terms sum c_P c_Q 3^|P n Q| <PQ> - <H>^2 (terms that
agree where they overlap); for circuit ensembles the same sum with the joint
visibility Pr(P and Q both Z-type) averaged over 20000 random settings.
The number of snapshots for error eps is N = variance / eps^2.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from hamiltonians.pauli import PauliExpansion
from manybody.measure.ensembles import LocalEnsemble, ShallowEnsemble
from manybody.measure.paulis import pauli_string_codes, paulis_on
from manybody.measure.prepare import coupling_of

#: random settings over which the joint visibility of two terms is averaged
COVARIANCE_SETTINGS = 20000


def _ensemble(model, depth: int):
    if depth == 0:
        return LocalEnsemble(model.n_qubits)
    return ShallowEnsemble(model.n_qubits, depth, coupling_of(model))


def _codes(op: PauliExpansion) -> np.ndarray:
    return pauli_string_codes(op.x_bits, op.z_bits)


def energy_variance_bound(op: PauliExpansion, ens) -> float:
    codes = _codes(op)
    lam = np.array([ens.eigenvalue(c != 0) for c in codes])
    return float(np.sum(np.abs(op.coeffs) / np.sqrt(lam)) ** 2)


def energy_variance_with_expectations(op: PauliExpansion, ens, expectation) -> float:
    """Per-snapshot variance of sum c_P o_P given <P> for the needed Paulis (``expectation(op) -> array``)."""
    codes = _codes(op)
    coeffs = op.coeffs.real
    mean = float(coeffs @ expectation(op))
    if ens.kind == "local" or ens.depth == 0:
        # E[o_P o_Q] = 3^|supp P n supp Q| <PQ> when P and Q agree where they overlap, else 0:
        # each shared site must be measured in its letter (1/3) and gives 3^2
        # (Huang, Kueng, Preskill, Nat. Phys. 16, 1050 (2020), local shadow norm)
        x, z = op.x_bits, op.z_bits
        sup = x | z
        both = sup[:, None, :] & sup[None, :, :]
        agree = np.all(~both | ((x[:, None] == x[None]) & (z[:, None] == z[None])), axis=2)
        i, j = np.nonzero(agree)
        shared = np.count_nonzero(sup[i] & sup[j], axis=1)
        products = PauliExpansion(op.n_qubits, op.x[i] ^ op.x[j], op.z[i] ^ op.z[j], np.ones(len(i)))
        total = float(np.sum(coeffs[i] * coeffs[j] * 3.0**shared * expectation(products)))
        return max(total - mean**2, 0.0)
    # circuit ensembles: E[o_P o_Q] = s <R> J(P, Q) / (lambda_P lambda_Q) for commuting P, Q with
    # PQ = s R, J = Pr_U(U P U^dag and U Q U^dag both Z-type), estimated over random settings
    from hamiltonians.pauli import product_phase
    from manybody.measure.propagation import setting_factors

    lam = np.array([ens.eigenvalue(c != 0) for c in codes])
    settings = ens.draw(COVARIANCE_SETTINGS, np.random.default_rng(12345))
    visible = np.stack([setting_factors(c, ens, settings)[1] != 0 for c in codes], axis=1).astype(float)
    joint = visible.T @ visible / len(settings)
    i, j = np.nonzero(joint)
    x3, z3, k = product_phase(op.x[i], op.z[i], op.x[j], op.z[j])
    sign = np.where(k % 4 == 0, 1.0, -1.0)  # visible pairs commute: PQ = +-R
    expect_r = expectation(PauliExpansion(op.n_qubits, x3, z3, np.ones(len(i))))
    total = float(np.sum(coeffs[i] * coeffs[j] * sign * expect_r * joint[i, j] / (lam[i] * lam[j])))
    return max(total - mean**2, 0.0)


def pilot_expectations(shadow):
    """<P> estimated from a pilot shadow: a callable PauliExpansion -> array, for the planner."""
    from manybody.measure.propagation import snapshot_values

    positions, bits = shadow.snapshots()
    ens, settings = shadow.ensemble, shadow.settings

    def expectation(op: PauliExpansion) -> np.ndarray:
        out = np.empty(len(op))
        for t, c in enumerate(_codes(op)):
            if not c.any():
                out[t] = 1.0
                continue
            out[t] = snapshot_values(c, ens, settings, positions, bits).mean() / ens.eigenvalue(c != 0)
        return np.clip(out, -1, 1)

    return expectation


def purity_snapshots(qubits, ens, eps: float) -> float:
    """N with 4 V1/N + 2 V2/N^2 = eps^2 (worst-case V1, V2 of the purity U-statistic)."""
    k = len(qubits)
    codes = paulis_on(qubits, ens.n_qubits)[1:]
    inv = np.array([1 / ens.eigenvalue(c != 0) for c in codes])
    v1 = (1 + inv.sum()) / 4**k
    v2 = (1 + (inv**2).sum()) / 4**k
    return float((4 * v1 + np.sqrt(16 * v1**2 + 8 * eps**2 * v2)) / (2 * eps**2))


def plan(model, eps: float, depths=(0, 1, 2, 3, 4), distance: int = 1, subsystems=(), expectation=None,
         shots: int = 1) -> xr.Dataset:
    """Snapshots needed at each depth for energy, energy per site, correlations up to ``distance``, purities.

    ``expectation`` (optional, from a pilot shadow) maps a PauliExpansion to the
    estimated <P> of its strings.
    """
    lat, ham = model.lattice, model.hamiltonian.combined(atol=1e-12)
    ham = PauliExpansion(ham.n_qubits, ham.x, ham.z, ham.coeffs.real)
    n = model.n_qubits
    non_identity = ham.weights > 0
    ham_terms = PauliExpansion(n, ham.x[non_identity], ham.z[non_identity], ham.coeffs[non_identity])
    # correlation Paulis: every axis pair on qubit pairs within the distance (graph distance on the lattice)
    import networkx as nx

    graph = nx.Graph(lat.bonds.tolist())
    graph.add_nodes_from(range(lat.n_sites))
    pairs = [(a, b) for a, dist in nx.all_pairs_shortest_path_length(graph, cutoff=distance)
             for b, d in dist.items() if 0 < d <= distance and a < b] if n == lat.n_sites else []
    rows = {"energy": [], "energy_density": [], "correlation": [], "purity": []}
    for d in depths:
        ens = _ensemble(model, d)
        if expectation is None:
            var_e = energy_variance_bound(ham_terms, ens)
        else:
            var_e = energy_variance_with_expectations(ham_terms, ens, expectation)
        rows["energy"].append(var_e / eps**2)
        # energy per site: the worst site, terms split over their anchors
        per_site = []
        for site in range(lat.n_sites):
            qubits = np.flatnonzero(model.qubit_site == site)
            sel = ham_terms.support[:, qubits].any(axis=1)
            if sel.any():
                part = PauliExpansion(n, ham_terms.x[sel], ham_terms.z[sel],
                                      ham_terms.coeffs[sel] / ham_terms.weights[sel])
                per_site.append(energy_variance_bound(part, ens))
        rows["energy_density"].append(max(per_site, default=0.0) / eps**2)
        worst = 0.0
        for a, b in pairs:
            codes = np.zeros(n, np.uint8)
            codes[[a, b]] = 1
            lam = ens.eigenvalue(codes != 0)
            var = 1 / lam
            if expectation is not None:
                strings = []
                for la in "XYZ":
                    for lb in "XYZ":
                        s = ["I"] * n
                        s[a], s[b] = la, lb
                        strings.append("".join(s))
                var = float(np.max(1 / lam - expectation(PauliExpansion.from_strings(strings)) ** 2))
            worst = max(worst, var)
        rows["correlation"].append(worst / eps**2)
        rows["purity"].append(max((purity_snapshots(np.flatnonzero(np.isin(model.qubit_site, s.sites)), ens, eps)
                                   for s in subsystems), default=0.0))
    data = {k: (("depth",), np.ceil(np.array(v))) for k, v in rows.items()}
    ds = xr.Dataset(data, coords={"depth": list(depths)})
    needed = np.max(np.stack([ds[k].values for k in rows]), axis=0)
    ds["snapshots"] = (("depth",), needed)
    ds["settings"] = (("depth",), np.ceil(needed / shots))
    best = int(np.argmin(needed))
    ds.attrs.update(error=eps, distance=distance, shots_per_setting=shots, recommended_depth=int(depths[best]),
                    method="pilot" if expectation is not None else "worst case")
    return ds


def format_plan(ds: xr.Dataset) -> str:
    cols = [("depth", "depth"), ("energy", "energy"), ("energy_density", "energy/site"),
            ("correlation", f"corr (r<={ds.attrs['distance']})"), ("purity", "purity"),
            ("snapshots", "needed"), ("settings", "settings")]
    lines = [f"snapshots for a one-sigma error of {ds.attrs['error']:g} ({ds.attrs['method']} variances)",
             "  ".join(f"{title:>14}" for _, title in cols)]
    for i, d in enumerate(ds.depth.values):
        cells = [f"{d:>14d}"] + [f"{int(ds[name].values[i]):>14,d}" for name, _ in cols[1:]]
        mark = "  <- recommended" if d == ds.attrs["recommended_depth"] else ""
        lines.append("  ".join(cells) + mark)
    lines.append(f"{ds.attrs['shots_per_setting']} shot(s) per setting; "
                 "purity columns are 0 when no subsystems are given")
    return "\n".join(lines)
