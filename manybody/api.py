"""The Python API: everything the command line does, for a notebook (docs/python-api.md).

    import manybody as mb
    model = mb.load_model("chain.toml")
    shadow = mb.simulate(model, "ground", snapshots=20000, seed=1)
    results = mb.estimate(shadow, subsystems=["0-3", (0, 5)])

Objects stay in memory unless a path is given. Heavy modules are imported
inside the functions, so ``import manybody`` is quick and changes no global
state. Every error for bad input is a :class:`manybody.InputError` whose
message names the argument.
"""

from __future__ import annotations

import os

import numpy as np

from manybody.errors import InputError


# ------------------------------------------------------------------- models
def parse_model(text: str, source: str = "<model spec>"):
    """A Model (lattice, Pauli sum, qubit map) from the text of a TOML model spec (docs/formats.md)."""
    from hamiltonians.spec import SpecError, parse_spec

    try:
        return parse_spec(text, source=source).build()
    except SpecError as exc:
        raise InputError(str(exc), argument="spec") from None


def load_model(path):
    """A Model from a TOML model spec file."""
    from hamiltonians.spec import SpecError
    from hamiltonians.spec import load_model as _load

    try:
        return _load(path)
    except SpecError as exc:
        raise InputError(str(exc), argument="spec") from None


def _model(model):
    """A Model from a Model, a path to a spec, or None."""
    if model is None or hasattr(model, "hamiltonian"):
        return model
    if isinstance(model, (str, os.PathLike)):
        return load_model(model)
    raise InputError(f"model: expected a Model (from load_model) or a spec path, got {type(model).__name__}",
                     argument="model")


# ----------------------------------------------------------------- settings
def draw_settings(model, ensemble: str = "local", depth: int = 0, settings: int = 100, seed=None):
    """Random measurement settings for ``model``: a PreparedSettings (``len``, ``.ensemble``, ``.to_netcdf``,
    ``.to_qasm``), to hand to the lab or to :func:`simulate`."""
    from manybody.measure.prepare import prepare_settings

    model = _model(model)
    if int(settings) < 1:
        raise InputError(f"settings must be at least 1, got {settings}", argument="settings")
    if ensemble == "shallow" and int(depth) < 0:
        raise InputError(f"depth must be 0 or more, got {depth}", argument="depth")
    try:
        return prepare_settings(model, ensemble, int(settings), int(depth) if ensemble == "shallow" else 0, seed)
    except ValueError as exc:
        if isinstance(exc, InputError):
            raise
        raise InputError(f"ensemble {ensemble!r}: {exc}", argument="ensemble") from None


# ------------------------------------------------------------------ shadows
def open_shadow(path):
    """A Shadow read lazily from a shadow file (records are read in chunks when estimating)."""
    from manybody.io.shadow import SHADOW_KIND, read_shadow

    return read_shadow(path, kinds=(SHADOW_KIND,))


def _shadow(shadow):
    if isinstance(shadow, (str, os.PathLike)):
        return open_shadow(shadow)
    if not hasattr(shadow, "chunks"):
        raise InputError(f"shadow: expected a Shadow or a path to a shadow file, got {type(shadow).__name__}",
                         argument="shadow")
    return shadow


def ingest(records_csv, settings=None, model=None, label=None, out=None, progress=None):
    """A Shadow from measurement records (CSV, docs/formats.md); written to ``out`` when given, else in memory.

    ``settings``: a settings file path or PreparedSettings (needed for shallow
    and global ensembles); ``label``: a dict such as {"time": 0.5} or a list of
    "KEY=VALUE" strings.
    """
    import tempfile

    from manybody.io.ingest import ingest as _ingest
    from manybody.io.ingest import parse_labels
    from manybody.io.shadow import SETTINGS_KIND, SHADOW_KIND, read_shadow

    settings_path = settings if isinstance(settings, (str, os.PathLike)) else "the settings"
    if isinstance(settings, (str, os.PathLike)):
        settings = read_shadow(settings, kinds=(SETTINGS_KIND, SHADOW_KIND))
    elif settings is not None and hasattr(settings, "shadow"):
        settings = settings.shadow()
    model = _model(model)
    labels = label if isinstance(label, dict) else parse_labels(label)
    if settings is not None and model is not None and model.n_qubits != settings.n_qubits:
        raise InputError(f"model: the model has {model.n_qubits} qubits but {settings_path} has "
                         f"{settings.n_qubits}", argument="model")
    kwargs = dict(n_qubits=model.n_qubits if model else None, qubit_site=model.qubit_site if model else None,
                  model_spec=model.spec.text if model else "", label=labels, settings_path=str(settings_path),
                  progress=progress)
    if out is not None:
        _ingest(records_csv, out, settings, **kwargs)
        return open_shadow(out)
    with tempfile.TemporaryDirectory() as folder:
        path = os.path.join(folder, "shadow.nc")
        _ingest(records_csv, path, settings, **kwargs)
        return _in_memory(open_shadow(path))


def _in_memory(shadow):
    """The same shadow with its records read into numpy arrays."""
    parts = list(shadow.records())
    if not parts:
        return shadow
    ids, bits, counts = (np.concatenate([p[i] for p in parts]) for i in range(3))
    return shadow.with_records(ids, bits, counts, packed=False)


# --------------------------------------------------------------- simulation
def simulate(model, state="ground", snapshots: int | None = None, ensemble: str = "local", depth: int = 0,
             shots: int = 1, times=None, noise=None, settings=None, seed=None, backend: str = "auto",
             bond_dim: int = 128, progress=None, workers: int | None = None):
    """Synthetic experiment in memory: a Shadow of ``state``, or a list of Shadows with ``times`` (a quench).

    ``state``: "ground", a product state ("neel", "zero", "one", "plus",
    "minus" or one letter per qubit from 0 1 + -), "STATE@SPEC.toml", or a
    state object (numpy vector, quimb MPS). ``noise``: a Noise, or a readout
    flip probability. ``settings``: drawn beforehand (:func:`draw_settings`);
    then ``snapshots`` defaults to settings x shots. ``workers``: threads drawing chunks of settings
    (default: the number of cores); the records do not depend on it.
    """
    from manybody.simulation.experiment import Noise, simulate_in_memory

    model = _model(model)
    if model is None:
        raise InputError("model: a model is needed to simulate", argument="model")
    if snapshots is None and settings is None:
        raise InputError("snapshots: give the number of snapshots (or settings drawn beforehand)",
                         argument="snapshots")
    if noise is None:
        noise = Noise()
    elif not isinstance(noise, Noise):
        noise = Noise(p01=float(noise), p10=float(noise))
    if times is not None:
        times = [float(t) for t in np.atleast_1d(times)]
    shadows = simulate_in_memory(model, state, snapshots, ensemble, depth, shots, times, noise, backend, bond_dim,
                                 seed, settings=settings, progress=progress, workers=workers)
    return shadows if times is not None else shadows[0]


# --------------------------------------------------------------- estimation
def subsystems_of(subsystems, n_sites: int):
    """Subsystems from label strings ("0-3", "0,2,5", "profile", or several joined by ';') or site sequences."""
    from manybody.estimation.setup import Subsystem, parse_subsystems, subsystem_of

    if subsystems is None:
        return []
    if isinstance(subsystems, str):
        return parse_subsystems(subsystems, n_sites)
    out = []
    for item in subsystems:
        if isinstance(item, Subsystem):
            out.append(subsystem_of(item.label, item.sites, n_sites))
        elif isinstance(item, str):
            out += parse_subsystems(item, n_sites)
        else:
            sites = [int(s) for s in np.atleast_1d(item)]
            out.append(subsystem_of(",".join(map(str, sites)), sites, n_sites))
    return out


def _calibration(calibration, shadow):
    from manybody.estimation.calibration import Calibration, check_same_ensemble

    if calibration is None or isinstance(calibration, Calibration):
        return calibration
    cal = _shadow(calibration)
    check_same_ensemble(cal, shadow, str(calibration) if isinstance(calibration, (str, os.PathLike))
                        else "the calibration shadow")
    return Calibration(cal)


def estimate(shadow, model=None, subsystems=(), observables=None, target=None, calibration=None,
             errors: str = "jackknife", scheduler=None, blocks: int = 20, quantities=None, bipartitions=None,
             progress=None):
    """Estimates with error bars (an xarray Dataset, docs/formats.md "Results").

    ``model=None`` uses the model stored in the shadow. ``calibration``: a
    shadow (or path) of |0...0> taken with the same ensemble, for robust
    (noise-aware) estimates. ``quantities`` picks accumulators by name
    (default: energy, correlations, purity, mutual_information; fidelity
    with a ``target``; user observables with ``observables``: "name=Z0 Z1",
    "name=0.5*X0 X1 + 0.5*Y0 Y1", a list of them, or a dict name -> expression;
    Hubbard site densities, double occupancy, spin and charge correlations and
    hoppings for Hubbard models). ``bipartitions``: "A|B" labels (e.g. "0-1|2-3;0|2") or
    (sites_A, sites_B) pairs, for the moments of the partial transpose and the
    p3-PPT entanglement test (local ensemble).
    """
    from manybody.estimation.driver import estimate as _estimate

    shadow = _shadow(shadow)
    model = _model(model) if model is not None else stored_model(shadow)
    n_sites = model.n_sites if model is not None else int(np.max(shadow.qubit_site)) + 1
    if int(blocks) < 2:
        raise InputError(f"blocks must be at least 2 for an error bar, got {blocks}", argument="blocks")
    state, description = target_state(target, model, shadow.n_qubits)
    return _estimate(shadow, model, subsystems_of(subsystems, n_sites), _calibration(calibration, shadow),
                     n_blocks=int(blocks), method=errors, quantities=quantities, progress=progress,
                     options={"target": state, "target_description": description, "bipartitions": bipartitions,
                              "observables": observables},
                     scheduler=scheduler)


def target_state(target, model, n_qubits: int):
    """A target state for the fidelity, and a description of it.

    ``target``: "ground" (the model's ground state: exact diagonalization up to
    20 qubits, DMRG beyond), a product state ("neel", "zero", ..., or one letter
    per qubit), "STATE@SPEC.toml", a state file written by
    ``manybody.io.states.write_state`` (netCDF), a numpy vector or a quimb MPS.
    """
    if target is None:
        return None, ""
    if isinstance(target, (str, os.PathLike)) and os.path.isfile(target):
        from manybody.io.states import read_state

        state, description = read_state(target), f"state file {os.fspath(target)}"
    elif isinstance(target, str):
        from manybody.references.exact import MAX_EXACT_QUBITS
        from manybody.simulation.experiment import NAMED_STATES, initial_state

        if model is None:
            raise InputError(f"target {target!r}: a model is needed to prepare it (give model=)", argument="target")
        backend = "dense" if n_qubits <= MAX_EXACT_QUBITS else "mps"
        try:
            state, description = initial_state(model, target, backend)[0], target
        except InputError as exc:
            if exc.argument != "state":
                raise
            raise InputError(f"target {target!r}: no such file, and not a state name: expected a state file, "
                             f"'ground', a name ({', '.join(NAMED_STATES[1:])}), one letter per qubit from 0, 1, +, "
                             "-, or STATE@SPEC.toml", argument="target") from None
    else:
        state, description = target, "given state"
    size = getattr(state, "L", None) or int(np.log2(max(np.size(state), 1)))
    if size != n_qubits:
        raise InputError(f"target: the state has {size} qubits but the shadow has {n_qubits}", argument="target")
    return state, description


def overlap(shadow_a, shadow_b, qubits=None, blocks: int = 20):
    """tr(rho_a rho_b) and tr(rho_a rho_b)/max(tr rho_a^2, tr rho_b^2) of two shadows (a Dataset with errors)."""
    from manybody.estimation.overlap import overlap as _overlap

    return _overlap(_shadow(shadow_a), _shadow(shadow_b), qubits=qubits, n_blocks=int(blocks))


def stored_model(shadow):
    """The model whose spec is stored in the shadow (None if it has none)."""
    return shadow.model


def estimate_series(shadows, **kwargs):
    """Estimates of several shadows (a quench series) in one Dataset with a ``time`` (or ``label``) dimension."""
    from manybody.io.results import combine_series

    shadows = [_shadow(s) for s in shadows]
    if not shadows:
        raise InputError("shadows: give at least one shadow", argument="shadows")
    if kwargs.get("scheduler") == "threads" and len(shadows) > 1:  # one task per shadow
        from manybody.threads import available_cores, ordered_map

        serial = {**kwargs, "scheduler": "sync"}  # no threads inside the threads
        results = list(ordered_map(lambda s: estimate(s, **serial), shadows, available_cores()))
        return combine_series(results, [s.label for s in shadows])
    return combine_series([estimate(s, **kwargs) for s in shadows], [s.label for s in shadows])


# --------------------------------------------------------------- references
def reference(model, state="ground", times=None, subsystems=(), observables=None, method: str = "auto",
              bond_dim: int = 128, cutoff: float = 1e-10, time_step: float = 0.05, progress=None):
    """Exact values in the results schema: dense state vectors up to 20 qubits, matrix product states beyond.

    ``times``: quench times (a list, or "T1,T2,..." or "START:STOP:COUNT");
    ``method``: "auto", "dense" or "mps" (DMRG ground states, TEBD quenches);
    ``bond_dim``, ``cutoff`` and ``time_step`` control the MPS methods.
    """
    from manybody.references import parse_time_grid
    from manybody.references import reference as _reference

    if observables is not None:
        raise InputError("observables: not available in this version of manybody", argument="observables")
    model = _model(model)
    if isinstance(times, str):
        times = parse_time_grid(times)
    elif times is not None:
        times = [float(t) for t in np.atleast_1d(times)]
    return _reference(model, state, times, subsystems_of(subsystems, model.n_sites), method=method,
                      bond_dim=bond_dim, cutoff=cutoff, progress=progress, time_step=time_step)


# ----------------------------------------------------------------- planning
def plan(model, error: float, depths=(0, 1, 2, 3), shots: int | None = 1, subsystems=(), pilot=None, distance: int = 1,
         setting_time: float | None = None, shot_time: float | None = None, observables=None, target=None):
    """Snapshots and settings needed at each depth for a one-sigma ``error`` (a Dataset; docs/design.md section 6).

    ``shots``: shots per setting; None lets the planner pick the cheapest under the cost model
    (``setting_time`` seconds per setting change, ``shot_time`` seconds per shot). ``observables``
    and ``target`` (as in :func:`estimate`) add their columns: there depth pays off.
    """
    from manybody.planning.budget import pilot_expectations
    from manybody.planning.budget import plan as _plan

    model = _model(model)
    if not float(error) > 0:
        raise InputError(f"error must be positive, got {error}", argument="error")
    depths = [int(d) for d in np.atleast_1d(depths)]
    if not depths or min(depths) < 0:
        raise InputError(f"depths {depths}: expected depths 0 or more", argument="depths")
    expectation = None
    if pilot is not None:
        pilot = _shadow(pilot)
        if pilot.n_qubits != model.n_qubits:
            raise InputError(f"pilot: the pilot has {pilot.n_qubits} qubits but the model {model.n_qubits}",
                             argument="pilot")
        expectation = pilot_expectations(pilot)
    from manybody.planning.budget import SETTING_TIME, SHOT_TIME

    costs = {"setting_time": SETTING_TIME if setting_time is None else float(setting_time),
             "shot_time": SHOT_TIME if shot_time is None else float(shot_time)}
    if not (costs["setting_time"] >= 0 and costs["shot_time"] >= 0):
        raise InputError("setting_time and shot_time must be 0 or more (seconds)", argument="setting_time")
    extra = {}
    if observables is not None:
        from manybody.measure.observables import observables_from

        extra["observables"] = [(name, op) for name, op, _ in observables_from(observables, model.n_qubits)]
    if target is not None:
        extra["target"] = target_state(target, model, model.n_qubits)[0]
    return _plan(model, float(error), depths, int(distance), subsystems_of(subsystems, model.n_sites), expectation,
                 None if shots is None else max(1, int(shots)), **costs, **extra)


# ---------------------------------------------------------------- reporting
def report(results, reference=None, out=None) -> dict:
    """Figures (matplotlib Figure objects by name) of a results Dataset; with ``out`` also PNGs and summary.txt."""
    from manybody.reporting.figures import figures, save_report

    figs = figures(results, reference)
    if out is not None:
        save_report(figs, results, out, reference)
    return figs
