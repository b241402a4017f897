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
same seed gives bit-identical files. Because every chunk owns its random
stream, chunks are drawn by a pool of threads (numpy releases the GIL in
the matrix products) and handed on in order: the files do not depend on
the number of workers.
"""

from __future__ import annotations

import os
from dataclasses import replace

import numpy as np

from manybody.errors import InputError
from manybody.io.files import atomic_folder
from manybody.io.shadow import Shadow, ShadowWriter
from manybody.measure.ensembles import make_ensemble
from manybody.measure.prepare import coupling_of, fresh_seed
from manybody.references import exact
from manybody.simulation.noise import Noise
from manybody.simulation.sampling import mps_site_tensors, sample_dense, sample_mps
from manybody.threads import available_cores, ordered_map_one_blas

#: the dense backend is the default up to this many qubits.
DENSE_MAX_QUBITS = 14
SETTINGS_PER_CHUNK = 2048
#: settings per chunk when an MPS is sampled through gate layers (tens of ms per setting): small chunks
#: keep every core busy and the progress bar moving
CIRCUIT_MPS_SETTINGS_PER_CHUNK = 64
#: chunks drawn ahead of the consumer, per worker (bounds the memory of a parallel run)
CHUNKS_IN_FLIGHT = 2
NAMED_STATES = ("ground", "neel", "zero", "one", "plus", "minus")


def product_letters(state: str, n: int) -> str:
    """One letter per qubit for a named or spelled-out product state."""
    named = {"neel": ("01" * n)[:n], "zero": "0" * n, "one": "1" * n, "plus": "+" * n, "minus": "-" * n}
    if state in named:
        return named[state]
    if len(state) != n or any(c not in "01+-" for c in state):
        raise InputError(f"state {state!r}: expected 'ground', a name ({', '.join(NAMED_STATES[1:])}), "
                         f"{n} letters from 0, 1, +, -, or STATE@SPEC.toml", argument="state")
    return state


def choose_backend(model, backend: str) -> str:
    if backend == "auto":
        return "dense" if model.n_qubits <= DENSE_MAX_QUBITS else "mps"
    if backend not in ("dense", "mps"):
        raise InputError(f"backend {backend!r}: allowed: auto, dense, mps", argument="backend")
    if backend == "dense" and model.n_qubits > 24:
        raise InputError(f"{model.n_qubits} qubits are too many for the dense backend (at most 24); use the mps backend", argument="backend")
    return backend


def initial_state(model, state, backend: str, bond_dim: int = 128):
    """The state before any evolution and what is known of it (one definition: manybody.references.prepare)."""
    from manybody.references.prepare import initial_state as make

    psi, attrs = make(model, state, backend, bond_dim, prefer_exact=True)
    info = {key: attrs[key] for key in ("ground_energy", "particles") if key in attrs}
    if attrs.get("initial_method") in ("exact diagonalization", "DMRG"):
        info["ground_state_method"] = attrs["initial_method"]
    return psi, info


def prepare_states(model, state, times, backend: str, bond_dim: int = 128):
    """[(time or None, state, info)]: dense vectors or quimb MPS, evolved under the model to ``times``."""
    psi, info = initial_state(model, state, backend, bond_dim)
    if times is None:
        return [(None, psi, info)]
    ham = model.hamiltonian
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
    return [os.path.join(output, f"shadow_t{np.format_float_positional(t, trim='-')}.nc") for t in times]


def simulate_shadows(model, state, n_snapshots: int | None = None, ensemble_kind: str = "local", depth: int = 0,
                     shots: int = 1, times=None, noise: Noise = Noise(), backend: str = "auto",
                     bond_dim: int = 128, seed: int | None = None, settings=None, progress=None,
                     workers: int | None = None):
    """Simulated randomized measurements of a state, one shadow per time: yields (header, record chunks).

    The header is a Shadow without records (ensemble, settings, label and
    metadata); the record chunks (setting ids, outcome bits, counts) are
    produced lazily so that a writer can stream them. ``settings`` (drawn
    beforehand, with their ensemble) replaces the draw. Seeds: one
    SeedSequence per run, spawned into the settings draw and one child per
    time, each spawned again per chunk of settings. ``workers`` threads draw
    chunks (default: the number of cores; 1: one after the other); the
    records are the same for every number of workers.
    """
    shots = int(shots)
    if shots < 1 or (n_snapshots is not None and n_snapshots < 1):
        raise InputError("snapshots and shots must be at least 1", argument="snapshots")
    backend = choose_backend(model, backend)
    workers = available_cores() if workers is None else int(workers)
    if workers < 1:
        raise InputError(f"workers must be at least 1, got {workers}", argument="workers")
    seed = fresh_seed() if seed is None else int(seed)
    root = np.random.SeedSequence(seed)
    settings_seed, *time_seeds = root.spawn(1 + (1 if times is None else len(times)))
    if settings is None:
        ens = make_ensemble(ensemble_kind, model.n_qubits, depth, coupling_of(model))
        drawn = ens.draw(-(-n_snapshots // shots), np.random.default_rng(settings_seed))
    else:  # PreparedSettings, or a Shadow read from a settings file
        ens, drawn = settings.ensemble, getattr(settings, "settings", settings)
        n_snapshots = len(drawn) * shots if n_snapshots is None else n_snapshots
    if backend == "mps" and ens.kind == "global":
        raise InputError(f"the global ensemble needs the dense backend (at most {DENSE_MAX_QUBITS} qubits by default)",
                         argument="ensemble")
    header = Shadow(ensemble=ens, settings=drawn, qubit_site=model.qubit_site, model_spec=model.spec.text,
                    seed=seed, source="simulated by manybody simulate")
    for (t, psi, info), tseed in zip(prepare_states(model, state, times, backend, bond_dim), time_seeds):
        meta = {"simulated": True, "backend": backend, "state": state if isinstance(state, str) else "given",
                "shots_per_setting": shots, "state_energy": state_energy(model, psi), **noise.describe(), **info}
        if backend == "mps":
            meta["bond_dim"] = bond_dim
        label = {} if t is None else {"time": t}
        yield replace(header, label=label, metadata=meta), _records(psi, ens, drawn, shots, n_snapshots, noise,
                                                                   backend, bond_dim, tseed, meta, progress,
                                                                   workers)


def _records(psi, ens, settings, shots, n_snapshots, noise, backend, bond_dim, seed, meta, progress, workers=1):
    """Record chunks (ids, bits, counts) of one state; the largest MPS discarded weight goes into ``meta``.

    Chunk j draws from its own generator (child j of ``seed``), whichever
    thread runs it, so the records do not depend on ``workers``.
    """
    n_settings = len(settings)
    per_chunk = CIRCUIT_MPS_SETTINGS_PER_CHUNK if backend == "mps" and not ens.is_local else SETTINGS_PER_CHUNK
    chunk_seeds = seed.spawn(-(-n_settings // per_chunk))
    starts = range(0, n_settings, per_chunk)
    if backend == "mps":
        psi = mps_site_tensors(psi)  # canonical form once, shared read-only by the threads
    if not ens.is_local:
        from manybody.measure.clifford import clifford_table

        clifford_table(2)  # build the cached gate table before the threads need it

    def draw(job):
        start, cseed = job
        rng = np.random.default_rng(cseed)
        part = settings.take(slice(start, start + per_chunk))
        lost = 0.0
        if backend == "dense":
            bits = sample_dense(psi, ens, part, shots, rng)
        else:
            bits, lost = sample_mps(psi, ens, part, shots, rng, max_bond=bond_dim)
        return np.repeat(part.ids, shots), noise.apply(bits, rng), lost

    written = 0
    # BLAS on one thread for the whole run: the same arithmetic whatever the number of workers
    chunks = ordered_map_one_blas(draw, zip(starts, chunk_seeds), workers, CHUNKS_IN_FLIGHT)
    for _, (ids, bits, lost) in zip(progress(starts) if progress else starts, chunks):
        if backend == "mps" and not ens.is_local:
            meta["discarded_weight"] = max(meta.get("discarded_weight", 0.0), lost)
        keep = min(len(ids), n_snapshots - written)
        yield ids[:keep], bits[:keep], np.ones(keep, dtype=np.int64)
        written += keep


def simulate(model, state: str, n_snapshots: int, ensemble_kind: str = "local", depth: int = 0,
             shots: int = 1, times=None, noise: Noise = Noise(), backend: str = "auto", bond_dim: int = 128,
             seed: int | None = None, output: str = "shadow.nc", progress=None,
             workers: int | None = None) -> list[str]:
    """Simulate randomized measurements of a state and write shadow files; returns the paths.

    ``workers``: threads drawing chunks of settings (default: the number of cores).
    """
    runs = simulate_shadows(model, state, n_snapshots, ensemble_kind, depth, shots, times, noise, backend,
                            bond_dim, seed, progress=progress, workers=workers)
    if times is None:
        _write_runs(runs, [output])
        return [output]
    with atomic_folder(output) as folder:  # a series is written as a unit
        _write_runs(runs, output_paths(folder, times))
    return output_paths(output, times)


def _write_runs(runs, paths):
    for (header, records), path in zip(runs, paths):
        with ShadowWriter(path) as out:
            for ids, bits, counts in records:
                out.append(ids, bits, counts)
            out.finish(header)


def simulate_in_memory(*args, **kwargs) -> list:
    """The shadows of :func:`simulate_shadows` with their records in memory (numpy arrays)."""
    out = []
    for header, records in simulate_shadows(*args, **kwargs):
        parts = list(records)
        ids, bits, counts = (np.concatenate([p[i] for p in parts]) for i in range(3))
        out.append(header.with_records(ids, bits, counts))
    return out
