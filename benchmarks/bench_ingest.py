"""Ingest of a 10^7-row local-ensemble CSV: ours vs a plain csv-module loop.

Writes a synthetic records file (16 qubits, 10^4 settings, zero-padded
setting ids, counts 1-9) into a temporary folder, runs `manybody ingest` on
it in a child process (time and peak resident memory of that process,
netCDF writing included), and times a csv-module loop that parses and
validates the same rows the simple way on the first 10^6 rows, scaled to the
whole file. Target: ratio >= 10, peak memory < 1 GiB.

    python benchmarks/bench_ingest.py [ROWS]
"""

import csv
import os
import subprocess
import sys
import tempfile
import time

import numpy as np

N_QUBITS, N_SETTINGS = 16, 10_000


def write_records(path, rows, rng):
    letters = np.frombuffer(b"XYZ", dtype=np.uint8)
    bases = letters[rng.integers(0, 3, (N_SETTINGS, N_QUBITS))]
    with open(path, "wb") as fh:
        fh.write(b"setting,basis,outcome,count\n")
        block = 1_000_000
        for start in range(0, rows, block):
            m = min(block, rows - start)
            setting = np.sort(rng.integers(0, N_SETTINGS, m))
            digits = np.array([(setting // 10**p) % 10 for p in range(4, -1, -1)]).T + 48
            out = np.zeros((m, 5 + 1 + N_QUBITS + 1 + N_QUBITS + 1 + 1 + 1), dtype=np.uint8)
            out[:, 0:5] = digits
            out[:, 5] = ord(",")
            out[:, 6:6 + N_QUBITS] = bases[setting]
            out[:, 6 + N_QUBITS] = ord(",")
            o = 7 + N_QUBITS
            out[:, o:o + N_QUBITS] = 48 + rng.integers(0, 2, (m, N_QUBITS))
            out[:, o + N_QUBITS] = ord(",")
            out[:, o + N_QUBITS + 1] = 48 + rng.integers(1, 10, m)
            out[:, -1] = ord("\n")
            fh.write(out.tobytes())


def csv_loop(path, limit):
    """The straightforward way: one Python row at a time, with the same checks."""
    settings, outcomes, counts, bases = [], [], [], {}
    with open(path, newline="") as fh:
        reader = csv.reader(fh)
        header = next(reader)
        assert header == ["setting", "basis", "outcome", "count"]
        for i, (s, b, o, c) in enumerate(reader):
            if i == limit:
                break
            sid = int(s)
            if len(b) != N_QUBITS or set(b) - set("XYZ"):
                raise ValueError(f"bad basis on line {i + 2}")
            if len(o) != N_QUBITS or set(o) - set("01"):
                raise ValueError(f"bad outcome on line {i + 2}")
            if bases.setdefault(sid, b) != b:
                raise ValueError(f"basis disagrees on line {i + 2}")
            count = int(c)
            if count < 0:
                raise ValueError(f"bad count on line {i + 2}")
            settings.append(sid)
            outcomes.append([ch == "1" for ch in o])
            counts.append(count)
    return len(settings)


def main():
    rows = int(sys.argv[1]) if len(sys.argv) > 1 else 10_000_000
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "records.csv")
        write_records(path, rows, np.random.default_rng(0))
        size = os.path.getsize(path) / 2**20
        # VmHWM of the child itself (ru_maxrss would carry the parent's size across fork)
        code = ("import sys; from manybody.cli.parser import main; main(['ingest', sys.argv[1], '-o', sys.argv[2]]); "
                "print([l for l in open('/proc/self/status') if l.startswith('VmHWM')][0].split()[1])")
        t = time.perf_counter()
        out = subprocess.run([sys.executable, "-c", code, path, os.path.join(tmp, "s.nc")],
                             check=True, capture_output=True, text=True)
        t_ours = time.perf_counter() - t
        peak = int(out.stdout.strip().splitlines()[-1]) / 2**20  # KiB -> GiB
        sample = min(rows, 1_000_000)
        t = time.perf_counter()
        csv_loop(path, sample)
        t_loop = (time.perf_counter() - t) * rows / sample
    print(f"{rows:,} rows, {size:.0f} MiB of CSV, {N_QUBITS} qubits")
    print(f"{'':<30}{'time [s]':>10}{'rows/s':>14}")
    print(f"{'manybody ingest (process)':<30}{t_ours:>10.1f}{rows / t_ours:>14,.0f}")
    print(f"{'csv-module loop (scaled)':<30}{t_loop:>10.1f}{rows / t_loop:>14,.0f}")
    print(f"ratio {t_loop / t_ours:.1f}; peak memory of ingest {peak:.2f} GiB")


if __name__ == "__main__":
    main()
