"""The ``manybody`` command: a thin shell that parses, calls and prints.

Bad input (a spec, a file, an option) ends with one sentence on stderr and
exit status 2; ``--debug`` shows the traceback instead.
"""

from __future__ import annotations

import argparse
import re
import sys

from hamiltonians.spec import SpecError
from manybody import __version__
from manybody.cli.commands import (
    cmd_demo,
    cmd_estimate,
    cmd_ingest,
    cmd_model,
    cmd_plan,
    cmd_prepare,
    cmd_reference,
    cmd_report,
    cmd_simulate,
)
from manybody.errors import InputError

EXIT_BAD_INPUT = 2


class _Parser(argparse.ArgumentParser):
    """argparse that reports usage mistakes as one sentence with exit status 2."""

    def error(self, message):
        message = re.sub(r"^argument (-[-\w]+)(?:/[-\w]+)?: (must )", r"\1 \2", message)  # "--settings must be ..."
        raise InputError(f"{self.prog}: {message} (see '{self.prog} --help')")


def whole(minimum: int = 0, maximum: int | None = None):
    """An argparse type: a whole number within [minimum, maximum]."""
    def convert(text):
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
        if value < minimum or (maximum is not None and value > maximum):
            bound = f"from {minimum} to {maximum}" if maximum is not None else f"at least {minimum}"
            raise argparse.ArgumentTypeError(f"must be {bound}, got {text}")
        return value
    return convert


def number(minimum: float, maximum: float, inclusive: bool = True):
    """An argparse type: a finite number within [minimum, maximum] (or (minimum, maximum])."""
    def convert(text):
        try:
            value = float(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
        low_ok = value >= minimum if inclusive else value > minimum
        if not (low_ok and value <= maximum):
            if value <= 0 < minimum or (value <= 0 == minimum and not inclusive):
                raise argparse.ArgumentTypeError(f"must be positive, got {text}")
            low = "from" if inclusive else "above"
            raise argparse.ArgumentTypeError(f"must be {low} {minimum:g} up to {maximum:g}, got {text}")
        return value
    return convert


SEED = whole(0, 2**63 - 1)
BOND_DIM = whole(1, 4096)


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
    p.add_argument("--bond-dim", type=BOND_DIM, default=128, metavar="CHI",
                   help="largest DMRG bond dimension (default 128)")
    p.set_defaults(func=cmd_model)

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
    p.add_argument("--error", type=number(1e-8, 1e6, inclusive=False), required=True, metavar="EPS", help="target one-sigma error")
    p.add_argument("--depths", default="0,1,2,3,4", metavar="D1,D2,...", help="candidate depths (default 0-4)")
    p.add_argument("--distance", type=whole(1, 1000), default=1, help="correlations up to this graph distance (default 1)")
    p.add_argument("--subsystems", metavar="LIST", help="subsystems whose purities must reach EPS")
    p.add_argument("--pilot", metavar="SHADOW.nc", help="pilot shadow: use its estimated expectation values")
    p.add_argument("--shots", type=whole(1), default=None,
                   help="shots per setting (default: the cheapest under the cost model below)")
    p.add_argument("--observable", action="append", metavar="NAME=EXPR",
                   help="also plan for this Pauli string or sum, e.g. 'string=Z0 Z1 Z2 Z3' (repeatable)")
    p.add_argument("--target", metavar="STATE", help="also plan for the fidelity to this state (ground, a product "
                                                     "state, STATE@SPEC.toml or a state file)")
    p.add_argument("--figure", metavar="PLAN.png", help="draw the predicted error of every quantity against depth")
    p.add_argument("--setting-time", type=number(0.0, 1e6), default=None, metavar="SECONDS",
                   help="time to change the setting (default 0.1 s)")
    p.add_argument("--shot-time", type=number(0.0, 1e6), default=None, metavar="SECONDS",
                   help="time per shot (default 0.001 s)")
    p.add_argument("-o", "--output", metavar="plan.nc", help="also write the table as a dataset")
    p.set_defaults(func=cmd_plan)

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
    p.add_argument("--depth", type=whole(0, 1000), default=1, help="layers of two-qubit gates for --ensemble shallow (default 1)")
    p.add_argument("--settings", type=whole(1), required=True, metavar="K", help="number of settings to draw")
    p.add_argument("--seed", type=SEED, default=None, help="random seed (default: fresh, recorded in the file)")
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
    p.add_argument("--snapshots", type=whole(1), required=True, metavar="N", help="snapshots per shadow")
    p.add_argument("--ensemble", choices=("local", "shallow", "global"), default="local",
                   help="measurement ensemble (default local)")
    p.add_argument("--depth", type=whole(0, 1000), default=1, help="layers for --ensemble shallow (default 1)")
    p.add_argument("--shots", type=whole(1), default=1, metavar="S",
                   help="shots per setting (default 1: every snapshot its own setting)")
    p.add_argument("--times", metavar="T1,T2,...", help="quench times (T1,T2,... or START:STOP:COUNT), in units of "
                                                        "1/(energy unit of the couplings), hbar = 1")
    p.add_argument("--readout-error", metavar="P or P01,P10", default="0",
                   help="readout bit-flip probability, or the pair p(0 read as 1),p(1 read as 0)")
    p.add_argument("--depolarizing", type=number(0.0, 0.5), default=0.0, metavar="P",
                   help="single-qubit depolarizing probability just before the measurement")
    p.add_argument("--backend", choices=("auto", "dense", "mps"), default="auto", help="state representation")
    p.add_argument("--bond-dim", type=BOND_DIM, default=128, metavar="CHI", help="largest MPS bond dimension")
    p.add_argument("--seed", type=SEED, default=None, help="random seed (default: fresh, recorded in the files)")
    p.add_argument("--workers", type=whole(1, 1024), default=None, metavar="W",
                   help="threads drawing chunks of settings at once (default: the number of cores); the records "
                        "are the same for any W")
    p.add_argument("-o", "--output", required=True, metavar="OUT", help="shadow file, or folder with --times")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cmd_simulate)

    p = sub.add_parser(
        "estimate", formatter_class=_formatter, help="estimates with error bars from shadow files",
        description=(
            "Estimate energy, energy density, energy variance, magnetization, correlation maps,\n"
            "purities, Renyi-2 entropies and the mutual-information map (Hubbard models: densities,\n"
            "double occupancy, spin and charge correlations, hoppings), and on request the fidelity\n"
            "to a target, your own Pauli observables, the overlap with another shadow and the\n"
            "moments of the partial transpose. Each comes with a one-sigma error bar (delete-one-block\n"
            "jackknife over blocks of whole settings) and, where the spread is skewed, an interval\n"
            "x_lo, x_hi.\n"
            "Several shadows (a quench series) give one dataset with a time (or label) dimension.\n"
            "LIST: subsystems separated by ';', each an inclusive range a-b or a list a,b,c of sites;\n"
            "'profile' gives the entropy profile 0;0-1;0-2;... up to half the system."),
        epilog=("examples:\n"
                "  manybody estimate gs.nc --subsystems '0-5;0;0-1' -o results.nc\n"
                "  manybody estimate quench/*.nc --subsystems 0-5 --calibration cal.nc -o series.nc\n"
                "  manybody estimate gs.nc --target ground -o fidelity.nc"))
    p.add_argument("shadows", nargs="+", metavar="SHADOW.nc", help="shadow files")
    p.add_argument("--model", metavar="SPEC.toml", help="model spec (default: the one stored in the shadow)")
    p.add_argument("--subsystems", metavar="LIST", help="subsystems for purities and Renyi-2 entropies")
    p.add_argument("--calibration", metavar="CAL.nc", help="shadow of |0...0> for robust (noise-aware) estimates")
    p.add_argument("--observable", action="append", metavar="NAME=EXPR",
                   help="a Pauli string or sum to estimate, e.g. 'string=Z0 Z1 Z2 Z3' or 'xy=0.5*X0 X1 + 0.5*Y0 Y1' "
                        "(repeatable; qubit numbers from 0)")
    p.add_argument("--observables-file", metavar="OBS.toml", help="named observables in a TOML file (docs/formats.md)")
    p.add_argument("--overlap", metavar="OTHER.nc",
                   help="also estimate tr(rho rho_other) and its normalised form with another shadow of the same qubits")
    p.add_argument("--overlap-qubits", metavar="QUBITS",
                   help="compare the two shadows on these qubits only, e.g. 0-9 or 0,2,5 (default all; circuit "
                        "ensembles take at most 14)")
    p.add_argument("--scheduler", metavar="WHERE",
                   help="where the parts of the records are accumulated: 'threads' (a pool on this machine, the "
                        "default with more than one core), 'sync' (this thread) or a dask.distributed scheduler "
                        "address such as tcp://host:8786; the results are the same")
    p.add_argument("--bipartitions", metavar="A|B;...",
                   help="moments of the partial transpose and the p3-PPT entanglement test of rho_AB, e.g. "
                        "'0-1|2-3' (local ensemble, |A|+|B| <= 6 sites)")
    p.add_argument("--target", metavar="STATE",
                   help="also estimate the fidelity <psi|rho|psi> to this state: ground (of the model), a product "
                        "state (neel, zero, ... or letters 0 1 + -), STATE@SPEC.toml, or a state file (.nc)")
    p.add_argument("--errors", choices=("jackknife", "median-of-means", "analytic"), default="jackknife",
                   help="error-bar method (default jackknife; the others apply to plain means)")
    p.add_argument("--blocks", type=whole(2, 10000), default=20, help="jackknife blocks of settings (default 20)")
    p.add_argument("--no-mutual-information", action="store_true", help="skip the mutual-information map")
    p.add_argument("-o", "--output", required=True, metavar="results.nc", help="results dataset to write")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cmd_estimate)

    p = sub.add_parser(
        "reference", formatter_class=_formatter, help="exact values in the results schema",
        description=("Exact values of the same quantities for a state of the model, so that results - exact is\n"
                     "one xarray expression: dense state vectors up to 20 qubits; beyond, matrix product\n"
                     "states (DMRG ground states, TEBD quenches) for chains and ladders. --times takes a list\n"
                     "or a grid START:STOP:COUNT, so that an exact curve can be drawn between measured times.\n"
                     "Times are in units of 1/(energy unit of the couplings), hbar = 1."),
        epilog=("examples:\n"
                "  manybody reference demo_runs/tfim_chain.toml --state ground --subsystems '0-5' -o exact.nc\n"
                "  manybody reference chain40.toml --state zero --times 0:2:41 --bond-dim 64 -o exact.nc"))
    p.add_argument("spec", metavar="SPEC.toml", help="model spec")
    p.add_argument("--state", required=True, help="ground, neel, zero, one, plus, minus, letters 0 1 + -, or "
                                                   "STATE@SPEC.toml (that state of another model)")
    p.add_argument("--times", metavar="T1,T2,... or START:STOP:COUNT", help="quench times")
    p.add_argument("--subsystems", metavar="LIST", help="subsystems for purities and Renyi-2 entropies")
    p.add_argument("--method", choices=("auto", "dense", "mps"), default="auto",
                   help="dense state vectors or matrix product states (default auto: dense up to 20 qubits)")
    p.add_argument("--bond-dim", type=BOND_DIM, default=128, metavar="CHI", help="largest MPS bond dimension (default 128)")
    p.add_argument("--cutoff", type=number(0.0, 0.1), default=1e-10, help="MPS singular-value cutoff (default 1e-10)")
    p.add_argument("--time-step", type=number(0.0, 10.0, inclusive=False), default=0.05, help="TEBD time step (default 0.05)")
    p.add_argument("-o", "--output", required=True, metavar="exact.nc", help="dataset to write")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cmd_reference)

    p = sub.add_parser(
        "report", formatter_class=_formatter, help="figures and a summary table from results",
        description=("Figures a group puts on a slide (correlation maps, correlations on the lattice with\n"
                     "its bonds, magnetization, energy density, Renyi-2 profile by subsystem, mutual\n"
                     "information, structure factor, S2(t) and C(t) for a series) and summary.txt with\n"
                     "error bars. With --reference the exact values are drawn beside the estimates with\n"
                     "z-scores (estimate - exact)/error; the reference must have the same sites, every\n"
                     "time of the results (equal up to 1e-9) and every subsystem label, else it is refused.\n"
                     "A series gives maps at --time T, or at up to four times spread over the series."),
        epilog=("examples:\n  manybody report results.nc --reference exact.nc -o report/\n"
                "  manybody report series.nc --reference exact.nc --time 0.5 --axis XX --format pdf -o report/"))
    p.add_argument("results", metavar="results.nc", help="dataset from 'manybody estimate'")
    p.add_argument("--reference", metavar="exact.nc", help="dataset from 'manybody reference'")
    p.add_argument("-o", "--output", required=True, metavar="DIR", help="folder for the figures and summary.txt")
    p.add_argument("--time", type=float, metavar="T",
                   help="maps at this time only, in units of 1/(energy unit of the couplings), hbar = 1")
    p.add_argument("--axis", choices=("XX", "YY", "ZZ"), default="ZZ",
                   help="Pauli axis of the correlation, magnetization and structure-factor figures (default ZZ)")
    p.add_argument("--model", metavar="SPEC.toml",
                   help="model spec for the bonds drawn on the lattice (default: sites at distance 1)")
    p.add_argument("--format", choices=("png", "pdf", "svg"), default="png", help="figure format (default png)")
    p.add_argument("--dpi", type=int, default=150, metavar="N", help="resolution of png figures (default 150)")
    p.set_defaults(func=cmd_report)

    p = sub.add_parser(
        "demo", formatter_class=_formatter, help="run the demo scenario end to end",
        description=("Run the invented demo scenario end to end: an invented lab's quench of a 12-site\n"
                     "Ising chain (with readout errors and a calibration run) and the ground state of a\n"
                     "3 x 3 Heisenberg patch; simulate, estimate, compare with exact references, report."),
        epilog="example:\n  manybody demo -o demo_out/")
    p.add_argument("-o", "--output", default="demo_runs/out", metavar="DIR", help="output folder (default demo_runs/out)")
    p.add_argument("--quick", action="store_true", help="fewer snapshots and times (about 20 s)")
    p.add_argument("--seed", type=SEED, default=2026, help="random seed (default 2026)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cmd_demo)
    return parser


#: Python arguments whose command-line name is not --<argument>
ARGUMENT_NAMES = {"spec": "SPEC.toml", "shadow": "SHADOW.nc", "shadows": "SHADOW.nc", "quantities": "--quantities",
                  "observables": "--observable", "shadow_a": "SHADOW.nc", "shadow_b": "--overlap",
                  "qubits": "--overlap-qubits"}


def in_flags(exc) -> str:
    """The message of a library error, with the Python argument it names replaced by the command-line option."""
    message = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    argument = getattr(exc, "argument", None)
    if not argument:
        return message
    flag = ARGUMENT_NAMES.get(argument, "--" + argument.replace("_", "-"))
    return re.sub(rf"(^|: ){re.escape(argument)}\b", lambda m: m.group(1) + flag, message, count=1)


def main(argv=None) -> int:
    from manybody.io.files import install_signal_cleanup

    install_signal_cleanup()  # SIGTERM removes temporary files like Ctrl-C does
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
        print(f"error: {in_flags(exc)}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt as exc:
        from manybody.io.files import Terminated

        if isinstance(exc, Terminated):
            print("terminated", file=sys.stderr)
            return 128 + exc.signum
        print("interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
