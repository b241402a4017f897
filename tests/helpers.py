"""Helpers shared by the tests: small lattices, in-memory shadows, stim conversions."""

import numpy as np
import stim

from hamiltonians.spec import parse_spec
from manybody.io.shadow import Shadow
from manybody.measure.clifford import clifford_table
from manybody.simulation.sampling import sample_dense
from manybody.simulation.statevector import BASIS_ROTATIONS, embed

STIM_GATE = {"h": "H", "s": "S", "sdg": "S_DAG", "x": "X", "y": "Y", "z": "Z", "cx": "CX"}


# stim PauliString entries: 0 I, 1 X, 2 Y, 3 Z; our one-qubit codes: 0 I, 1 X, 2 Z, 3 Y
STIM_TO_CODE = {0: 0, 1: 1, 2: 3, 3: 2}


TFIM = '[lattice]\nkind = "chain"\nsize = [{n}]\n[model]\nkind = "tfim"\nJ = 1.0\nh = 0.8\n'


def tfim_model(n):
    """A transverse-field Ising chain of n sites (J = 1, h = 0.8), open boundaries."""
    return parse_spec(TFIM.format(n=n), "tfim.toml").build()


def chain(n):
    return np.array([(i, i + 1) for i in range(n - 1)])


def stim_tableau_of(tx, tz, sign):
    n = tx.shape[-1]

    def ps(x, z, s):
        text = "".join("_XZY"[int(a) + 2 * int(b)] for a, b in zip(x, z))
        return stim.PauliString(("-" if s < 0 else "+") + text)

    return stim.Tableau.from_conjugated_generators(
        xs=[ps(tx[2 * q], tz[2 * q], sign[2 * q]) for q in range(n)],
        zs=[ps(tx[2 * q + 1], tz[2 * q + 1], sign[2 * q + 1]) for q in range(n)])


def dense_unitary(ens, settings, k):
    """U of setting k built from the gate unitaries (and stim for global Cliffords)."""
    n = ens.n_qubits
    if ens.kind == "global":
        tab = stim_tableau_of(settings.tableau_x[k], settings.tableau_z[k], settings.tableau_sign[k])
        return tab.to_unitary_matrix(endian="big")
    u = np.eye(2**n, dtype=complex)
    if ens.kind == "shallow":
        table = clifford_table(2)
        for slot, (a, b) in enumerate(ens.gate_qubits.tolist()):
            u = embed(table.unitaries[settings.gates[k, slot]], [a, b], n) @ u
    for q in range(n):
        u = embed(BASIS_ROTATIONS[settings.basis[k, q]], [q], n) @ u
    return u


def make_shadow(psi, ens, n_settings, shots=1, seed=0, noise=None):
    """A shadow in memory: exact Born sampling of a dense state (manybody.sampling)."""
    rng = np.random.default_rng(seed)
    settings = ens.draw(n_settings, rng)
    bits = sample_dense(psi, ens, settings, shots, rng)
    if noise is not None:
        bits = noise.apply(bits, rng)
    count = len(bits)
    return Shadow(ensemble=ens, settings=settings, qubit_site=np.arange(ens.n_qubits),
                  record_setting=np.repeat(settings.ids, shots), outcomes=bits, counts=np.ones(count, np.int64))


def within(est, err, ref, sigmas=4.0, blocks=None):
    """Every finite estimate within ``sigmas`` error bars of the exact value.

    With ``blocks`` (jackknife blocks) and many entries, the bound is raised to the
    Bonferroni level: M entries, each a Student t with blocks - 1 degrees of freedom,
    all within the bound with probability 0.999 (scipy.stats.t).
    """
    est, err, ref = (np.asarray(x, dtype=float) for x in (est, err, ref))
    ok = np.isfinite(est) & np.isfinite(ref)
    if blocks is not None:
        from scipy import stats

        sigmas = max(sigmas, float(stats.t.isf(0.0005 / max(int(ok.sum()), 1), blocks - 1)))
    return bool(np.all(np.abs(est - ref)[ok] <= sigmas * err[ok] + 1e-12)), float(
        np.max((np.abs(est - ref) / np.maximum(err, 1e-300))[ok], initial=0))


def run_cli(*args, cwd):
    """The manybody command line in a subprocess, from the source tree: the CompletedProcess (text output)."""
    import os
    import subprocess
    import sys
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    env = {**os.environ, "PYTHONPATH": str(root)}
    return subprocess.run([sys.executable, "-m", "manybody", *map(str, args)], capture_output=True, text=True,
                          cwd=cwd, env=env, timeout=300)

