"""Atomic writes under faults: outputs equal to inputs, modes, stale temporaries, signals, full disks.

Facts of the trade used here (POSIX): open(2) creates files with mode
0666 & ~umask; rename(2) within one file system replaces the target
atomically; kill(pid, 0) fails with ESRCH for a process that does not
exist; writes to /dev/full fail with ENOSPC (Linux null(4) man page).
"""

import errno
import os
import signal
import stat
import subprocess
import sys
import textwrap

import numpy as np
import pytest
import xarray as xr

from manybody.errors import InputError
from manybody.io.files import (TEMP_PREFIX, GuardedFile, atomic_path, install_signal_cleanup, refuse_overwrite,
                               sweep_stale, temporary_beside)
from manybody.io.ingest import ingest
from manybody.io.results import write_dataset
from manybody.io.shadow import Shadow, ShadowWriter, read_shadow, write_shadow
from manybody.measure.ensembles import LocalEnsemble


def small_shadow(records=200, n=6, seed=0):
    rng = np.random.default_rng(seed)
    ens = LocalEnsemble(n)
    st = ens.draw(5, rng)
    return Shadow(ensemble=ens, settings=st, qubit_site=np.arange(n), record_setting=rng.integers(0, 5, records),
                  outcomes=rng.integers(0, 2, (records, n), dtype=np.uint8), counts=rng.integers(1, 4, records))


# ----------------------------------------------------------------- output equal to an input
def test_refuse_overwrite_same_file_link_and_hard_link(tmp_path):
    records = tmp_path / "records.csv"
    records.write_text("setting,basis,outcome\n1,X,0\n")
    os.symlink(records, tmp_path / "link.nc")
    os.link(records, tmp_path / "hard.nc")
    for output in (records, tmp_path / "link.nc", tmp_path / "hard.nc", tmp_path / "sub" / ".." / "records.csv"):
        with pytest.raises(InputError, match=r"^-o .*is the input file .*records\.csv; writing it would destroy"):
            refuse_overwrite(output, [None, tmp_path / "other.toml", records])
    # a dangling link to where the input lives is found by realpath
    os.symlink(tmp_path / "spec.toml", tmp_path / "future.nc")
    with pytest.raises(InputError, match="is the input file"):
        refuse_overwrite(tmp_path / "future.nc", [tmp_path / "spec.toml"], option="--output")
    refuse_overwrite(tmp_path / "fresh.nc", [records, None])  # a different file is fine
    with pytest.raises(InputError, match="is a folder; give the name of a file"):
        refuse_overwrite(tmp_path, [records])


def test_ingest_refuses_to_replace_its_own_records(tmp_path):
    records = tmp_path / "records.csv"
    text = "setting,basis,outcome\n1,XY,01\n"
    records.write_text(text)
    with pytest.raises(InputError, match="is the input file"):
        ingest(records, records)
    assert records.read_text() == text and os.listdir(tmp_path) == ["records.csv"]


# ----------------------------------------------------------------- modes and temporaries
def test_atomic_write_honours_umask_and_keeps_existing_mode(tmp_path):
    old = os.umask(0o027)
    try:
        write_shadow(small_shadow(), tmp_path / "s.nc")
        write_dataset(xr.Dataset({"a": (("x",), np.arange(3.0))}), tmp_path / "r.nc")
        with atomic_path(tmp_path / "t.txt") as tmp:
            open(tmp, "w").write("x")
        plain = tmp_path / "plain.txt"
        plain.write_text("x")  # an ordinary write, for comparison
    finally:
        os.umask(old)
    want = stat.S_IMODE(plain.stat().st_mode)
    assert want == 0o640  # 0666 & ~0027 (POSIX open(2))
    for name in ("s.nc", "r.nc", "t.txt"):
        assert stat.S_IMODE((tmp_path / name).stat().st_mode) == want, name
    os.chmod(tmp_path / "s.nc", 0o604)  # replacing a file keeps its mode, as writing into it would
    write_shadow(small_shadow(), tmp_path / "s.nc")
    assert stat.S_IMODE((tmp_path / "s.nc").stat().st_mode) == 0o604


def _dead_pid():
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid  # reaped: kill(pid, 0) now fails with ESRCH (unless the number is reused at once)


def test_temporaries_are_named_and_stale_ones_swept(tmp_path):
    target = tmp_path / "shadow.nc"
    tmp = temporary_beside(target, ".nc")
    name = os.path.basename(tmp)
    assert name.startswith(f"{TEMP_PREFIX}{os.getpid()}-") and name.endswith(".shadow.nc.nc")
    dead = _dead_pid()
    stale = tmp_path / f"{TEMP_PREFIX}{dead}-abcd1234.shadow.nc.nc"
    live = tmp_path / f"{TEMP_PREFIX}{os.getppid()}-abcd1234.shadow.nc.nc"  # our parent is alive
    other_target = tmp_path / f"{TEMP_PREFIX}{dead}-abcd1234.other.nc.nc"
    for p in (stale, live, other_target):
        p.write_bytes(b"half")
    write_shadow(small_shadow(), target)  # sweeps while making its own temporary
    left = sorted(os.listdir(tmp_path))
    assert stale.name not in left
    assert {live.name, other_target.name, name, "shadow.nc"} <= set(left)
    assert sweep_stale(target, ".nc") == []  # our own temporary belongs to a live process
    os.remove(tmp)


# ----------------------------------------------------------------- signals
CHILD = textwrap.dedent("""
    import sys
    import numpy as np
    from manybody.io.files import install_signal_cleanup
    from manybody.io.shadow import Shadow, ShadowWriter
    from manybody.measure.ensembles import LocalEnsemble

    assert install_signal_cleanup()
    ens = LocalEnsemble(8)
    rng = np.random.default_rng(0)
    try:
        with ShadowWriter(sys.argv[1], chunk_records=4096) as out:
            for i in range(200000):
                out.append(rng.integers(0, 4, 4096), rng.integers(0, 2, (4096, 8), dtype=np.uint8),
                           np.ones(4096, np.int64))
                if i == 3:
                    print("writing", flush=True)
            out.finish(Shadow(ensemble=ens, settings=ens.draw(4, 0), qubit_site=np.arange(8)))
    except KeyboardInterrupt as exc:
        print("interrupted", getattr(exc, "signum", None), flush=True)
        sys.exit(128 + exc.signum)
""")


def test_sigterm_in_the_middle_of_a_long_write(tmp_path):
    path = tmp_path / "s.nc"
    write_shadow(small_shadow(), path)
    before = path.read_bytes()
    child = subprocess.Popen([sys.executable, "-c", CHILD, str(path)], stdout=subprocess.PIPE, text=True,
                             cwd=os.getcwd())
    try:
        assert child.stdout.readline().strip() == "writing"
        assert any(p.startswith(TEMP_PREFIX) for p in os.listdir(tmp_path))  # mid-write
        child.send_signal(signal.SIGTERM)
        out, _ = child.communicate(timeout=60)
    finally:
        if child.poll() is None:
            child.kill()
    assert child.returncode == 128 + signal.SIGTERM and "interrupted 15" in out
    assert os.listdir(tmp_path) == ["s.nc"] and path.read_bytes() == before


def test_install_signal_cleanup_leaves_an_ignored_sigterm_alone():
    saved = signal.getsignal(signal.SIGTERM)
    try:
        signal.signal(signal.SIGTERM, signal.SIG_IGN)
        assert install_signal_cleanup() is False and signal.getsignal(signal.SIGTERM) == signal.SIG_IGN
    finally:
        signal.signal(signal.SIGTERM, saved)


# ----------------------------------------------------------------- write failures
def test_output_that_is_a_folder(tmp_path):
    folder = tmp_path / "out"
    folder.mkdir()
    for write in (lambda: write_shadow(small_shadow(), folder),
                  lambda: write_dataset(xr.Dataset({"a": (("x",), np.arange(2))}), folder)):
        with pytest.raises(InputError, match=r"^cannot write .*out: it is a folder; give a file name$"):
            write()
    assert os.listdir(tmp_path) == ["out"] and os.listdir(folder) == []


class DevFullWriter(ShadowWriter):
    """A ShadowWriter whose bytes go to /dev/full: every write fails with a real ENOSPC."""

    @staticmethod
    def _open_raw(tmp):
        return open("/dev/full", "r+b", buffering=0)


@pytest.mark.skipif(not os.path.exists("/dev/full"), reason="needs /dev/full (Linux)")
def test_enospc_from_a_real_device_is_one_sentence_and_no_temporary(tmp_path):
    sink = GuardedFile(open("/dev/full", "r+b", buffering=0), tmp_path / "x.nc")
    assert sink.write(b"abc") == 3 and sink.failure.errno == errno.ENOSPC  # kept, not raised into HDF5
    sink.close()
    with pytest.raises(InputError, match=r"^cannot write .*x\.nc: no space left on device$"):
        sink.raise_failure()
    path = tmp_path / "s.nc"
    path.write_bytes(b"old")
    shadow = small_shadow(records=5000)
    with pytest.raises(InputError, match=r"^cannot write .*s\.nc: no space left on device$"):
        with DevFullWriter(path, chunk_records=512) as out:
            for ids, bits, counts in shadow.records(512):
                out.append(ids, bits, counts)
            out.finish(shadow)
    assert path.read_bytes() == b"old" and os.listdir(tmp_path) == ["s.nc"]
    with pytest.raises(InputError, match=r"^cannot write .*t\.txt: no space left on device$"):
        with atomic_path(tmp_path / "t.txt") as tmp:
            with open("/dev/full", "w") as fh:
                fh.write("x" * 10000)
    assert os.listdir(tmp_path) == ["s.nc"]


@pytest.fixture
def mounted(tmp_path):
    """A small tmpfs (real ENOSPC, real read-only file system); skipped where mounting is not allowed."""
    mounts = []

    def mount(options):
        point = tmp_path / f"mnt{len(mounts)}"
        point.mkdir()
        if os.geteuid() != 0 or subprocess.run(["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(point)],
                                               capture_output=True).returncode != 0:
            pytest.skip("cannot mount a tmpfs here (needs root)")
        mounts.append(point)
        return point

    yield mount
    for point in mounts:
        subprocess.run(["umount", str(point)], check=False)


def test_disk_full_on_a_small_tmpfs(tmp_path, mounted):
    disk = mounted("size=256k")
    target = disk / "s.nc"
    target.write_bytes(b"old")
    big = small_shadow(records=400000, n=16)
    rng = np.random.default_rng(1)
    bits = ["".join(row) for row in rng.choice(["0", "1"], (200000, 16))]
    rows = ["setting,basis,outcome,count"] + [f"{k % 50},{'XYZZ' * 4},{b},{k % 7}" for k, b in enumerate(bits)]
    (tmp_path / "records.csv").write_text("\n".join(rows) + "\n")
    writes = [lambda: write_shadow(big, target),
              lambda: write_dataset(xr.Dataset({"a": (("x",), np.random.default_rng(0).random(100000))}), target),
              lambda: ingest(tmp_path / "records.csv", target)]
    for write in writes:
        with pytest.raises(InputError, match=r"^cannot write .*s\.nc: no space left on device$"):
            write()
        assert os.listdir(disk) == ["s.nc"] and target.read_bytes() == b"old"


def test_read_only_folder(tmp_path, mounted):
    disk = mounted("ro,size=64k")
    for write in (lambda: write_shadow(small_shadow(), disk / "s.nc"),
                  lambda: write_dataset(xr.Dataset({"a": (("x",), np.arange(2))}), disk / "r.nc")):
        with pytest.raises(InputError, match=r"^cannot write .*: read-only file system$"):
            write()
    assert os.listdir(disk) == []


def test_failed_rename_removes_the_temporary(tmp_path):
    # a folder appears where the file was to go while it is written: rename(2) fails with EISDIR
    target = tmp_path / "t.txt"
    with pytest.raises(InputError, match=r"^cannot write .*t\.txt: it is a folder; give a file name$"):
        with atomic_path(target) as tmp:
            open(tmp, "w").write("x")
            target.mkdir()
            (target / "inside").write_text("y")
    assert os.listdir(tmp_path) == ["t.txt"] and os.listdir(target) == ["inside"]


def test_reading_a_written_shadow_after_all_this(tmp_path):
    path = tmp_path / "s.nc"
    shadow = small_shadow()
    write_shadow(shadow, path)
    back = read_shadow(path)
    assert np.array_equal(np.concatenate([c for _, _, c in back.records()]), shadow.counts)
