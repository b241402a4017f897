"""The ``manybody`` command: a thin shell that parses, calls and prints.

Bad input (a spec, a file, an option) ends with one sentence on stderr and
exit status 2; ``--debug`` shows the traceback instead.
"""

from __future__ import annotations

import argparse
import os
import sys

import numpy as np

from hamiltonians.spec import SpecError, load_model

from . import __version__
from .errors import InputError

EXIT_BAD_INPUT = 2


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage mistakes as one sentence with exit status 2."""

    def error(self, message):
        raise InputError(f"{self.prog}: {message} (see '{self.prog} --help')")


def _formatter(prog):
    return argparse.RawDescriptionHelpFormatter(prog, max_help_position=32)


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="manybody",
        formatter_class=_formatter,
        description=(
            "Physics from randomized measurements (classical shadows) of many-body states:\n"
            "lattice models, measurement planning, estimation with error bars, exact references."),
        epilog="Start with 'manybody demo', or 'manybody model SPEC.toml --exact' for a model summary.",
    )
    parser.add_argument("--version", action="version", version=f"manybody {__version__}")
    parser.add_argument("--debug", action="store_true", help="show a traceback on errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser(
        "model", formatter_class=_formatter, help="summarise a model spec (sites, bonds, Pauli terms)",
        description="Summarise a lattice model: sites, bonds, Pauli terms and their one-norm.",
        epilog="example:\n  manybody model demo_runs/tfim_chain.toml --exact")
    p.add_argument("spec", metavar="SPEC.toml", help="model spec (TOML; see README)")
    p.add_argument("--exact", action="store_true",
                   help="also compute the ground-state energy: exact diagonalization up to "
                        "20 qubits, DMRG for larger chains and ladders")
    p.add_argument("--bond-dim", type=int, default=128, metavar="CHI",
                   help="largest DMRG bond dimension (default 128)")
    p.set_defaults(func=cmd_model)

    p = sub.add_parser(
        "prepare", formatter_class=_formatter, help="draw measurement settings (and export circuits)",
        description=(
            "Draw random measurement settings for a model and store them in a settings file.\n"
            "local: a random X/Y/Z basis per qubit. shallow: DEPTH layers of random two-qubit\n"
            "Cliffords on the lattice bonds (brickwork on a chain), then random bases. global: one\n"
            "random Clifford on all qubits. --qasm writes one OpenQASM 3 file per setting,\n"
            "setting_<id>.qasm, with the rotations to the measured bases and the measurements."),
        epilog=("examples:\n"
                "  manybody prepare demo_runs/tfim_chain.toml --ensemble local --settings 500 --seed 7 -o settings.nc\n"
                "  manybody prepare demo_runs/tfim_chain.toml --ensemble shallow --depth 2 --settings 200 \\\n"
                "      -o settings.nc --qasm circuits/"))
    p.add_argument("spec", metavar="SPEC.toml", help="model spec (sets the qubits and the coupling graph)")
    p.add_argument("--ensemble", choices=("local", "shallow", "global"), default="local",
                   help="measurement ensemble (default local)")
    p.add_argument("--depth", type=int, default=1, help="layers of two-qubit gates for --ensemble shallow (default 1)")
    p.add_argument("--settings", type=int, required=True, metavar="K", help="number of settings to draw")
    p.add_argument("--seed", type=int, default=None, help="random seed (default: fresh, recorded in the file)")
    p.add_argument("-o", "--output", required=True, metavar="settings.nc", help="settings file to write")
    p.add_argument("--qasm", metavar="DIR", help="also write one OpenQASM 3 file per setting into DIR")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cmd_prepare)

    p = sub.add_parser(
        "ingest", formatter_class=_formatter, help="turn measurement records (CSV) into a shadow file",
        description=(
            "Read measurement records and write a shadow file. One row per shot, or per distinct\n"
            "outcome with a count column; a header is required:\n"
            "  local ensemble:     setting,basis,outcome[,count]   e.g. 17,XZZYX,01101,3\n"
            "  shallow and global: setting,outcome[,count]         (needs --settings)\n"
            "Character q of basis and outcome belongs to qubit q; outcome 0 is the +1 eigenvalue."),
        epilog=("examples:\n"
                "  manybody ingest run7.csv --settings settings.nc --model spec.toml --label time=0.5 -o t05.nc\n"
                "  manybody ingest local_run.csv -o shadow.nc"))
    p.add_argument("records", metavar="RECORDS.csv", help="measurement records")
    p.add_argument("--settings", metavar="settings.nc", help="settings file from 'manybody prepare'")
    p.add_argument("--model", metavar="SPEC.toml", help="model spec to store with the shadow")
    p.add_argument("--label", action="append", metavar="KEY=VALUE",
                   help="label of this shadow, e.g. time=0.5 (repeatable)")
    p.add_argument("-o", "--output", required=True, metavar="shadow.nc", help="shadow file to write")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cmd_ingest)

    p = sub.add_parser(
        "simulate", formatter_class=_formatter, help="a synthetic experiment: snapshots of a simulated state",
        description=(
            "Simulate randomized measurements of a state of the model and write shadow files in\n"
            "the same format as 'ingest'. STATE is 'ground' (exact diagonalization or DMRG), a\n"
            "product state by name (neel, zero, one, plus, minus) or by one letter per qubit from\n"
            "0, 1, +, -. With --times the state is evolved under the model's Hamiltonian (a\n"
            "quench) and OUT is a folder with one shadow per time (shadow_t<time>.nc). The dense\n"
            f"backend is used up to {14} qubits, matrix product states (quimb) beyond."),
        epilog=("examples:\n"
                "  manybody simulate demo_runs/tfim_chain.toml --state ground --snapshots 20000 --seed 1 -o gs.nc\n"
                "  manybody simulate demo_runs/tfim_chain.toml --state neel --times 0,0.5,1,2 \\\n"
                "      --snapshots 10000 --readout-error 0.02 -o quench/"))
    p.add_argument("spec", metavar="SPEC.toml", help="model spec")
    p.add_argument("--state", required=True, help="ground, neel, zero, one, plus, minus, or letters 0 1 + -")
    p.add_argument("--snapshots", type=int, required=True, metavar="N", help="snapshots per shadow")
    p.add_argument("--ensemble", choices=("local", "shallow", "global"), default="local",
                   help="measurement ensemble (default local)")
    p.add_argument("--depth", type=int, default=1, help="layers for --ensemble shallow (default 1)")
    p.add_argument("--shots", type=int, default=1, metavar="S",
                   help="shots per setting (default 1: every snapshot its own setting)")
    p.add_argument("--times", metavar="T1,T2,...", help="quench times (in units of 1/J of the model)")
    p.add_argument("--readout-error", metavar="P or P01,P10", default="0",
                   help="readout bit-flip probability, or the pair p(0 read as 1),p(1 read as 0)")
    p.add_argument("--depolarizing", type=float, default=0.0, metavar="P",
                   help="single-qubit depolarizing probability just before the measurement")
    p.add_argument("--backend", choices=("auto", "dense", "mps"), default="auto", help="state representation")
    p.add_argument("--bond-dim", type=int, default=128, metavar="CHI", help="largest MPS bond dimension")
    p.add_argument("--seed", type=int, default=None, help="random seed (default: fresh, recorded in the files)")
    p.add_argument("-o", "--output", required=True, metavar="OUT", help="shadow file, or folder with --times")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cmd_simulate)

    p = sub.add_parser(
        "estimate", formatter_class=_formatter, help="estimates with error bars from shadow files",
        description=(
            "Estimate energy, energy density, energy variance, magnetization, correlation maps,\n"
            "purities, Renyi-2 entropies and the mutual-information map, each with a one-sigma\n"
            "error bar (delete-one-block jackknife over blocks of whole settings by default).\n"
            "Several shadows (a quench series) give one dataset with a time (or label) dimension.\n"
            "LIST: subsystems separated by ';', each an inclusive range a-b or a list a,b,c of sites;\n"
            "'profile' gives the entropy profile 0;0-1;0-2;... up to half the system."),
        epilog=("examples:\n"
                "  manybody estimate gs.nc --subsystems '0-5;0;0-1' -o results.nc\n"
                "  manybody estimate quench/*.nc --subsystems 0-5 --calibration cal.nc -o series.nc"))
    p.add_argument("shadows", nargs="+", metavar="SHADOW.nc", help="shadow files")
    p.add_argument("--model", metavar="SPEC.toml", help="model spec (default: the one stored in the shadow)")
    p.add_argument("--subsystems", metavar="LIST", help="subsystems for purities and Renyi-2 entropies")
    p.add_argument("--calibration", metavar="CAL.nc", help="shadow of |0...0> for robust (noise-aware) estimates")
    p.add_argument("--errors", choices=("jackknife", "median-of-means", "analytic"), default="jackknife",
                   help="error-bar method (default jackknife; the others apply to plain means)")
    p.add_argument("--blocks", type=int, default=20, help="jackknife blocks of settings (default 20)")
    p.add_argument("--no-mutual-information", action="store_true", help="skip the mutual-information map")
    p.add_argument("-o", "--output", required=True, metavar="results.nc", help="results dataset to write")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cmd_estimate)

    p = sub.add_parser(
        "reference", formatter_class=_formatter, help="exact values in the results schema",
        description=("Exact values of the same quantities for a state of the model (dense, up to 20\n"
                     "qubits), so that results - exact is one xarray expression."),
        epilog="example:\n  manybody reference demo_runs/tfim_chain.toml --state ground --subsystems '0-5' -o exact.nc")
    p.add_argument("spec", metavar="SPEC.toml", help="model spec")
    p.add_argument("--state", required=True, help="ground, neel, zero, one, plus, minus, or letters 0 1 + -")
    p.add_argument("--times", metavar="T1,T2,...", help="quench times")
    p.add_argument("--subsystems", metavar="LIST", help="subsystems for purities and Renyi-2 entropies")
    p.add_argument("-o", "--output", required=True, metavar="exact.nc", help="dataset to write")
    p.set_defaults(func=cmd_reference)

    p = sub.add_parser(
        "plan", formatter_class=_formatter, help="snapshot budget per circuit depth for a target error",
        description=(
            "How many snapshots each depth needs so that the energy, the energy per site, the\n"
            "correlations up to --distance and the purities of --subsystems reach a one-sigma\n"
            "error EPS. Without --pilot the per-snapshot variances are the state-independent worst\n"
            "cases; with a pilot shadow they use its estimated expectation values. Depth 0 is the\n"
            "local ensemble; depth d > 0 are shallow circuits on the model's bonds."),
        epilog=("examples:\n"
                "  manybody plan demo_runs/tfim_chain.toml --error 0.05\n"
                "  manybody plan demo_runs/tfim_chain.toml --error 0.02 --depths 0,1,2 --pilot gs.nc -o plan.nc"))
    p.add_argument("spec", metavar="SPEC.toml", help="model spec")
    p.add_argument("--error", type=float, required=True, metavar="EPS", help="target one-sigma error")
    p.add_argument("--depths", default="0,1,2,3,4", metavar="D1,D2,...", help="candidate depths (default 0-4)")
    p.add_argument("--distance", type=int, default=1, help="correlations up to this graph distance (default 1)")
    p.add_argument("--subsystems", metavar="LIST", help="subsystems whose purities must reach EPS")
    p.add_argument("--pilot", metavar="SHADOW.nc", help="pilot shadow: use its estimated expectation values")
    p.add_argument("--shots", type=int, default=1, help="shots per setting (default 1)")
    p.add_argument("-o", "--output", metavar="plan.nc", help="also write the table as a dataset")
    p.set_defaults(func=cmd_plan)

    p = sub.add_parser(
        "report", formatter_class=_formatter, help="figures (PNG) and a summary table from results",
        description=("Figures a group puts on a slide (correlation maps, energy density, Renyi-2 profile,\n"
                     "S2(t) and correlations versus time for a series, mutual information) and summary.txt\n"
                     "with error bars; with --reference the exact values are overlaid and listed."),
        epilog="example:\n  manybody report results.nc --reference exact.nc -o report/")
    p.add_argument("results", metavar="results.nc", help="dataset from 'manybody estimate'")
    p.add_argument("--reference", metavar="exact.nc", help="dataset from 'manybody reference'")
    p.add_argument("-o", "--output", required=True, metavar="DIR", help="folder for the figures and summary.txt")
    p.set_defaults(func=cmd_report)

    p = sub.add_parser(
        "demo", formatter_class=_formatter, help="run the demo scenario end to end",
        description=("Run the invented demo scenario end to end: an invented lab's quench of a 12-site\n"
                     "Ising chain (with readout errors and a calibration run) and the ground state of a\n"
                     "3 x 3 Heisenberg patch; simulate, estimate, compare with exact references, report."),
        epilog="example:\n  manybody demo -o demo_out/")
    p.add_argument("-o", "--output", default="demo_runs/out", metavar="DIR", help="output folder (default demo_runs/out)")
    p.add_argument("--quick", action="store_true", help="fewer snapshots and times (about 20 s)")
    p.add_argument("--seed", type=int, default=2026, help="random seed (default 2026)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cmd_demo)
    return parser


def cmd_model(args) -> int:
    from .exact import MAX_EXACT_QUBITS, ground_state, ground_state_mps

    model = load_model(args.spec)
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
            energy, _ = ground_state(ham)
            how = f"exact diagonalization, {n} qubits"
        elif lat.is_one_dimensional:
            energy, _ = ground_state_mps(ham, bond_dims=_ramp(args.bond_dim))
            how = f"DMRG, bond dimension up to {args.bond_dim}"
        else:
            raise InputError(f"{args.spec}: {n} qubits on a {lat.kind} lattice are too many for exact "
                             f"diagonalization (at most {MAX_EXACT_QUBITS}) and DMRG here takes only "
                             "chains and ladders")
        if spec.kind == "hubbard":
            how += ", lowest over all particle numbers"
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
    from .prepare import prepare_settings
    from .qasm import write_qasm_files
    from .shadow import write_shadow

    if args.settings < 1:
        raise InputError(f"--settings must be at least 1, got {args.settings}")
    if args.ensemble == "shallow" and args.depth < 0:
        raise InputError(f"--depth must be 0 or more, got {args.depth}")
    model = load_model(args.spec)
    depth = args.depth if args.ensemble == "shallow" else 0
    try:
        shadow = prepare_settings(model, args.ensemble, args.settings, depth, args.seed)
    except ValueError as exc:
        raise InputError(f"{args.spec}: {exc}") from None
    write_shadow(shadow, args.output)
    print(f"wrote {args.settings} settings ({shadow.ensemble.describe()}, seed {shadow.seed}) to {args.output}")
    if args.qasm:
        count = write_qasm_files(shadow.ensemble, shadow.settings, args.qasm,
                                 progress_bar(args, desc="qasm", unit="file"))
        print(f"wrote {count} OpenQASM 3 files to {args.qasm}")
    return 0


def cmd_ingest(args) -> int:
    from .ingest import ingest, parse_labels
    from .records import BLOCK_BYTES
    from .shadow import SETTINGS_KIND, SHADOW_KIND, read_shadow

    labels = parse_labels(args.label)
    settings = read_shadow(args.settings, kinds=(SETTINGS_KIND, SHADOW_KIND)) if args.settings else None
    model = load_model(args.model) if args.model else None
    if settings is not None and model is not None and model.n_qubits != settings.n_qubits:
        raise InputError(f"{args.model}: the model has {model.n_qubits} qubits but {args.settings} "
                         f"has {settings.n_qubits}")
    shadow, n_records, n_snapshots = ingest(
        args.records, args.output, settings, n_qubits=model.n_qubits if model else None,
        qubit_site=model.qubit_site if model else None, model_spec=model.spec.text if model else "",
        label=labels, settings_path=args.settings or "the settings file",
        progress=progress_bar(args, desc="records", unit="block",
                              total=-(-os.path.getsize(args.records) // BLOCK_BYTES) if os.path.exists(args.records)
                              else None))
    label = ", ".join(f"{k} = {v}" for k, v in shadow.label.items())
    print(f"wrote {n_snapshots} snapshots in {n_records} records over "
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


def _times(text: str) -> list[float]:
    try:
        times = [float(t) for t in text.split(",") if t.strip()]
    except ValueError:
        raise InputError(f"--times {text!r}: expected numbers separated by commas, e.g. 0,0.5,1") from None
    if not times or any(t < 0 for t in times) or sorted(times) != times:
        raise InputError(f"--times {text!r}: expected non-negative times in increasing order")
    return times


def cmd_simulate(args) -> int:
    from .simulate import Noise, simulate

    parts = args.readout_error.split(",")
    if len(parts) not in (1, 2):
        raise InputError(f"--readout-error {args.readout_error!r}: expected P or P01,P10")
    flips = [_probability(p, "--readout-error") for p in parts]
    depol = _probability(str(args.depolarizing), "--depolarizing")
    noise = Noise(p01=flips[0], p10=flips[-1], depolarizing=depol)
    times = _times(args.times) if args.times else None
    model = load_model(args.spec)
    depth = args.depth if args.ensemble == "shallow" else 0
    paths = simulate(model, args.state, args.snapshots, args.ensemble, depth, args.shots, times, noise,
                     args.backend, args.bond_dim, args.seed, args.output,
                     progress=progress_bar(args, desc="settings", unit="chunk"))
    for path in paths:
        print(f"wrote {path}")
    return 0


def _model_of(args, shadow, path):
    from hamiltonians.spec import parse_spec

    if args.model:
        return load_model(args.model)
    if shadow.model_spec:
        return parse_spec(shadow.model_spec, source=f"{path} (stored model spec)").build()
    return None


def cmd_estimate(args) -> int:
    import warnings

    from .calibration import Calibration, check_same_ensemble
    from .estimate import estimate, parse_subsystems
    from .results import combine_series, write_dataset
    from .shadow import SHADOW_KIND, read_shadow

    shadows = [read_shadow(p, kinds=(SHADOW_KIND,)) for p in args.shadows]
    calibration = None
    if args.calibration:
        cal = read_shadow(args.calibration, kinds=(SHADOW_KIND,))
        for path, shadow in zip(args.shadows, shadows):
            check_same_ensemble(cal, shadow, args.calibration)
        calibration = Calibration(cal)
    results = []
    for path, shadow in zip(args.shadows, shadows):
        model = _model_of(args, shadow, path)
        n_sites = model.n_sites if model is not None else int(np.max(shadow.qubit_site)) + 1
        subsystems = parse_subsystems(args.subsystems, n_sites)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", RuntimeWarning)
            try:
                ds = estimate(shadow, model, subsystems, calibration, n_blocks=args.blocks, method=args.errors,
                              mutual_information=not args.no_mutual_information,
                              progress=progress_bar(args, desc=os.path.basename(path), unit="chunk"))
            except InputError as exc:
                raise InputError(f"{path}: {exc}") from None
        for w in caught:
            print(f"warning: {path}: {w.message}", file=sys.stderr)
        results.append(ds)
        _print_summary(path, ds)
    write_dataset(combine_series(results, [s.label for s in shadows]), args.output)
    print(f"wrote {args.output}")
    return 0


def _print_summary(path, ds):
    parts = [f"{path}: {ds.attrs['n_snapshots']} snapshots"]
    if "energy" in ds:
        parts.append(f"energy {float(ds.energy):.5g} +- {float(ds.energy_err):.2g}")
    if "renyi2" in ds:
        for label, s2, err in zip(ds.subsystem.values, ds.renyi2.values, ds.renyi2_err.values):
            parts.append(f"S2[{label}] {s2:.4g} +- {err:.2g}")
    print("; ".join(parts))


def cmd_reference(args) -> int:
    from .estimate import parse_subsystems
    from .reference import reference_dataset
    from .results import combine_series, write_dataset
    from .simulate import prepare_states

    model = load_model(args.spec)
    if model.n_qubits > 20:
        raise InputError(f"{args.spec}: {model.n_qubits} qubits are too many for the dense reference (at most 20)")
    subsystems = parse_subsystems(args.subsystems, model.n_sites)
    times = _times(args.times) if args.times else None
    states = prepare_states(model, args.state, times, "dense")
    labels = [{} if t is None else {"time": t} for t, _, _ in states]
    datasets = [reference_dataset(model, psi, subsystems, lab) for (t, psi, _), lab in zip(states, labels)]
    write_dataset(combine_series(datasets, labels), args.output)
    print(f"wrote {args.output}")
    return 0


def cmd_plan(args) -> int:
    from .estimate import parse_subsystems
    from .plan import format_plan, pilot_expectations, plan
    from .results import write_dataset
    from .shadow import SHADOW_KIND, read_shadow

    if not args.error > 0:
        raise InputError(f"--error must be positive, got {args.error}")
    try:
        depths = [int(d) for d in args.depths.split(",") if d.strip()]
    except ValueError:
        raise InputError(f"--depths {args.depths!r}: expected whole numbers separated by commas") from None
    if not depths or min(depths) < 0:
        raise InputError(f"--depths {args.depths!r}: expected depths 0 or more")
    model = load_model(args.spec)
    expectation = None
    if args.pilot:
        pilot = read_shadow(args.pilot, kinds=(SHADOW_KIND,))
        if pilot.n_qubits != model.n_qubits:
            raise InputError(f"{args.pilot}: the pilot has {pilot.n_qubits} qubits but the model {model.n_qubits}")
        expectation = pilot_expectations(pilot)
    ds = plan(model, args.error, depths, args.distance, parse_subsystems(args.subsystems, model.n_sites),
              expectation, max(1, args.shots))
    print(format_plan(ds))
    if args.output:
        write_dataset(ds, args.output)
        print(f"wrote {args.output}")
    return 0


def cmd_report(args) -> int:
    import xarray as xr

    from .report import write_report

    def open_results(path):
        if not os.path.exists(path):
            raise InputError(f"{path}: no such file")
        try:
            return xr.open_dataset(path, engine="h5netcdf").load()
        except Exception as exc:
            raise InputError(f"{path}: not a readable results dataset ({type(exc).__name__})") from None

    results = open_results(args.results)
    reference = open_results(args.reference) if args.reference else None
    for path in write_report(results, args.output, reference):
        print(f"wrote {path}")
    return 0


def cmd_demo(args) -> int:
    from .demo import run_demo

    run_demo(args.output, quick=args.quick, seed=args.seed,
             progress=progress_bar(args, desc="snapshots", unit="chunk"))
    return 0


def main(argv=None) -> int:
    parser = build_parser()
    argv = sys.argv[1:] if argv is None else list(argv)
    debug = "--debug" in argv
    try:
        args = parser.parse_args(argv)
        if not getattr(args, "func", None):
            parser.print_help()
            return 0
        return int(args.func(args) or 0)
    except (InputError, SpecError) as exc:
        if debug:
            raise
        print(f"error: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
