"""Synthetic experiments: shadows of simulated states, ground states and quench series.

A state is "ground" (exact diagonalization or DMRG), a product state given
by one letter per qubit (0, 1, +, -) or by a name (neel, zero, one, plus,
minus), optionally evolved under the model's Hamiltonian to a list of times
(a quench). Snapshots are drawn by :mod:`manybody.sampling`; readout bit
flips and single-qubit depolarizing noise before the measurement are added
on request. The files are the same shadow files that ``ingest`` writes;
only their metadata tells simulated from measured data.

Seeds: one SeedSequence per run, spawned into the settings draw and one
child per time point, each spawned again per chunk of settings, so the
same seed gives bit-identical files.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, replace

import numpy as np

from manybody.errors import InputError
from manybody.io.shadow import Shadow, ShadowWriter
from manybody.measure.ensembles import make_ensemble
from manybody.measure.prepare import coupling_of, fresh_seed
from manybody.references import exact
from manybody.simulation.sampling import sample_dense, sample_mps

#: the dense backend is the default up to this many qubits.
DENSE_MAX_QUBITS = 14
SETTINGS_PER_CHUNK = 2048
NAMED_STATES = ("ground", "neel", "zero", "one", "plus", "minus")


@dataclass(frozen=True)
class Noise:
    """Readout flips p01 (0 read as 1) and p10 per qubit, and depolarizing probability before measurement.

    Depolarizing a qubit with probability p just before a measurement in
    any basis randomises its outcome with probability p: a symmetric flip
    with probability p / 2.
    """

    p01: np.ndarray | float = 0.0
    p10: np.ndarray | float = 0.0
    depolarizing: float = 0.0

    def is_zero(self) -> bool:
        return not (np.any(self.p01) or np.any(self.p10) or self.depolarizing)

    def apply(self, bits: np.ndarray, rng) -> np.ndarray:
        if self.is_zero():
            return bits
        n = bits.shape[1]
        half = self.depolarizing / 2
        flip0 = np.broadcast_to(np.asarray(self.p01, dtype=float), (n,))
        flip1 = np.broadcast_to(np.asarray(self.p10, dtype=float), (n,))
        # depolarizing flip, then readout flip: combined flip probability per true bit
        p_one = np.where(bits == 1, 1 - half, half)  # probability the pre-readout bit is 1
        u = rng.random(bits.shape)
        pre = (u < p_one).astype(np.uint8)
        u = rng.random(bits.shape)
        flip = np.where(pre == 1, u < flip1, u < flip0)
        return (pre ^ flip).astype(np.uint8)

    def describe(self) -> dict:
        return {"readout_p01": np.atleast_1d(self.p01).tolist(), "readout_p10": np.atleast_1d(self.p10).tolist(),
                "depolarizing": float(self.depolarizing)}


def product_letters(state: str, n: int) -> str:
    """One letter per qubit for a named or spelled-out product state."""
    named = {"neel": ("01" * n)[:n], "zero": "0" * n, "one": "1" * n, "plus": "+" * n, "minus": "-" * n}
    if state in named:
        return named[state]
    if len(state) != n or any(c not in "01+-" for c in state):
        raise InputError(f"--state {state!r}: expected 'ground', a name ({', '.join(NAMED_STATES[1:])}) or "
                         f"{n} letters from 0, 1, +, -")
    return state


def choose_backend(model, backend: str) -> str:
    if backend == "auto":
        return "dense" if model.n_qubits <= DENSE_MAX_QUBITS else "mps"
    if backend not in ("dense", "mps"):
        raise InputError(f"--backend {backend!r}: allowed: auto, dense, mps")
    if backend == "dense" and model.n_qubits > 24:
        raise InputError(f"{model.n_qubits} qubits are too many for the dense backend (at most 24); use --backend mps")
    return backend


def prepare_states(model, state: str, times, backend: str, bond_dim: int = 128):
    """[(time or None, state, info)]: dense vectors or quimb MPS."""
    ham = model.hamiltonian
    n = model.n_qubits
    info = {}
    if state == "ground":
        if backend == "dense":
            energy, psi = exact.ground_state(ham)
        else:
            energy, psi = exact.ground_state_mps(ham, bond_dims=[d for d in (16, 32, 64, 128, 256) if d < bond_dim]
                                                 + [bond_dim])
        info["ground_energy"] = energy
    else:
        letters = product_letters(state, n)
        if backend == "dense":
            psi = exact.product_state(letters)
        else:
            import quimb.tensor as qtn

            psi = qtn.MPS_product_state([exact.SINGLE_QUBIT_STATES[c] for c in letters])
    if times is None:
        return [(None, psi, info)]
    if backend == "dense":
        states = exact.evolve(ham, psi, times)
        return [(float(t), s, dict(info)) for t, s in zip(times, states)]
    try:
        states, trotter = exact.evolve_mps(ham, psi, times, bond_dim=bond_dim)
    except ValueError as exc:
        raise InputError(f"{model.spec.source}: {exc}") from None
    return [(float(t), s, {**info, "trotter_error": trotter}) for t, s in zip(times, states)]


def state_energy(model, psi) -> float:
    ham = model.hamiltonian
    if isinstance(psi, np.ndarray):
        return float(exact.expectation(ham, psi))
    mpo = ham.to_mpo()
    return float(np.real(psi.H @ (mpo.apply(psi))) / np.real(psi.H @ psi))


def output_paths(output: str, times) -> list[str]:
    """One file, or for a series one file per time inside the folder ``output``."""
    if times is None:
        return [output]
    return [os.path.join(output, f"shadow_t{t:.4g}.nc") for t in times]


def simulate(model, state: str, n_snapshots: int, ensemble_kind: str = "local", depth: int = 0,
             shots: int = 1, times=None, noise: Noise = Noise(), backend: str = "auto", bond_dim: int = 128,
             seed: int | None = None, output: str = "shadow.nc", progress=None) -> list[str]:
    """Simulate randomized measurements of a state and write shadow files; returns the paths."""
    if n_snapshots < 1 or shots < 1:
        raise InputError("--snapshots and --shots must be at least 1")
    backend = choose_backend(model, backend)
    if backend == "mps" and ensemble_kind == "global":
        raise InputError("the global ensemble needs the dense backend (at most "
                         f"{DENSE_MAX_QUBITS} qubits by default)")
    seed = fresh_seed() if seed is None else int(seed)
    root = np.random.SeedSequence(seed)
    settings_seed, *time_seeds = root.spawn(1 + (1 if times is None else len(times)))
    ens = make_ensemble(ensemble_kind, model.n_qubits, depth, coupling_of(model))
    n_settings = -(-n_snapshots // shots)
    settings = ens.draw(n_settings, np.random.default_rng(settings_seed))
    header = Shadow(ensemble=ens, settings=settings, qubit_site=model.qubit_site, model_spec=model.spec.text,
                    seed=seed, source="simulated by manybody simulate")
    states = prepare_states(model, state, times, backend, bond_dim)
    paths = output_paths(output, times)
    for (t, psi, info), path, tseed in zip(states, paths, time_seeds):
        chunk_seeds = tseed.spawn(-(-n_settings // SETTINGS_PER_CHUNK))
        discarded = 0.0
        with ShadowWriter(path) as out:
            written = 0
            starts = range(0, n_settings, SETTINGS_PER_CHUNK)
            for start, cseed in zip(progress(starts) if progress else starts, chunk_seeds):
                rng = np.random.default_rng(cseed)
                part = settings.take(slice(start, start + SETTINGS_PER_CHUNK))
                if backend == "dense":
                    bits = sample_dense(psi, ens, part, shots, rng)
                else:
                    bits, lost = sample_mps(psi, ens, part, shots, rng, max_bond=bond_dim)
                    discarded = max(discarded, lost)
                bits = noise.apply(bits, rng)
                ids = np.repeat(part.ids, shots)
                keep = min(len(ids), n_snapshots - written)
                out.append(ids[:keep], bits[:keep], np.ones(keep, dtype=np.int64))
                written += keep
            meta = {"simulated": True, "backend": backend, "state": state, "shots_per_setting": shots,
                    "state_energy": state_energy(model, psi), **noise.describe(), **info}
            if backend == "mps":
                meta["bond_dim"] = bond_dim
                if ens.kind == "shallow":
                    meta["discarded_weight"] = discarded
            label = {} if t is None else {"time": t}
            out.finish(replace(header, label=label, metadata=meta))
    return paths
