"""The demo scenario: an invented lab's two runs, simulated, estimated, compared, reported.

INVENTED DATA. The "Harrowgate cold-atom lab" does not exist. Its two runs:

1. quench: a 12-site transverse-field Ising chain (J = h = 1) prepared in
   |0...0> and evolved to six times, measured in random local bases with 1%
   readout errors; a calibration run on |0...0> gives robust estimates.
2. ground state: a 3 x 3 Heisenberg patch, measured in random local bases.

Everything is simulated here (exact state vectors); the outputs land in one
folder with a short printed guide to them, together with the two model
specs and an example records file (``run7.csv``, see
:func:`example_records`) so that the README's commands run in that folder.
"""

from __future__ import annotations

import csv
import os
import shutil
import time

from hamiltonians.spec import load_model
from manybody.estimation.calibration import Calibration
from manybody.estimation.driver import estimate, parse_subsystems
from manybody.io.files import atomic_path
from manybody.io.results import combine_series, write_dataset
from manybody.io.shadow import read_shadow
from manybody.references.dataset import reference_dataset
from manybody.reporting.figures import write_report
from manybody.reporting.summary import summary_table
from manybody.simulation.experiment import Noise, prepare_states, simulate

HERE = os.path.dirname(os.path.abspath(__file__))
SPECS = os.path.join(os.path.dirname(HERE), "demo_runs")


def _spec(name: str) -> str:
    """The demo specs ship in demo_runs/ of the source tree and inside the package."""
    for folder in (SPECS, os.path.join(HERE, "demo_specs")):
        path = os.path.join(folder, name)
        if os.path.exists(path):
            return path
    raise FileNotFoundError(name)


SPEC_NAMES = ("tfim_chain.toml", "heisenberg_patch.toml")
EXAMPLE_RECORDS = "run7.csv"


def example_records(path: str, shots: int = 10, seed: int = 7070) -> None:
    """Write the shipped example records (INVENTED DATA) to ``path``: CSV ``setting,outcome,count``.

    ``shots`` per setting (200 settings), one row per distinct outcome of a setting.
    The settings are those of ``manybody prepare tfim_chain.toml --ensemble
    shallow --depth 1 --settings 200 --seed 7``; the state is |0...0> of the
    12-site chain evolved to t = 0.5 (hbar = 1), so the README's
    ``manybody ingest run7.csv --settings settings.nc ... --label time=0.5``
    gives a meaningful shadow.
    """
    import manybody as mb

    chain = load_model(_spec("tfim_chain.toml"))
    settings = mb.draw_settings(chain, "shallow", 1, 200, 7)
    shadow = mb.simulate(chain, "zero", None, "shallow", 1, shots=shots, times=[0.5], settings=settings,
                         seed=seed)[0]
    with atomic_path(path, ".csv") as tmp, open(tmp, "w", newline="") as fh:
        out = csv.writer(fh)
        out.writerow(["setting", "outcome", "count"])
        for ids, bits, counts in shadow.records():
            words = ["".join(map(str, row)) for row in bits]
            out.writerows(zip(ids.tolist(), words, counts.tolist()))


def copy_inputs(out_dir: str) -> list[str]:
    """The model specs and the example records, copied into ``out_dir`` (the README runs from there)."""
    os.makedirs(out_dir, exist_ok=True)
    written = []
    for name in SPEC_NAMES + (EXAMPLE_RECORDS,):
        path = os.path.join(out_dir, name)
        with atomic_path(path, os.path.splitext(name)[1]) as tmp:
            shutil.copyfile(_spec(name), tmp)
        written.append(path)
    return written


def run_demo(out_dir: str, quick: bool = False, seed: int = 2026, say=print, progress=None) -> dict:
    start = time.perf_counter()
    snapshots = 4000 if quick else 20000
    times = [0.0, 0.5, 1.0] if quick else [0.0, 0.25, 0.5, 0.75, 1.0, 1.5]
    noise = Noise(p01=0.01, p10=0.01)
    out = {"inputs": copy_inputs(out_dir)}

    say("Harrowgate cold-atom lab (INVENTED DATA): run 1, quench of a 12-site Ising chain")
    chain = load_model(_spec("tfim_chain.toml"))
    qdir = os.path.join(out_dir, "quench")
    paths = simulate(chain, "zero", snapshots, times=times, noise=noise, seed=seed,
                     output=os.path.join(qdir, "shadows"), progress=progress)
    cal_path = simulate(chain, "zero", snapshots, noise=noise, seed=seed + 1,
                        output=os.path.join(qdir, "calibration.nc"))[0]
    calibration = Calibration(read_shadow(cal_path))
    subsystems = parse_subsystems("0;0-1;0-2;0-3;0-4;0-5", chain.n_sites)
    shadows = [read_shadow(p) for p in paths]
    results = combine_series([estimate(s, chain, subsystems, calibration) for s in shadows],
                             [s.label for s in shadows])
    states = prepare_states(chain, "zero", times, "dense")
    exact = combine_series([reference_dataset(chain, psi, subsystems, {"time": t}) for t, psi, _ in states],
                           [{"time": t} for t, _, _ in states])
    write_dataset(results, os.path.join(qdir, "results.nc"))
    write_dataset(exact, os.path.join(qdir, "exact.nc"))
    figures = write_report(results, os.path.join(qdir, "report"), exact, time=times[-1], dpi=120)  # maps at t_last
    out["quench"] = (results, exact, figures)

    say("run 2, ground state of a 3 x 3 Heisenberg patch")
    patch = load_model(_spec("heisenberg_patch.toml"))
    gdir = os.path.join(out_dir, "ground_state")
    path = simulate(patch, "ground", snapshots, seed=seed + 2, output=os.path.join(gdir, "shadow.nc"))[0]
    sub2 = parse_subsystems("0;0-1;0-2;0-3;0-4", patch.n_sites)
    res2 = estimate(read_shadow(path), patch, sub2)
    psi = prepare_states(patch, "ground", None, "dense")[0][1]
    ex2 = reference_dataset(patch, psi, sub2)
    write_dataset(res2, os.path.join(gdir, "results.nc"))
    write_dataset(ex2, os.path.join(gdir, "exact.nc"))
    figures2 = write_report(res2, os.path.join(gdir, "report"), ex2, dpi=120)
    out["ground_state"] = (res2, ex2, figures2)

    elapsed = time.perf_counter() - start
    say("")
    say(f"done in {elapsed:.0f} s; everything is in {out_dir}/")
    say(f"quench ({len(times)} times, {snapshots} snapshots each, robust to 1% readout errors):")
    say("  " + summary_table(results, exact, per_site=False).replace("\n", "\n  "))
    say(f"  figures: {os.path.join(qdir, 'report')}/renyi2_series.png shows S2(t) growing and "
        "correlation_series.png the ZZ correlations against the exact evolution (dashed)")
    say(f"ground state of the 3 x 3 patch ({snapshots} snapshots):")
    say("  " + summary_table(res2, ex2, per_site=False).replace("\n", "\n  "))
    say(f"  figures: {os.path.join(gdir, 'report')}/correlation_on_lattice.png shows the antiferromagnetic "
        "pattern around site 0, estimate beside exact with z-scores")
    say("datasets: results.nc and exact.nc in each folder; open them with xarray (results - exact).")
    say(f"inputs: {', '.join(SPEC_NAMES)} and the example records {EXAMPLE_RECORDS} (for the README's "
        f"ingest step) in {out_dir}/")
    return out
