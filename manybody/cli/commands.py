"""What each ``manybody`` command does: call the library, print what it wrote.

The parsing lives in :mod:`manybody.cli`; these functions take the parsed
arguments, raise :class:`InputError` for bad input and return an exit status.
"""

from __future__ import annotations

import contextlib
import os
import sys
import warnings

import manybody as mb
from manybody.errors import InputError
from manybody.io.files import refuse_overwrite


def cmd_model(args) -> int:
    from manybody.references.exact import MAX_EXACT_QUBITS, ground_state, ground_state_mps

    model = mb.load_model(args.spec)
    spec, lat, ham = model.spec, model.lattice, model.hamiltonian
    params = ", ".join(f"{k} = {v:g}" for k, v in spec.parameters.items())
    units = "spin units (S = sigma/2), converted to Pauli units" if spec.units == "spin" else "Pauli units"
    n_custom = f", {len(spec.terms)} custom term(s)" if spec.terms else ""
    combined = ham.combined()
    rows = [
        ("model", f"{spec.kind}" + (f" ({params})" if params else "") + n_custom + f"; {units}"),
        ("lattice", f"{lat.describe()}: {lat.n_sites} sites, {len(lat.bonds)} bonds, "
                    f"{len(lat.next_bonds)} next-nearest bonds"),
        ("qubits", f"{model.n_qubits}" + (" (2 per site: spin up, spin down)" if spec.kind == "hubbard" else "")),
        ("terms", f"{len(combined)} Pauli strings, weight at most {int(combined.weights.max(initial=0))}"),
        ("norm", f"{combined.norm1():.6g} (sum of |c| over non-identity strings)"),
    ]
    if args.exact:
        n = model.n_qubits
        if n <= MAX_EXACT_QUBITS:
            energy, _ = ground_state(ham, model.sector)
            how = f"exact diagonalization, {n} qubits"
        elif model.sector is not None:
            raise InputError(f"{args.spec}: ground states in a particle sector need exact diagonalization, at most "
                             f"{MAX_EXACT_QUBITS} qubits; this model has {n}")
        elif lat.is_one_dimensional:
            energy, _ = ground_state_mps(ham, bond_dims=_ramp(args.bond_dim))
            how = f"DMRG, bond dimension up to {args.bond_dim}"
        else:
            raise InputError(f"{args.spec}: {n} qubits on a {lat.kind} lattice are too many for exact "
                             f"diagonalization (at most {MAX_EXACT_QUBITS}) and DMRG here takes only "
                             "chains and ladders")
        if spec.kind == "hubbard":
            how += (f", {model.sector[0]} up and {model.sector[1]} down" if model.sector
                    else ", lowest over all particle numbers (set particles = [up, down] in [model])")
        rows.append(("ground energy", f"{energy:.10g} ({how})"))
        rows.append(("per site", f"{energy / lat.n_sites:.10g}"))
    width = max(len(k) for k, _ in rows)
    print("\n".join(f"{k:<{width}}  {v}" for k, v in rows))
    return 0


def _ramp(chi: int) -> list[int]:
    dims = [d for d in (16, 32, 64, 128, 256, 512) if d < chi]
    return dims + [chi]


def progress_bar(args, **kwargs):
    """A tqdm wrapper, silent with --quiet or when stderr is not a terminal."""
    from tqdm import tqdm

    disable = getattr(args, "quiet", False) or not sys.stderr.isatty()
    return lambda it: tqdm(it, disable=disable, **kwargs)


def cmd_prepare(args) -> int:
    refuse_overwrite(args.output, [args.spec])
    if args.qasm and os.path.exists(args.qasm) and not os.path.isdir(args.qasm):
        raise InputError(f"--qasm {args.qasm}: is a file; give a folder for the OpenQASM files")
    prepared = mb.draw_settings(args.spec, args.ensemble, args.depth, args.settings, args.seed)
    prepared.to_netcdf(args.output)
    print(f"wrote {len(prepared)} settings ({prepared.ensemble.describe()}, seed {prepared.seed}) to {args.output}")
    if args.qasm:
        count = prepared.to_qasm(args.qasm, progress_bar(args, desc="qasm", unit="file"))
        print(f"wrote {count} OpenQASM 3 files to {args.qasm}")
    return 0


def cmd_ingest(args) -> int:
    from manybody.io.records import BLOCK_BYTES

    refuse_overwrite(args.output, [args.records, args.settings, args.model])
    size = os.path.getsize(args.records) if os.path.exists(args.records) else None
    shadow = mb.ingest(args.records, settings=args.settings, model=args.model, label=args.label, out=args.output,
                       progress=progress_bar(args, desc="records", unit="block",
                                             total=None if size is None else -(-size // BLOCK_BYTES)))
    label = ", ".join(f"{k} = {v}" for k, v in shadow.label.items())
    print(f"wrote {shadow.n_snapshots} snapshots in {shadow.n_records} records over "
          f"{len(shadow.settings)} settings ({shadow.ensemble.kind} ensemble, {shadow.n_qubits} qubits"
          + (f"; {label}" if label else "") + f") to {args.output}")
    return 0


def _probability(text: str, what: str) -> float:
    try:
        p = float(text)
    except ValueError:
        raise InputError(f"{what} {text!r} is not a number") from None
    if not 0 <= p <= 0.5:
        raise InputError(f"{what} {text!r} must lie between 0 and 0.5")
    return p


def cmd_simulate(args) -> int:
    from manybody.simulation.experiment import Noise, simulate

    parts = args.readout_error.split(",")
    if len(parts) not in (1, 2):
        raise InputError(f"--readout-error {args.readout_error!r}: expected P or P01,P10")
    flips = [_probability(p, "--readout-error") for p in parts]
    depol = _probability(str(args.depolarizing), "--depolarizing")
    noise = Noise(p01=flips[0], p10=flips[-1], depolarizing=depol)
    from manybody.references import parse_time_grid

    times = parse_time_grid(args.times) if args.times else None
    model = mb.load_model(args.spec)
    depth = args.depth if args.ensemble == "shallow" else 0
    if times is None:
        refuse_overwrite(args.output, [args.spec])
    elif os.path.exists(args.output) and not os.path.isdir(args.output):
        raise InputError(f"-o {args.output}: is a file; with --times give a folder for the shadow files")
    paths = simulate(model, args.state, args.snapshots, args.ensemble, depth, args.shots, times, noise,
                     args.backend, args.bond_dim, args.seed, args.output,
                     progress=progress_bar(args, desc="settings", unit="chunk"), workers=args.workers)
    for path in paths:
        print(f"wrote {path}")
    return 0


@contextlib.contextmanager
def warnings_as_lines(prefix: str = ""):
    """RuntimeWarnings inside are printed at once to stderr, one line each: 'warning: PREFIX message'."""
    with warnings.catch_warnings():
        warnings.simplefilter("always", RuntimeWarning)
        warnings.showwarning = lambda message, *_, **__: print(f"warning: {prefix}{message}", file=sys.stderr)
        yield


def cmd_estimate(args) -> int:
    from manybody.io.results import combine_series, write_dataset

    target_file = args.target if args.target and os.path.isfile(args.target) else None
    refuse_overwrite(args.output, [*args.shadows, args.calibration, args.model, target_file, args.observables_file,
                                   args.overlap])
    observables = list(args.observable or [])
    if args.observables_file:
        from manybody.measure.observables import load_observables

        observables += load_observables(args.observables_file)
    other = mb.open_shadow(args.overlap) if args.overlap else None
    shadows = [mb.open_shadow(p) for p in args.shadows]
    calibration = None
    if args.calibration:
        from manybody.estimation.calibration import Calibration, check_same_ensemble

        cal = mb.open_shadow(args.calibration)
        for shadow in shadows:
            check_same_ensemble(cal, shadow, args.calibration)
        calibration = Calibration(cal)
    results = []
    for path, shadow in zip(args.shadows, shadows):
        with warnings_as_lines(f"{path}: "):  # some announce a long pass
            try:
                ds = mb.estimate(shadow, model=args.model, subsystems=args.subsystems, calibration=calibration,
                                 target=args.target, bipartitions=args.bipartitions, scheduler=args.scheduler,
                                 observables=observables or None,
                                 errors=args.errors,
                                 blocks=args.blocks,
                                 quantities=None if not args.no_mutual_information else
                                 ("energy", "correlations", "purity", "fidelity", "observables", "hubbard",
                                  "pt_moments"),
                                 progress=progress_bar(args, desc=os.path.basename(path), unit="chunk"))
            except InputError as exc:
                raise InputError(f"{path}: {exc}", argument=exc.argument) from None
            if other is not None:
                ds = ds.assign(_overlap_variables(mb.overlap(shadow, other, qubits=_qubit_list(args.overlap_qubits),
                                                             blocks=args.blocks)))
        results.append(ds)
        _print_summary(path, ds)
    write_dataset(combine_series(results, [s.label for s in shadows]), args.output)
    print(f"wrote {args.output}")
    return 0


def _qubit_list(text):
    """'0-9' or '0,2,5' (or None: every qubit) as a list of qubit numbers, written like a subsystem."""
    from manybody.estimation.setup import indices_of_label

    return None if text is None else list(indices_of_label(text.strip(), "qubits", unit="qubits"))


def _overlap_variables(ds) -> dict:
    """The overlap variables (estimates, errors, intervals) of an overlap dataset."""
    return {name: ds[name] for name in ds.data_vars if name.startswith(("overlap", "normalized_overlap"))}


def _print_summary(path, ds):
    parts = [f"{path}: {ds.attrs['n_snapshots']} snapshots"]
    if "energy" in ds:
        parts.append(f"energy {float(ds.energy):.5g} +- {float(ds.energy_err):.2g}")
    if "fidelity" in ds:
        parts.append(f"fidelity {float(ds.fidelity):.4g} +- {float(ds.fidelity_err):.2g}")
    if "overlap" in ds:
        parts.append(f"overlap {float(ds.overlap):.4g} +- {float(ds.overlap_err):.2g} (normalised "
                     f"{float(ds.normalized_overlap):.4g} +- {float(ds.normalized_overlap_err):.2g})")
    if "observable" in ds:
        for name, value, err in zip(ds.observable_name.values, ds.observable.values, ds.observable_err.values):
            parts.append(f"{name} {value:.4g} +- {err:.2g}")
    if "ppt_significance" in ds:
        for label, sig in zip(ds.bipartition.values, ds.ppt_significance.values):
            parts.append(f"p3-PPT[{label}] {sig:+.1f} sigma")
    if "renyi2" in ds:
        for label, s2, err in zip(ds.subsystem.values, ds.renyi2.values, ds.renyi2_err.values):
            parts.append(f"S2[{label}] {s2:.4g} +- {err:.2g}")
    print("; ".join(parts))


def cmd_reference(args) -> int:
    from manybody.io.results import write_dataset

    refuse_overwrite(args.output, [args.spec])
    ds = mb.reference(args.spec, args.state, args.times, args.subsystems, method=args.method,
                      bond_dim=args.bond_dim, cutoff=args.cutoff, time_step=args.time_step,
                      progress=progress_bar(args, desc="times", unit="time"))
    write_dataset(ds, args.output)
    print(f"wrote {args.output} ({ds.attrs.get('method', 'exact')}"
          + (f", {ds.sizes['time']} times" if "time" in ds.dims else "") + ")")
    return 0


def cmd_plan(args) -> int:
    from manybody.io.results import write_dataset
    from manybody.planning.budget import format_plan

    try:
        depths = [int(d) for d in args.depths.split(",") if d.strip()]
    except ValueError:
        raise InputError(f"--depths {args.depths!r}: expected whole numbers separated by commas") from None
    refuse_overwrite(args.output, [args.spec, args.pilot])
    refuse_overwrite(args.figure, [args.spec, args.pilot])
    with warnings_as_lines():
        ds = mb.plan(args.spec, args.error, depths, args.shots, args.subsystems, args.pilot, args.distance,
                     setting_time=args.setting_time, shot_time=args.shot_time, observables=args.observable,
                     target=args.target)
    print(format_plan(ds))
    if args.figure:
        from manybody.io.files import atomic_path
        from manybody.reporting.plan import plan_figure

        with atomic_path(args.figure, os.path.splitext(args.figure)[1]) as tmp:
            plan_figure(ds).savefig(tmp, dpi=150)
        print(f"wrote {args.figure}")
    if args.output:
        write_dataset(ds, args.output)
        print(f"wrote {args.output}")
    return 0


def cmd_report(args) -> int:
    import xarray as xr

    from manybody.reporting.figures import figures, save_report
    from manybody.reporting.frames import check_results, match_reference

    def open_dataset(path, what):
        if not os.path.isfile(path):
            raise InputError(f"{path}: no such file" if not os.path.exists(path) else f"{path}: is not a file")
        try:
            return xr.load_dataset(path, engine="h5netcdf")
        except Exception as exc:  # noqa: BLE001 - h5py and xarray raise many kinds for foreign files
            raise InputError(f"{path}: not a {what} (not a readable netCDF-4 file: {type(exc).__name__})") from None

    results = open_dataset(args.results, "results dataset")
    check_results(results, args.results)
    reference = open_dataset(args.reference, "reference dataset") if args.reference else None
    try:
        match_reference(results, reference)
    except InputError as exc:
        raise InputError(f"{args.reference}: {str(exc).removeprefix('reference: ')}") from None
    model = mb.load_model(args.model) if args.model else None
    figs = figures(results, reference, time=args.time, axis=args.axis[0], model=model)
    for path in save_report(figs, results, args.output, reference, fmt=args.format, dpi=args.dpi):
        print(f"wrote {path}")
    return 0


def cmd_demo(args) -> int:
    from manybody.demo import run_demo

    if os.path.exists(args.output) and not os.path.isdir(args.output):
        raise InputError(f"-o {args.output}: is a file; the demo writes a folder")
    run_demo(args.output, quick=args.quick, seed=args.seed,
             progress=progress_bar(args, desc="snapshots", unit="chunk"))
    return 0
