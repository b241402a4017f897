"""The chunked pass on threads and on a dask.distributed cluster (random outcomes: timing only).

1. 10^7 local snapshots (50-site Ising chain, 10^4 settings of 10^3 shots, written by ShadowWriter):
   `manybody estimate --scheduler sync` (one thread) vs `--scheduler threads` (one per core), each in a
   child process; outputs energy, energy variance, correlations and purities of '0;0-1;0-3'.
   Target on 2 cores: ratio >= 1.7. The two result files must hold the same numbers.
2. Overhead of a dask.distributed LocalCluster (2 worker processes, 1 thread each) on a small file
   (10^5 snapshots of 16 qubits): the estimate in this process vs on the cluster (cluster already up),
   and the start-up of the cluster itself.

The machine's load average is printed: on a shared machine the ratio is that of this run.

    python benchmarks/bench_parallel.py
"""

import os
import sys
import tempfile
import time
import warnings

import numpy as np
import xarray as xr

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from bench_scale import header, row, run_estimate, write_random_shadow  # noqa: E402

warnings.filterwarnings("ignore")


def largest_difference(a, b):
    return max(float(np.nanmax(np.abs(a[v].values - b[v].values), initial=0)) for v in a.data_vars)


def threads_vs_serial(folder):
    path = os.path.join(folder, "chain50_1e7.nc")
    write_random_shadow(path, 50, 10_000_000, 10_000)
    args = [path, "--subsystems", "0;0-1;0-3", "--no-mutual-information"]
    out = {}
    for scheduler in ("sync", "threads"):
        out[scheduler] = os.path.join(folder, f"r_{scheduler}.nc")
        _, wall, peak = run_estimate([*args, "--scheduler", scheduler, "-o", out[scheduler]])
        out[scheduler + ":time"], out[scheduler + ":peak"] = wall, peak
    with xr.open_dataset(out["sync"], engine="h5netcdf") as a, xr.open_dataset(out["threads"], engine="h5netcdf") as b:
        diff = largest_difference(a, b)
    header(f"1. 10^7 local snapshots, 50 qubits: --scheduler threads vs sync on {os.cpu_count()} cores")
    row("estimate: threads vs sync (target ratio >= 1.7)", out["threads:time"], out["sync:time"], " s")
    print(f"peak memory: sync {out['sync:peak']:.0f} MiB, threads {out['threads:peak']:.0f} MiB; "
          f"largest difference of the results {diff:.1e}")


def cluster_overhead(folder):
    from dask.distributed import Client, LocalCluster

    import manybody as mb

    path = os.path.join(folder, "small.nc")
    write_random_shadow(path, 16, 100_000, 100_000)
    shadow = mb.open_shadow(path)
    t = time.perf_counter()
    serial = mb.estimate(shadow, subsystems=["0-3"], scheduler="sync")
    t_serial = time.perf_counter() - t
    t = time.perf_counter()
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster, \
            Client(cluster) as client:
        t_start = time.perf_counter() - t
        mb.estimate(shadow, subsystems=["0-3"], scheduler=client)  # first use: workers import manybody
        t = time.perf_counter()
        clustered = mb.estimate(shadow, subsystems=["0-3"], scheduler=client)
        t_cluster = time.perf_counter() - t
    header("2. dask.distributed LocalCluster, 2 workers, 10^5 snapshots of 16 qubits")
    row("estimate on the cluster vs in this thread", t_cluster, t_serial, " s")
    diff = largest_difference(serial, clustered)
    print(f"cluster start-up {t_start:.1f} s; largest difference of the results {diff:.1e}")


def main():
    with tempfile.TemporaryDirectory() as folder:
        threads_vs_serial(folder)
        cluster_overhead(folder)


if __name__ == "__main__":
    main()
