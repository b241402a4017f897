"""Cost of checking a shadow file while reading it: ours vs a plain read without checks.

Writes a 10^6-snapshot local-ensemble shadow file (16 qubits, 10^4
settings, one shot per record) and reads it completely, chunk by chunk:

- ours: ``read_shadow`` (attributes and settings checked on opening) and
  ``Shadow.chunks()`` (record ids looked up in the settings, counts
  checked, chunk by chunk);
- baseline: xarray opens the same file and the same chunks are read and
  unpacked with no check at all; ids become positions the way the reader
  did before the checks (directly for ids 0..K-1, else by a sorted look-up,
  which any reader needs).

Two id layouts: ids 0..K-1 (positions are the ids) and sparse ids
(1000 k), where every chunk needs a sorted look-up. Medians of 9
alternating repetitions. The machine is shared, so whole-read times are
noisy; the last column times the checks alone on the chunks already in
memory (RecordCheck, minus the id-to-position look-up any reader needs),
as a share of the plain read. Target: under 5 % added.

    python benchmarks/bench_validation.py [SNAPSHOTS]
"""

import os
import sys
import tempfile
import time

import numpy as np
import xarray as xr

from manybody.io.shadow import Shadow, read_shadow, unpack_outcomes, write_shadow
from manybody.io.validate import RecordCheck
from manybody.measure.ensembles import LocalEnsemble

N_QUBITS, N_SETTINGS, CHUNK = 16, 10_000, 1 << 16


def make_file(path, snapshots, sparse, rng):
    ens = LocalEnsemble(N_QUBITS)
    settings = ens.draw(N_SETTINGS, rng)
    if sparse:
        settings.ids[:] = 1000 * np.arange(N_SETTINGS)
    which = np.sort(rng.integers(0, N_SETTINGS, snapshots))
    write_shadow(Shadow(ensemble=ens, settings=settings, qubit_site=np.arange(N_QUBITS),
                        record_setting=settings.ids[which], counts=np.ones(snapshots, np.int64),
                        outcomes=rng.integers(0, 2, (snapshots, N_QUBITS), dtype=np.uint8)), path)


def ours(path):
    shadow = read_shadow(path)
    total = 0
    for pos, bits, counts in shadow.chunks(CHUNK):
        total += int(counts.sum())
    return total


def baseline(path):
    ds = xr.open_dataset(path, engine="h5netcdf", cache=False)
    ids, _ = ds["setting_id"].values, ds["basis"].values  # the settings, read as ours reads them
    order = np.argsort(ids, kind="stable")
    identity = np.array_equal(ids, np.arange(len(ids)))
    rs, out, cnt = ds["record_setting"].variable, ds["outcome"].variable, ds["count"].variable
    total = 0
    for start in range(0, ds.sizes["record"], CHUNK):
        sl = slice(start, start + CHUNK)
        setting = np.asarray(rs[sl], dtype=np.int64)
        if not identity:
            order[np.searchsorted(ids[order], setting)]
        unpack_outcomes(np.asarray(out[sl], dtype=np.uint8), N_QUBITS)
        total += int(np.asarray(cnt[sl], dtype=np.int64).sum())
    ds.close()
    return total


def checks_alone(path, repeats=9):
    """Seconds spent in the per-chunk checks beyond the plain look-up, chunks already in memory."""
    shadow = read_shadow(path)
    chunks = [(np.asarray(shadow.record_setting[s:s + CHUNK]), np.asarray(shadow.counts[s:s + CHUNK]))
              for s in range(0, shadow.n_records, CHUNK)]
    ids = shadow.settings.ids
    order = np.argsort(ids, kind="stable")
    identity = np.array_equal(ids, np.arange(len(ids)))
    checked, plain = [], []
    for _ in range(repeats):
        t = time.perf_counter()
        check = RecordCheck(ids, path)
        for start, (rs, cnt) in enumerate(chunks):
            check.positions(rs, start * CHUNK)
            check.counts(cnt, start * CHUNK)
        checked.append(time.perf_counter() - t)
        t = time.perf_counter()
        for rs, cnt in chunks:
            rs.astype(np.int64) if identity else order[np.searchsorted(ids[order], rs)]
            cnt.astype(np.int64)
        plain.append(time.perf_counter() - t)
    return max(float(np.median(checked)) - float(np.median(plain)), 0.0)


def median_times(path, repeats=9):
    t_ours, t_base = [], []
    for _ in range(repeats):
        for fn, out in ((ours, t_ours), (baseline, t_base)):
            t = time.perf_counter()
            fn(path)
            out.append(time.perf_counter() - t)
    return float(np.median(t_ours)), float(np.median(t_base))


def main():
    snapshots = int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000
    rng = np.random.default_rng(0)
    print(f"{snapshots:,} snapshots, {N_QUBITS} qubits, {N_SETTINGS:,} settings, chunks of {CHUNK:,} records")
    print(f"{'setting ids':<16}{'ours [s]':>10}{'plain [s]':>11}{'ratio':>8}{'added':>9}{'checks alone':>14}")
    with tempfile.TemporaryDirectory() as tmp:
        for sparse in (False, True):
            path = os.path.join(tmp, f"shadow_{sparse}.nc")
            make_file(path, snapshots, sparse, rng)
            assert ours(path) == baseline(path) == snapshots
            t_ours, t_base = median_times(path)
            t_check = checks_alone(path)
            name = "1000 k (sorted)" if sparse else "0 .. K-1"
            print(f"{name:<16}{t_ours:>10.3f}{t_base:>11.3f}{t_ours / t_base:>8.3f}"
                  f"{100 * (t_ours / t_base - 1):>8.1f}%{100 * t_check / t_base:>13.2f}%")


if __name__ == "__main__":
    main()
