"""Channel eigenvalues lambda_P of the measurement ensembles (docs/design.md section 3).

For every ensemble here the shadow channel is diagonal in the Pauli basis,
M(P) = lambda_P P, and lambda_P is the probability that the random Clifford
turns P into a Z-type Pauli (one that the computational-basis measurement
sees).

- local: 3^-|P| (Huang, Kueng, Preskill, Nat. Phys. 16, 1050 (2020)).
- global n-qubit Clifford: 1/(2^n + 1) for P != I (same source).
- shallow circuits: a uniformly random two-qubit Clifford maps any
  non-identity two-qubit Pauli to a uniformly random one of the 15, so the
  support pattern evolves as a Markov chain per gate: (0,0) stays, any other
  pattern goes to (1,0), (0,1), (1,1) with probabilities 3/15, 3/15, 9/15.
  The final random basis matches a non-identity site with probability 1/3:

      lambda_P = sum_s Prob(final support s | support of P) 3^-|s|,

  contracted exactly over the forward light cone of P's support.
"""

from __future__ import annotations

import numpy as np

#: support-pattern transition of one random two-qubit Clifford,
#: GATE_TRANSITION[out_a, out_b, in_a, in_b].
GATE_TRANSITION = np.zeros((2, 2, 2, 2))
GATE_TRANSITION[0, 0, 0, 0] = 1.0
for _ia, _ib in ((1, 0), (0, 1), (1, 1)):
    GATE_TRANSITION[1, 0, _ia, _ib] = 3 / 15
    GATE_TRANSITION[0, 1, _ia, _ib] = 3 / 15
    GATE_TRANSITION[1, 1, _ia, _ib] = 9 / 15

#: final random local basis: a site stays unseen (identity) with weight 1,
#: a non-identity site is seen with probability 1/3.
FINAL_WEIGHT = np.array([1.0, 1.0 / 3.0])

#: light cones up to this many sites are contracted as a dense vector.
DENSE_LIGHT_CONE = 16


def local_eigenvalue(weight):
    """3^-|P| for the local (random X/Y/Z basis) ensemble."""
    return 3.0 ** (-np.asarray(weight, dtype=float))


def global_eigenvalue(n_qubits: int, weight):
    """1/(2^n + 1) for P != I, 1 for the identity (global Clifford ensemble)."""
    w = np.asarray(weight)
    return np.where(w > 0, 1.0 / (2.0**n_qubits + 1.0), 1.0)


def light_cone(support, layers):
    """Sites and gates of the forward light cone of ``support`` through ``layers``.

    ``layers`` is a sequence of (m, 2) arrays of qubit pairs, in time order.
    Returns (sorted sites, list of (a, b) gates in time order). Gates outside
    the light cone act on identity patterns and drop out of the chain.
    """
    active = set(int(q) for q in support)
    gates = []
    for layer in layers:
        for a, b in np.asarray(layer).tolist():
            if a in active or b in active:
                gates.append((a, b))
                active.update((a, b))
    return sorted(active), gates


def support_chain_key(support, layers):
    """A hashable description of the light-cone problem, relabelled to its own sites.

    Problems that differ by a translation (bulk of a brickwork) share a key.
    """
    sites, gates = light_cone(support, layers)
    pos = {q: i for i, q in enumerate(sites)}
    init = tuple(int(q in set(int(s) for s in support)) for q in sites)
    return tuple((pos[a], pos[b]) for a, b in gates), init


def contract_support_chain(gates, init) -> float:
    """lambda for a relabelled light-cone problem (see :func:`support_chain_key`)."""
    width = len(init)
    if width == 0:
        return 1.0
    if width <= DENSE_LIGHT_CONE:
        return _contract_dense(gates, init)
    return _contract_network(gates, init)


def _contract_dense(gates, init) -> float:
    width = len(init)
    vec = np.zeros((2,) * width)
    vec[tuple(init)] = 1.0
    for a, b in gates:
        vec = np.tensordot(GATE_TRANSITION, vec, axes=([2, 3], [a, b]))
        vec = np.moveaxis(vec, [0, 1], [a, b])
    for _ in range(width):
        vec = vec @ FINAL_WEIGHT
    return float(vec)


def _contract_network(gates, init) -> float:
    import quimb.tensor as qtn

    time = [0] * len(init)
    tensors = [qtn.Tensor(np.eye(2)[s], inds=(f"s{q}_0",)) for q, s in enumerate(init)]
    for a, b in gates:
        ins = (f"s{a}_{time[a]}", f"s{b}_{time[b]}")
        time[a] += 1
        time[b] += 1
        outs = (f"s{a}_{time[a]}", f"s{b}_{time[b]}")
        tensors.append(qtn.Tensor(GATE_TRANSITION, inds=outs + ins))
    tensors += [qtn.Tensor(FINAL_WEIGHT, inds=(f"s{q}_{t}",)) for q, t in enumerate(time)]
    # a greedy path is found in milliseconds and is ample for these thin networks
    return float(qtn.TensorNetwork(tensors).contract(..., optimize="greedy"))
