"""Estimation at scale: time and peak memory of `manybody estimate` on large shadow files (random outcomes:
timing only).

1. A 100-site Heisenberg chain, 10^6 local snapshots (one per setting), every output: energy, energy
   density and energy variance, magnetization, correlation and connected-correlation maps, the
   mutual-information map and the purities of '0;0-1;0-2;0-3;0-5' (the histogram path; larger
   subsystems take the O(N^2) pair-count path, not meant for 10^6 snapshots). Targets: under 2 minutes
   and under 1 GiB peak resident memory. The baseline column is the target; ratio >= 1 meets it.
3. Out of core (item 2, threads vs one thread, is benchmarks/bench_parallel.py): a 50-site Ising
   chain, 10^4 settings with 10^2, 10^3 (and with --big 10^4) shots each, i.e. 10^6, 10^7 (10^8) snapshots,
   written in chunks by ShadowWriter into a temporary folder (in /tmp with --big; deleted afterwards).
   Outputs: energy, energy density and variance, magnetization, correlation maps, purities of
   '0;0-1;0-3'; no mutual information (--no-mutual-information): with several shots per setting its
   within-setting joint counts per setting (settings x (2n)^2 numbers) exceed the memory cap at 10^4 settings, so the map is not estimated there. Targets: flat peak memory
   over the three sizes, and time(10^8) within 2x of 10 x time(10^7) (the baseline column).

Each estimate runs in a child process (this source tree first on its path) that reports its own wall
time and VmHWM (ru_maxrss would carry the parent's size across fork). The machine's load average is
printed: on a shared machine the times are the times of that run.

    python benchmarks/bench_scale.py [--big]
"""

import os
import subprocess
import sys
import tempfile
import time

import numpy as np

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, ROOT)

from manybody.io.shadow import Shadow, ShadowWriter  # noqa: E402
from manybody.measure.ensembles import LocalEnsemble  # noqa: E402

CHILD = """import sys, time
t = time.perf_counter()
from manybody.cli.parser import main
code = main(sys.argv[1:])
wall = time.perf_counter() - t
peak = [l for l in open('/proc/self/status') if l.startswith('VmHWM')][0].split()[1]
print('BENCH', code, wall, int(peak) / 1024)
"""


def chain_spec(n, kind):
    return f'[lattice]\nkind = "chain"\nsize = [{n}]\nboundary = "open"\n\n[model]\nkind = "{kind}"\n'


def write_random_shadow(path, n_qubits, n_snapshots, n_settings, kind="tfim", seed=0, step=1 << 16):
    """A local shadow of uniformly random outcomes, settings in order with n_snapshots / n_settings shots each."""
    rng = np.random.default_rng(seed)
    ens = LocalEnsemble(n_qubits)
    settings = ens.draw(n_settings, rng)
    shots = n_snapshots // n_settings
    nbytes = -(-n_qubits // 8)
    with ShadowWriter(path) as out:
        for start in range(0, n_snapshots, step):
            stop = min(n_snapshots, start + step)
            packed = rng.integers(0, 256, (stop - start, nbytes), dtype=np.uint8)
            bits = np.unpackbits(packed, axis=1, count=n_qubits, bitorder="little")
            out.append(settings.ids[np.arange(start, stop) // shots], bits, np.ones(stop - start, np.int64))
        out.finish(Shadow(ensemble=ens, settings=settings, qubit_site=np.arange(n_qubits),
                          model_spec=chain_spec(n_qubits, kind), source="bench_scale (random outcomes)"))


def run_estimate(args, env_extra=None):
    """(exit status, wall seconds, peak MiB) of `manybody estimate ARGS` in a child process."""
    env = {**os.environ, "PYTHONPATH": ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""), **(env_extra or {})}
    out = subprocess.run([sys.executable, "-c", CHILD, "estimate", *args, "--quiet"], capture_output=True,
                         text=True, env=env)
    line = [x for x in out.stdout.splitlines() if x.startswith("BENCH")]
    if out.returncode or not line:
        raise RuntimeError(f"estimate failed: {out.stderr[-2000:]}")
    _, code, wall, peak = line[-1].split()
    return int(code), float(wall), float(peak)


def header(title, columns=True):
    print(f"\n{title}   (load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores)")
    if columns:
        print(f"{'case':<46}{'ours':>12}{'baseline':>12}{'ratio':>9}")


def row(name, ours, base, unit):
    print(f"{name:<46}{ours:>10.1f}{unit:>2}{base:>10.1f}{unit:>2}{base / ours:>9.2f}")


def item_one(folder):
    path, spec = os.path.join(folder, "chain100.nc"), os.path.join(folder, "heisenberg100.toml")
    with open(spec, "w") as fh:
        fh.write(chain_spec(100, "heisenberg"))
    t = time.perf_counter()
    write_random_shadow(path, 100, 1_000_000, 1_000_000, kind="heisenberg")
    written = time.perf_counter() - t
    _, wall, peak = run_estimate([path, "--model", spec, "--subsystems", "0;0-1;0-2;0-3;0-5",
                                  "-o", os.path.join(folder, "r1.nc")])
    header(f"1. 100-site Heisenberg chain, 10^6 local snapshots, every output (file written in {written:.0f} s)")
    row("time of estimate vs target 120 s", wall, 120.0, " s")
    row("peak memory of estimate vs target 1 GiB", peak, 1024.0, "Mi")
    os.remove(path)


def item_three(folder, big):
    sizes = [1_000_000, 10_000_000] + ([100_000_000] if big else [])
    results = {}
    for count in sizes:
        path = os.path.join(folder, f"chain50_{count}.nc")
        t = time.perf_counter()
        write_random_shadow(path, 50, count, 10_000)
        written = time.perf_counter() - t
        size = os.path.getsize(path) / 2**20
        _, wall, peak = run_estimate([path, "--subsystems", "0;0-1;0-3", "--no-mutual-information",
                                      "-o", os.path.join(folder, "r3.nc")])
        os.remove(path)
        results[count] = (wall, peak, written, size)
    header("3. out of core: 50-site Ising chain, 10^4 settings, energy, variance, correlations, purities", False)
    print(f"{'snapshots':>14}{'file [MiB]':>12}{'write [s]':>11}{'estimate [s]':>14}{'peak [MiB]':>12}"
          f"{'us/snapshot':>13}")
    for count, (wall, peak, written, size) in results.items():
        print(f"{count:>14,}{size:>12.0f}{written:>11.1f}{wall:>14.1f}{peak:>12.0f}{wall / count * 1e6:>13.2f}")
    peaks = [p for _, p, _, _ in results.values()]
    print(f"peak memory: largest / smallest {max(peaks) / min(peaks):.2f} (flat: close to 1)")
    if big:
        print(f"{'case':<46}{'ours':>12}{'baseline':>12}{'ratio':>9}")
        row("time(10^8) vs 2 x 10 x time(10^7)", results[sizes[2]][0], 20 * results[sizes[1]][0], " s")
        print(f"time(10^8) / (10 x time(10^7)) = {results[sizes[2]][0] / (10 * results[sizes[1]][0]):.2f} "
              "(target <= 2)")


def main():
    big = "--big" in sys.argv
    with tempfile.TemporaryDirectory(dir="/tmp" if big else None) as folder:
        item_one(folder)
        item_three(folder, big)


if __name__ == "__main__":
    main()
