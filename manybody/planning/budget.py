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

Shots of one setting share U, so they are not independent. For a Pauli,
given U the estimate is <P>/lambda_P when U P U^dag is Z-type (probability
lambda_P for these ensembles) and 0 otherwise, with outcome variance
(1 - <P>^2)/lambda_P^2 when visible. The mean of K shots of one setting has

    Var = Var_U(E[o|U]) + E_U[Var(o|U)]/K = <P>^2 (1/lambda - 1) + (1 - <P>^2)/(lambda K),

which is 1/lambda - <P>^2 at K = 1; for sums of Paulis the between-setting
part is sum c_P c_Q <P><Q> J(P, Q)/(lambda_P lambda_Q) - <H>^2 (J: both
visible in one setting; 3^|P n Q| on the local ensemble). M settings reach
error eps when M = Var/eps^2. The worst cases take <P>^2 = 1 or 0, whichever
is larger; for sums, the Cauchy-Schwarz bound for both parts.

A cost model (a time per setting change and per shot) turns settings x shots
into hours; without a fixed number of shots the planner picks the cheapest
from SHOT_CHOICES at every depth, and recommends the cheapest depth among
those that ``estimate`` accepts (circuit-ensemble purities are capped at
PAULI_VECTOR_MAX_QUBITS of the purity accumulator).
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
#: default costs in seconds (common practice, no source): a new setting (compile, load, calibrate
#: the pulses) and one shot (state preparation, circuit, readout, reset)
SETTING_TIME = 0.1
SHOT_TIME = 1e-3
#: shots per setting the planner chooses from when none is given
SHOT_CHOICES = (1, 2, 5, 10, 20, 50, 100, 200, 500, 1000, 2000, 5000)


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
    return energy_variances(op, ens, expectation)[0]


def energy_variances(op: PauliExpansion, ens, expectation) -> tuple[float, float]:
    """(per-snapshot variance, between-setting variance Var_U E[sum c_P o_P | U]) given the <P>.

    Local ensemble: E[o_P o_Q] = 3^|P n Q| <PQ> and E_U[E[o_P|U] E[o_Q|U]] = 3^|P n Q| <P><Q> when P
    and Q carry the same letter on every shared qubit, else 0 (each shared site must be measured in its
    letter, 1/3, and gives 3^2; Huang, Kueng, Preskill, Nat. Phys. 16, 1050 (2020), local shadow norm).
    Circuit ensembles: the same with 3^|P n Q| replaced by J(P, Q)/(lambda_P lambda_Q) and <PQ> by s <R>
    (PQ = s R), J the probability that both turn Z-type in one setting, averaged over random settings.
    """
    codes = _codes(op)
    coeffs = op.coeffs.real
    values = expectation(op)
    mean = float(coeffs @ values)
    if ens.kind == "local" or ens.depth == 0:
        x, z = op.x_bits, op.z_bits
        sup = x | z
        both = sup[:, None, :] & sup[None, :, :]
        agree = np.all(~both | ((x[:, None] == x[None]) & (z[:, None] == z[None])), axis=2)
        i, j = np.nonzero(agree)
        weight = 3.0 ** np.count_nonzero(sup[i] & sup[j], axis=1)
        products = PauliExpansion(op.n_qubits, op.x[i] ^ op.x[j], op.z[i] ^ op.z[j], np.ones(len(i)))
        snapshot = float(np.sum(coeffs[i] * coeffs[j] * weight * expectation(products)))
        between = float(np.sum(coeffs[i] * coeffs[j] * weight * values[i] * values[j]))
        return max(snapshot - mean**2, 0.0), max(between - mean**2, 0.0)
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
    scale = coeffs[i] * coeffs[j] * joint[i, j] / (lam[i] * lam[j])
    snapshot = float(np.sum(scale * sign * expect_r))
    between = float(np.sum(scale * values[i] * values[j]))
    return max(snapshot - mean**2, 0.0), max(between - mean**2, 0.0)


def setting_variance(snapshot: float, between: float, shots: int) -> float:
    """Variance of the mean of K shots of one setting: between + (snapshot - between)/K."""
    return between + (snapshot - between) / shots


def pauli_setting_variance(lam: float, shots: int, p=None) -> np.ndarray:
    """<P>^2 (1/lambda - 1) + (1 - <P>^2)/(lambda K); without <P> the larger of <P>^2 = 1 and 0."""
    if p is None:
        return np.maximum(1 / lam - 1, 1 / (lam * shots))
    p2 = np.asarray(p, float) ** 2
    return p2 * (1 / lam - 1) + (1 - p2) / (lam * shots)


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


def purity_snapshots(qubits, ens, eps: float, expectation=None) -> float:
    """N with 4 V1/N + 2 V2/N^2 = eps^2 (V1, V2 of the purity U-statistic; V1 from a pilot when given)."""
    v1, v2 = _purity_moments(qubits, ens, expectation)
    return float((4 * v1 + np.sqrt(16 * v1**2 + 8 * eps**2 * v2)) / (2 * eps**2))


#: a pilot enters the purity variance only up to this many qubits (4^k expectation values)
PILOT_PURITY_MAX_QUBITS = 5


def _purity_moments(qubits, ens, expectation):
    """V1 = 4^-k sum_P w_P / lambda_P - (pilot) P^2 and V2 = 4^-k sum_P 1/lambda_P^2 over the Paulis on A.

    Worst case w_P = 1; with a pilot w_P = <P>^2 (diagonal P = Q terms only, an estimate of the scale).
    """
    k = len(qubits)
    inv_sum, inv2_sum = _inverse_eigenvalue_sums(qubits, ens)
    v2 = inv2_sum / 4**k
    if expectation is None or k > PILOT_PURITY_MAX_QUBITS:
        return inv_sum / 4**k, v2
    codes = paulis_on(qubits, ens.n_qubits)
    inv = np.array([1.0] + [1 / ens.eigenvalue(c != 0) for c in codes[1:]])
    x = (codes == 1) | (codes == 3)  # codes: 0 I, 1 X, 2 Z, 3 Y
    z = (codes == 2) | (codes == 3)
    p2 = np.asarray(expectation(PauliExpansion.from_bits(x, z, np.ones(len(codes)))), float) ** 2
    p2[0] = 1.0
    purity = p2.sum() / 2**k
    return float(max(np.sum(p2 * inv) / 4**k - purity**2, 1e-12)), v2


def _inverse_eigenvalue_sums(qubits, ens) -> tuple[float, float]:
    """sum_P 1/lambda_P and sum_P 1/lambda_P^2 over the 4^k Paulis on A, by supports (3^|S| Paulis each).

    Local ensemble: lambda_S = 3^-|S|, so the sums are 10^k and 28^k.
    """
    k = len(qubits)
    if ens.kind == "local" or ens.depth == 0:
        return 10.0**k, 28.0**k
    masks = (np.arange(2**k)[:, None] >> np.arange(k)) & 1
    inv1 = inv2 = 0.0
    for mask in masks:
        support = np.zeros(ens.n_qubits, dtype=bool)
        support[np.asarray(qubits)[mask == 1]] = True
        weight, inv = 3.0 ** mask.sum(), 1.0 / ens.eigenvalue(support) if mask.any() else 1.0
        inv1, inv2 = inv1 + weight * inv, inv2 + weight * inv**2
    return inv1, inv2


def plan(model, eps: float, depths=(0, 1, 2, 3, 4), distance: int = 1, subsystems=(), expectation=None,
         shots: int | None = None, setting_time: float = SETTING_TIME, shot_time: float = SHOT_TIME,
         observables=(), target=None) -> xr.Dataset:
    """Settings x shots needed at each depth for energy, energy per site, correlations up to ``distance``, purities.

    ``expectation`` (optional, from a pilot shadow) maps a PauliExpansion to the
    estimated <P> of its strings; every column then uses it. ``shots`` fixes the
    shots per setting; None picks the cheapest of SHOT_CHOICES under the cost
    model (seconds per setting change and per shot). Per target the table gives
    snapshots = settings x shots; ``settings`` is the largest requirement.
    ``observables``: (name, PauliExpansion) pairs, the worst of them in column
    ``observable``; ``target``: a dense state vector whose fidelity column is
    the variance of the fidelity estimator on the target itself.
    """
    pairs = _pairs(model, distance)
    choices = (int(shots),) if shots else SHOT_CHOICES
    columns = ("energy", "energy_density", "correlation", "purity") + (("observable",) if len(observables) else ()) \
        + (("fidelity",) if target is not None else ())
    rows = {name: [] for name in columns + ("settings", "shots", "snapshots", "time")}
    allowed, lower = [], []
    for d in depths:
        ens = _ensemble(model, d)
        targets = _targets(model, ens, pairs, subsystems, expectation, eps)
        targets.update(_more_targets(ens, observables, target, expectation, eps))
        if targets.pop("fidelity_lower_estimate", False):
            lower.append(int(d))
        best = None
        for k in choices:
            need = {name: max((f(k) for f in targets[name]), default=0.0) for name in columns}
            settings = float(np.ceil(max(need.values())))
            cost = settings * (setting_time + k * shot_time)
            if best is None or cost < best[0]:
                best = (cost, k, settings, need)
        cost, k, settings, need = best
        for name in columns:
            rows[name].append(np.ceil(need[name]) * k)
        rows["settings"].append(settings)
        rows["shots"].append(k)
        rows["snapshots"].append(settings * k)
        rows["time"].append(cost)
        allowed.append(np.isfinite(cost))
    ds = xr.Dataset({name: (("depth",), np.array(v, dtype=float)) for name, v in rows.items()},
                    coords={"depth": list(depths)})
    times = np.where(allowed, ds["time"].values, np.inf)
    best = int(np.argmin(times))
    ds.attrs.update(error=eps, distance=distance, shots_per_setting=int(shots) if shots else 0,
                    recommended_depth=int(depths[best]) if np.isfinite(times[best]) else -1,
                    recommended_settings=float(ds["settings"].values[best]),
                    recommended_shots=int(ds["shots"].values[best]), setting_time=setting_time,
                    shot_time=shot_time, method="pilot" if expectation is not None else "worst case")
    if "fidelity" in ds:
        ds["fidelity"].attrs["lower_estimate_at_depths"] = np.array(lower, dtype=np.int64)
    return ds


def _pairs(model, distance):
    """Qubit pairs within the graph distance on the lattice (spin models only)."""
    import networkx as nx

    lat = model.lattice
    if model.n_qubits != lat.n_sites:
        return []
    graph = nx.Graph(lat.bonds.tolist())
    graph.add_nodes_from(range(lat.n_sites))
    return [(a, b) for a, dist in nx.all_pairs_shortest_path_length(graph, cutoff=distance)
            for b, d in dist.items() if 0 < d <= distance and a < b]


def _targets(model, ens, pairs, subsystems, expectation, eps):
    """Per column, callables K -> settings needed with K shots per setting (inf: ``estimate`` refuses it)."""
    from manybody.estimation.accumulators.purity import PAULI_VECTOR_MAX_QUBITS

    ham = model.hamiltonian.combined(atol=1e-12)
    n = model.n_qubits
    keep = ham.weights > 0
    terms = PauliExpansion(n, ham.x[keep], ham.z[keep], ham.coeffs[keep].real)

    def variances(op):
        if expectation is None:
            bound = energy_variance_bound(op, ens)
            return bound, bound
        return energy_variances(op, ens, expectation)

    def per_setting(snapshot, between):
        return lambda k: setting_variance(snapshot, between, k) / eps**2

    out = {"energy": [per_setting(*variances(terms))], "energy_density": [], "correlation": [], "purity": []}
    # energy per site as in the results: each term split equally among the sites it acts on
    for site in range(model.lattice.n_sites):
        qubits = np.flatnonzero(model.qubit_site == site)
        sel = terms.support[:, qubits].any(axis=1)
        if sel.any():
            part = PauliExpansion(n, terms.x[sel], terms.z[sel], terms.coeffs[sel] / terms.weights[sel])
            out["energy_density"].append(per_setting(*variances(part)))
    for a, b in pairs:
        codes = np.zeros(n, np.uint8)
        codes[[a, b]] = 1
        lam = ens.eigenvalue(codes != 0)
        p = None
        if expectation is not None:
            strings = []
            for la in "XYZ":
                for lb in "XYZ":
                    letters = ["I"] * n
                    letters[a], letters[b] = la, lb
                    strings.append("".join(letters))
            p = expectation(PauliExpansion.from_strings(strings))
        out["correlation"].append(lambda k, lam=lam, p=p: float(np.max(pauli_setting_variance(lam, k, p))) / eps**2)
    for sub in subsystems:
        qubits = np.flatnonzero(np.isin(model.qubit_site, sub.sites))
        if ens.depth > 0 and len(qubits) > PAULI_VECTOR_MAX_QUBITS:
            out["purity"].append(lambda k: np.inf)
            continue
        single = purity_snapshots(qubits, ens, eps, expectation)
        v1 = _purity_moments(qubits, ens, expectation)[0]
        # K shots: at most K-fold fewer settings, never fewer than the first-order term 4 V1 / eps^2 asks
        out["purity"].append(lambda k, single=single, v1=v1: max(single / k, min(single, 4 * v1 / eps**2)))
    return out


#: snapshots of the target's own shadow that estimate the fidelity's per-snapshot variance
FIDELITY_SAMPLES = 2000
#: snapshots for the same variance through the fitted shallow inverse (each costs far more)
NETWORK_FIDELITY_SAMPLES = 400
#: a sampled fidelity variance whose relative standard error exceeds this, or whose largest term makes more
#: than SHARE_NOTICE of it, is marked as a lower estimate (common practice, no source; at 6 qubits, depth 0,
#: |0...0>: 0.3 and 15%, and the sampled 13.1 is near the exact 10.4)
SPREAD_NOTICE = 0.4
SHARE_NOTICE = 0.25


def _more_targets(ens, observables, target, expectation, eps):
    """Columns for user observables (like the energy: sum_P |c_P| / sqrt(lambda_P) worst case, or the pilot) and
    for the fidelity to a target state (variance of the estimator on the target itself, by sampling)."""
    out = {}
    if len(observables):
        calls = []
        for _, op in observables:
            op = op.combined(atol=1e-12)
            keep = op.weights > 0
            if not keep.any():
                continue
            terms = PauliExpansion(op.n_qubits, op.x[keep], op.z[keep], op.coeffs[keep].real)
            snap, between = ((energy_variance_bound(terms, ens),) * 2 if expectation is None
                             else energy_variances(terms, ens, expectation))
            calls.append(lambda k, a=snap, b=between: setting_variance(a, b, k) / eps**2)
        out["observable"] = calls
    if target is not None:
        values = fidelity_samples(target, ens)
        variance = float(np.var(values, ddof=1))
        spread, share = variance_spread(values)
        if spread > SPREAD_NOTICE or share > SHARE_NOTICE:
            import warnings

            warnings.warn(f"fidelity at depth {ens.depth}: the sampled variance rests on a few large snapshot "
                          f"values (relative standard error about {spread:.1f}, the largest one {share:.0%} of it): "
                          "its snapshot count is a lower estimate", RuntimeWarning, stacklevel=2)
            out["fidelity_lower_estimate"] = True
        out["fidelity"] = [lambda k: variance / eps**2]  # shots of one setting counted as adding nothing
    return out


def fidelity_variance(target, ens, samples: int = FIDELITY_SAMPLES, seed: int = 7) -> float:
    """Per-snapshot variance of the fidelity estimator when the measured state is the target itself.

    The sample variance of :func:`fidelity_samples`; :func:`variance_spread` says how far to trust it.
    """
    return float(np.var(fidelity_samples(target, ens, samples, seed), ddof=1))


def fidelity_samples(target, ens, samples: int = FIDELITY_SAMPLES, seed: int = 7) -> np.ndarray:
    """Fidelity estimates of ``samples`` snapshots of the target itself, by exact Born sampling.

    A fixed seed, so the plan is reproducible; the exact variance would need
    the ensemble's third moment. Shallow circuits beyond the exact size
    sample the target as an MPS and take at most NETWORK_FIDELITY_SAMPLES
    snapshots through the fitted inverse (relative error of the variance about
    sqrt(2 / samples)); an MPS target (beyond the exact size) is sampled as an
    MPS for the local ensemble too.
    """
    from manybody.estimation.fidelity import as_mps, dense_target, fidelity_snapshots, is_mps, uses_network_inverse
    from manybody.simulation.sampling import sample_dense, sample_mps

    rng = np.random.default_rng(seed)
    network = uses_network_inverse(ens)
    if network or is_mps(target):
        state = as_mps(target)
        settings = ens.draw(min(samples, NETWORK_FIDELITY_SAMPLES) if network else samples, rng)
        bits, _ = sample_mps(state, ens, settings, 1, rng)
    else:
        state = dense_target(target)
        settings = ens.draw(samples, rng)
        bits = sample_dense(state, ens, settings, 1, rng)
    # single precision for the fitted route: its rounding (~1e-6 of the values) is nothing beside the
    # Monte Carlo error of a variance from at most a few thousand snapshots
    return fidelity_snapshots(state, ens, settings, np.arange(len(settings)), bits,
                              precision="single" if network else "double")


def variance_spread(values) -> tuple[float, float]:
    """How far a sample variance can be trusted: (its relative standard error, its largest term's share).

    The relative standard error is sqrt((m4 / var^2 - 1) / N), m4 the fourth
    central moment; the share is the largest squared deviation over their
    sum. Heavy-tailed values (local shadows of many qubits) make both large,
    and the variance then comes out low (for |0...0> at 40 qubits, depth 0:
    6.8 against the exact 1.5^40 - 1). Zero for values without spread.
    """
    values = np.asarray(values, dtype=float)
    squares = (values - values.mean()) ** 2
    variance = float(np.var(values, ddof=1)) if len(values) > 1 else 0.0
    if not variance > 0:
        return 0.0, 0.0
    m4 = float(np.mean(squares**2))
    return float(np.sqrt(max(m4 / variance**2 - 1.0, 0.0) / len(values))), float(squares.max() / squares.sum())


def _lower_depths(ds: xr.Dataset) -> np.ndarray:
    """Depths whose fidelity count is a lower estimate (a one-element list reads back from netCDF as a number)."""
    return np.atleast_1d(ds["fidelity"].attrs.get("lower_estimate_at_depths", [])) if "fidelity" in ds else \
        np.zeros(0, dtype=np.int64)


def format_plan(ds: xr.Dataset) -> str:
    cols = [("depth", "depth"), ("energy", "energy"), ("energy_density", "energy/site"),
            ("correlation", f"corr (r<={ds.attrs['distance']})"), ("purity", "purity")]
    cols += [(name, name) for name in ("observable", "fidelity") if name in ds]
    cols += [("snapshots", "needed"), ("settings", "settings"), ("shots", "shots"), ("time", "time [h]")]
    lines = [f"snapshots for a one-sigma error of {ds.attrs['error']:g} ({ds.attrs['method']} variances)",
             "  ".join(f"{title:>14}" for _, title in cols)]
    for i, d in enumerate(ds.depth.values):
        cells = [f"{d:>14d}"]
        lower = d in _lower_depths(ds)
        for name, _ in cols[1:]:
            v = float(ds[name].values[i])
            cells.append(f"{'refused':>14}" if not np.isfinite(v) else
                         f"{v / 3600:>14.3g}" if name == "time" else
                         f"{'>=' + format(int(v), ',d'):>14}" if name == "fidelity" and lower else f"{int(v):>14,d}")
        mark = "  <- recommended" if d == ds.attrs["recommended_depth"] else ""
        lines.append("  ".join(cells) + mark)
    shots = ds.attrs["shots_per_setting"]
    lines.append((f"{shots} shot(s) per setting" if shots else "shots per setting: the cheapest choice per depth")
                 + f"; costs {ds.attrs['setting_time']:g} s per setting, {ds.attrs['shot_time']:g} s per shot; "
                 "purity columns are 0 when no subsystems are given; 'refused': estimate does not take it")
    if len(_lower_depths(ds)):
        lines.append("'>=': the fidelity's sampled variance rests on a few large values there, a lower estimate")
    return "\n".join(lines)
