"""Fidelity F = <psi|rho|psi> to a target state from classical shadows (docs/design.md section 4).

Each snapshot i (setting U, outcome b) gives the classical shadow
rho_i = M^-1(U^dag|b><b|U), and f_i = <psi|rho_i|psi> is an unbiased
single-snapshot estimate of F (Huang, Kueng, Preskill, Nat. Phys. 16, 1050
(2020)). The kernels return f_i per snapshot, snapshots first, so that an
accumulator needs only sums (and sums per block of settings for error bars).

- local ensemble: M^-1 factorizes per qubit,
  M^-1(U^dag|b><b|U) = (x)_q O_q, O_q = I/2 + (1/lambda_q)(|v_q><v_q| - I/2),
  |v_q> = U_q^dag|b_q>; with lambda_q = 1/3 this is 3|v_q><v_q| - I.
  Dense target: (x)_q O_q applied to psi for a chunk of snapshots at once.
  MPS target: a product of transfer matrices, batched over snapshots.
- global Clifford ensemble: f = (2^n + 1)|<b|U|psi>|^2 - 1 (Huang, Kueng,
  Preskill 2020); U psi from the tableau by the sampler's rotation
  (``rotate_dense``, which builds on stim: Gidney, Quantum 5, 497 (2021)).
- shallow circuits (and every ensemble whose channel is Pauli-diagonal):
  M^-1(rho_i) = 2^-n sum_P tr(P rho_i) P / lambda_P, and tr(P rho_i) is
  nonzero only on the stabilizer group {U^dag Z^z U} of rho_i, so

      f_i = 2^-n sum_z (-1)^(z.b) <psi|U^dag Z^z U|psi> / lambda(supp U^dag Z^z U).

  With p(x) = |<x|U|psi>|^2, <psi|U^dag Z^z U|psi> = sum_x (-1)^(z.x) p(x) is
  the Walsh-Hadamard transform of p, so one setting costs two transforms
  and gives f for all 2^n outcomes b at once (exact, dense target).
  Beyond EXACT_SHALLOW_QUBITS the 2^n table of 1/lambda is out of reach:
  :mod:`manybody.estimation.shallow_network` fits 1/lambda as a matrix
  product state over support bits (a tensor-network inverse channel, the
  route of Bertoni et al., PRL 133, 020602 (2024); Akhtar, Hu, You,
  Quantum 7, 1026 (2023)) and contracts each snapshot with an MPS target;
  its residual bounds the bias and is carried into the error bar.

Index convention: qubit 0 is the most significant bit of a basis-state
index, outcome bit 0 is the +1 eigenvalue (docs/design.md section 2).
"""

from __future__ import annotations

import weakref

import numpy as np

from manybody.errors import InputError
from manybody.estimation.stabilizer import support_eigenvalues, walsh_hadamard
from manybody.measure.clifford import clifford_table
from manybody.measure.paulis import BASIS_PAULI
from manybody.measure.propagation import pull_back_layers
from manybody.simulation.sampling import mps_site_tensors, rotate_dense
from manybody.simulation.statevector import BASIS_ROTATIONS

#: dense work arrays are kept below this many complex amplitudes per chunk.
CHUNK_AMPLITUDES = 1 << 20
#: largest target for the dense routes (shallow, global, local dense).
MAX_DENSE_QUBITS = 20
#: local ensemble: dense targets up to this size use the product operator, larger ones an MPS (as_mps).
LOCAL_DENSE_QUBITS = 12
#: shallow circuits: exact (2^n table of 1/lambda) up to this size, the fitted tensor-network inverse beyond.
EXACT_SHALLOW_QUBITS = 14

_INV_LAMBDA_TABLES: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


# ----------------------------------------------------------------- targets
def dense_target(state) -> np.ndarray:
    """The normalised state vector (2^n,) of a numpy vector or a quimb MPS."""
    if hasattr(state, "to_dense"):
        state = np.asarray(state.to_dense()).ravel()
    psi = np.asarray(state, dtype=complex).ravel()
    n = int(round(np.log2(max(len(psi), 1))))
    if len(psi) != 2**n or n < 1:
        raise InputError(f"a target state vector needs 2^n amplitudes; got {len(psi)}")
    norm = np.linalg.norm(psi)
    if not np.isfinite(norm) or norm == 0:
        raise InputError("the target state vector is zero or not finite")
    return psi / norm


def _outcome_index(bits: np.ndarray) -> np.ndarray:
    """Basis-state index of outcome bits (N, n), qubit 0 most significant."""
    n = bits.shape[1]
    return np.asarray(bits, dtype=np.int64) @ (1 << np.arange(n - 1, -1, -1, dtype=np.int64))


# ----------------------------------------------------------------- local
def local_operators(basis: np.ndarray, bits: np.ndarray, inv_lambda=3.0) -> np.ndarray:
    """O[s, q] = I/2 + inv_lambda_q (|v><v| - I/2), |v> = R_basis^dag|b>: (N, n, 2, 2).

    R_basis is the rotation before the Z measurement (X: H; Y: H S^dag;
    Z: identity). With inv_lambda = 3 this is 3|v><v| - I, the inverse of
    the local measurement channel on one qubit (Huang, Kueng, Preskill
    2020); a calibrated (robust) shadow passes one noisy 1/lambda per qubit
    (Chen, Yu, Zeng, Flammia, PRX Quantum 2, 030348 (2021)).
    """
    basis = np.asarray(basis, dtype=np.intp)
    bits = np.asarray(bits, dtype=np.intp)
    n = basis.shape[1]
    vecs = BASIS_ROTATIONS.conj()[:, [0, 1], :]  # vecs[a, b] = row b of R_a, conjugated = R_a^dag|b>
    proj = np.einsum("abi,abj->abij", vecs, vecs.conj())  # |v><v| per (basis, outcome)
    inv = np.broadcast_to(np.asarray(inv_lambda, dtype=float), (n,))
    half = 0.5 * np.eye(2)
    table = half + inv[:, None, None, None, None] * (proj[None] - half)  # (n, 3, 2, 2, 2)
    return table[np.arange(n), basis, bits]


def local_fidelity_dense(psi, basis: np.ndarray, bits: np.ndarray, inv_lambda=3.0) -> np.ndarray:
    """f_s = <psi| (x)_q O_q(s) |psi> for every snapshot s, dense target: (N,) float.

    O_q from :func:`local_operators`. A chunk of snapshots is held as a
    (B, 2^n) array; each qubit's operator is one batched 2x2 product on
    that axis, then the overlap with psi. Cost O(n 2^n) per snapshot.
    """
    psi = dense_target(psi)
    n = int(np.log2(len(psi)))
    ops = local_operators(basis, bits, inv_lambda)
    count = len(ops)
    out = np.empty(count)
    step = max(1, CHUNK_AMPLITUDES // len(psi))
    for start in range(0, count, step):
        chunk = ops[start:start + step]
        b = len(chunk)
        phi = np.broadcast_to(psi, (b, len(psi)))
        for q in range(n):
            phi = np.einsum("bij,bajr->bair", chunk[:, q], phi.reshape(b, 2**q, 2, -1)).reshape(b, -1)
        out[start:start + b] = (phi @ psi.conj()).real
    return out


def local_fidelity_mps(target, basis: np.ndarray, bits: np.ndarray, inv_lambda=3.0,
                       chunk: int = 256) -> np.ndarray:
    """f_s = <psi| (x)_q O_q(s) |psi> for an MPS target, as a product of transfer matrices: (N,).

    ``target``: a quimb MPS, or right-canonical (left, right, physical)
    tensors of a normalised state. The left environments E_s of a chunk of
    snapshots advance together,

        E'[r, r'] = sum_{l, l', s, s'} conj(A[l, r, s]) E[l, l'] O(s, s') A[l', r', s'],

    as two matrix products over the whole chunk (held as E[l, snapshot, l'])
    and a 2x2 update between them: O(4 chi^3) per site and snapshot. Right
    canonical form makes the right environment the identity, so f = E after
    the last site.
    """
    tensors = target if isinstance(target, (list, tuple)) else mps_site_tensors(target)
    ops = local_operators(basis, bits, inv_lambda)
    count, n = ops.shape[:2]
    if len(tensors) != n:
        raise InputError(f"the target MPS has {len(tensors)} sites but the snapshots have {n} qubits")
    kets = [np.ascontiguousarray(a.reshape(a.shape[0], -1)) for a in tensors]  # (l', r' s')
    bras = [np.ascontiguousarray(a.conj().transpose(1, 0, 2).reshape(a.shape[1], -1)) for a in tensors]  # (r, l s)
    out = np.empty(count)
    for start in range(0, count, chunk):
        o = ops[start:start + chunk]
        b = len(o)
        env = np.ones((1, b, 1), dtype=complex)  # E[l, snapshot, l']
        for q, a in enumerate(tensors):
            chi_l, chi_r, d = a.shape
            ket = (env.reshape(chi_l * b, chi_l) @ kets[q]).reshape(chi_l, b, chi_r, d)
            mixed = np.empty((chi_l, d, b, chi_r), dtype=complex)
            for s in range(d):  # sum_s' O(s, s') on the ket's physical index
                mixed[:, s] = ket[..., 0] * o[None, :, q, s, 0, None]
                for t in range(1, d):
                    mixed[:, s] += ket[..., t] * o[None, :, q, s, t, None]
            env = bras[q] @ mixed.reshape(chi_l * d, b * chi_r)  # (r, snapshot r')
        out[start:start + b] = env.reshape(b).real
    return out


# ----------------------------------------------------------------- global
def global_fidelity(psi, ensemble, settings, setting_index: np.ndarray, bits: np.ndarray) -> np.ndarray:
    """f_s = (2^n + 1)|<b_s|U_s|psi>|^2 - 1 for global Clifford snapshots: (N,).

    Huang, Kueng, Preskill, Nat. Phys. 16, 1050 (2020), eq. for the global
    Clifford inverse M^-1(X) = (2^n + 1) X - tr(X) I. U psi is computed once
    per setting (``rotate_dense``: the tableau's unitary), then every
    snapshot of that setting is a table look-up.
    """
    psi = dense_target(psi)
    dim = len(psi)
    return _per_setting(psi, ensemble, settings, setting_index, bits,
                        lambda probs, sub: (dim + 1.0) * probs - 1.0)


# ----------------------------------------------------------------- shallow (and any Pauli-diagonal ensemble)
def inverse_eigenvalue_table(ensemble, masks: np.ndarray) -> np.ndarray:
    """1/lambda for support masks (integers, qubit 0 = most significant bit), from ``ensemble.eigenvalue``.

    Values are cached per ensemble in a 2^n table filled on demand
    (:func:`manybody.estimation.stabilizer.support_eigenvalues`, with the
    qubits listed last to first so that its pattern bits match our masks).
    """
    n = ensemble.n_qubits
    table = _INV_LAMBDA_TABLES.get(ensemble)
    if table is None:
        table = np.full(2**n, np.nan)
        table[0] = 1.0
        _INV_LAMBDA_TABLES[ensemble] = table
    masks = np.asarray(masks, dtype=np.int64)
    missing = np.unique(masks[np.isnan(table[masks])])
    if len(missing):
        lam = support_eigenvalues(ensemble.eigenvalue, n, np.arange(n - 1, -1, -1), patterns=missing)
        table[missing] = 1.0 / lam[missing]
    return table[masks]


def stabilizer_supports(ensemble, settings) -> np.ndarray:
    """Support mask of U^dag Z^z U for every setting and every z: (K, 2^n) int64.

    The generators U^dag Z_j U are found by undoing the basis rotation
    (Z_j -> the measured Pauli) and then the gate layers in reverse order
    (C^dag P C from the inverse of the Clifford table's conjugation map).
    The map z -> U^dag Z^z U is a group homomorphism, so the x and z bits of
    the product are XORs of the generators' bits; its support is x | z.
    """
    n = ensemble.n_qubits
    k = len(settings)
    codes = np.zeros((k, n, n), dtype=np.uint8)  # [setting, generator j, qubit]
    codes[:, np.arange(n), np.arange(n)] = BASIS_PAULI[settings.basis]
    pull_back_layers(codes, settings.gates, getattr(ensemble, "gate_qubits", ()))  # local: no gates
    weights = 1 << np.arange(n - 1, -1, -1, dtype=np.int64)
    gx, gz = (codes & 1).astype(np.int64) @ weights, (codes >> 1).astype(np.int64) @ weights  # (K, n)
    xs = np.zeros((k, 1), dtype=np.int64)
    zs = np.zeros((k, 1), dtype=np.int64)
    for j in range(n):  # index bit of z_j is bit n-1-j: append j as the new least significant bit
        xs = np.stack([xs, xs ^ gx[:, j:j + 1]], axis=-1).reshape(k, -1)
        zs = np.stack([zs, zs ^ gz[:, j:j + 1]], axis=-1).reshape(k, -1)
    return xs | zs


def inverse_channel_values(probs: np.ndarray, ensemble, settings) -> np.ndarray:
    """f(b) = 2^-n WHT[ WHT[p](z) / lambda(supp U^dag Z^z U) ](b) per setting: (K, 2^n).

    ``probs`` (K, 2^n) are p(x) = |<x|U psi|^2 of the K settings (derivation
    in the module docstring); lambda from ``ensemble.eigenvalue``.
    """
    weights = inverse_eigenvalue_table(ensemble, stabilizer_supports(ensemble, settings))
    return walsh_hadamard(walsh_hadamard(probs) * weights) / probs.shape[-1]


def outcome_table(psi, ensemble, settings) -> np.ndarray:
    """f(b) = <psi|M^-1(U^dag|b><b|U)|psi> for every setting and every outcome b: (K, 2^n).

    Exact, for local and shallow ensembles (any ensemble with settings.basis
    whose channel is Pauli-diagonal); settings are processed all at once.
    """
    psi = dense_target(psi)
    return inverse_channel_values(rotated_probabilities(psi, ensemble, settings), ensemble, settings)


def rotated_probabilities(psi: np.ndarray, ensemble, settings) -> np.ndarray:
    """p_k(x) = |<x|U_k|psi>|^2 for every setting k (gates, then basis rotations): (K, 2^n).

    Each gate slot is one einsum over the batch of settings, on a view of
    the state with the gate's qubits as separate axes (no transposed copies).
    Global Clifford settings go through ``rotate_dense`` (unitaries from the tableaux).
    """
    k, dim = len(settings), len(psi)
    n = int(np.log2(dim))
    if settings.tableau_x is not None:
        return np.abs(rotate_dense(np.broadcast_to(psi, (k, dim)).copy(), ensemble, settings, 0)) ** 2
    states = np.broadcast_to(psi, (k, dim))
    if settings.gates is not None and settings.gates.shape[1]:
        unitaries = clifford_table(2).unitaries
        for slot, (a, b) in enumerate(ensemble.gate_qubits.tolist()):
            u = unitaries[settings.gates[:, slot]].reshape(k, 2, 2, 2, 2)  # (out a, out b, in a, in b)
            if a > b:
                a, b, u = b, a, u.transpose(0, 2, 1, 4, 3)
            view = states.reshape(k, 2**a, 2, 2**(b - a - 1), 2, -1)
            states = np.einsum("kijst,kaszty->kaizjy", u, view).reshape(k, dim)
    rotations = BASIS_ROTATIONS[settings.basis]  # (K, n, 2, 2)
    for q in range(n):
        view = states.reshape(k, 2**q, 2, -1)
        states = np.einsum("kij,kajr->kair", rotations[:, q], view).reshape(k, dim)
    return np.abs(states) ** 2


def shallow_fidelity(psi, ensemble, settings, setting_index: np.ndarray, bits: np.ndarray) -> np.ndarray:
    """f_s for shallow-circuit (or local) snapshots through :func:`inverse_channel_values`: (N,).

    Cost per distinct setting O(G 2^n + n 2^n) (G gates), plus one call of
    ``ensemble.eigenvalue`` per support pattern never seen before (up to 2^n
    calls per ensemble, which bounds the practical size near n = 14 to 16).
    """
    psi = dense_target(psi)
    if ensemble.n_qubits > MAX_DENSE_QUBITS:
        raise InputError(f"exact shallow-circuit fidelity handles at most {MAX_DENSE_QUBITS} qubits")
    return _per_setting(psi, ensemble, settings, setting_index, bits,
                        lambda probs, sub: inverse_channel_values(probs, ensemble, sub))


def _per_setting(psi, ensemble, settings, setting_index, bits, table_of) -> np.ndarray:
    """Run ``table_of(probabilities (B, 2^n), settings)`` once per distinct setting; look up snapshots."""
    setting_index = np.asarray(setting_index, dtype=np.int64)
    outcome = _outcome_index(np.asarray(bits))
    distinct, inverse = np.unique(setting_index, return_inverse=True)
    order = np.argsort(inverse, kind="stable")
    bounds = np.searchsorted(inverse[order], np.arange(len(distinct) + 1))
    out = np.empty(len(setting_index))
    step = max(1, CHUNK_AMPLITUDES // len(psi))
    for start in range(0, len(distinct), step):
        stop = min(start + step, len(distinct))
        sub = settings.take(distinct[start:stop])
        table = table_of(rotated_probabilities(psi, ensemble, sub), sub)
        rows = order[bounds[start]:bounds[stop]]
        out[rows] = table[inverse[rows] - start, outcome[rows]]
    return out


# ----------------------------------------------------------------- dispatch
def uses_network_inverse(ensemble) -> bool:
    """Shallow circuits beyond EXACT_SHALLOW_QUBITS take the fitted tensor-network inverse (approximate)."""
    return ensemble.kind == "shallow" and ensemble.n_qubits > EXACT_SHALLOW_QUBITS


def is_mps(target) -> bool:
    """Whether a target is a quimb MPS (anything with ``to_dense`` that is not a numpy array)."""
    return hasattr(target, "to_dense") and not isinstance(target, np.ndarray)


def as_mps(target):
    """A quimb MPS of the target (a numpy vector is split by SVDs dropping singular values below 1e-12)."""
    if is_mps(target):
        return target
    import quimb.tensor as qtn

    psi = dense_target(target)
    return qtn.MatrixProductState.from_dense(psi, dims=[2] * int(np.log2(len(psi))), cutoff=1e-12)


def local_route_target(target):
    """The target as the local ensemble's kernels want it: dense vectors above LOCAL_DENSE_QUBITS as an MPS.

    The dense product operator costs O(n 2^n) per snapshot, the transfer matrices O(n chi^2).
    """
    if isinstance(target, np.ndarray) and target.size > 2**LOCAL_DENSE_QUBITS:
        return as_mps(target)
    return target


def fidelity_snapshots(target, ensemble, settings, setting_index: np.ndarray, bits: np.ndarray,
                       inverse=None, inv_lambda=3.0, precision: str = "double") -> np.ndarray:
    """Per-snapshot fidelity estimates f_s (N,) for any ensemble; their mean estimates <psi|rho|psi>.

    ``target``: numpy state vector or quimb MPS. Local ensemble: MPS targets
    use transfer matrices, dense targets the product operator. Global
    ensemble and shallow circuits up to EXACT_SHALLOW_QUBITS: exact dense
    routes (an MPS target is made dense). Larger shallow circuits: the fitted
    inverse ``inverse`` (default :func:`shallow_network.shallow_inverse`), biased
    by at most its ``bias_bound``, swept in ``precision`` ("double", or
    "single": see :func:`shallow_network.sweep_precision`). ``inv_lambda``: the
    local ensemble's 1/lambda per qubit (3, or calibrated values).
    """
    if ensemble.is_local:
        basis = settings.basis[np.asarray(setting_index, dtype=np.int64)]
        target = local_route_target(target)
        kernel = local_fidelity_mps if is_mps(target) else local_fidelity_dense
        return kernel(target, basis, bits, inv_lambda)
    if uses_network_inverse(ensemble):
        from manybody.estimation.shallow_network import shallow_fidelity_mps, shallow_inverse

        inverse = shallow_inverse(ensemble) if inverse is None else inverse
        return shallow_fidelity_mps(inverse, as_mps(target), ensemble, settings, setting_index, bits,
                                    precision=precision)
    if ensemble.n_qubits > MAX_DENSE_QUBITS:
        raise InputError(f"fidelity with the {ensemble.kind} ensemble needs a dense target of at most "
                         f"{MAX_DENSE_QUBITS} qubits; this one has {ensemble.n_qubits}")
    if ensemble.kind == "global":
        return global_fidelity(target, ensemble, settings, setting_index, bits)
    return shallow_fidelity(target, ensemble, settings, setting_index, bits)
