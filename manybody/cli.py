"""The ``manybody`` command: a thin shell that parses, calls and prints.

Bad input (a spec, a file, an option) ends with one sentence on stderr and
exit status 2; ``--debug`` shows the traceback instead.
"""

from __future__ import annotations

import argparse
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

    p = sub.add_parser("demo", formatter_class=_formatter, help="run the demo scenario end to end",
                       description="Run the built-in demo scenario end to end.")
    p.add_argument("-o", "--output", default="demo_runs/out", metavar="DIR", help="output folder")
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


def cmd_demo(args) -> int:
    print("demo not available yet: the end-to-end scenario arrives with the estimation layer.")
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
