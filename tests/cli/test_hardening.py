"""The command line under bad input and faults: one sentence, exit status 2, nothing lost, nothing left over."""

import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from tests.helpers import run_cli

ROOT = Path(__file__).resolve().parents[2]
CHAIN = '[lattice]\nkind = "chain"\nsize = [6]\n[model]\nkind = "tfim"\n'


def run(*args, cwd):
    return run_cli(*args, cwd=cwd)


def one_sentence(out):
    return out.returncode == 2 and "Traceback" not in out.stderr and len(out.stderr.strip().splitlines()) == 1


def leftovers(folder):
    return [p.name for p in Path(folder).rglob(".tmp-*")]


@pytest.fixture
def spec(tmp_path):
    path = tmp_path / "chain.toml"
    path.write_text(CHAIN)
    return path


def test_outputs_equal_to_inputs_are_refused(tmp_path, spec):
    assert run("simulate", spec, "--state", "zero", "--snapshots", "50", "--seed", "1", "-o", "s.nc",
               cwd=tmp_path).returncode == 0
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    os.symlink(tmp_path / "s.nc", tmp_path / "link.nc")
    for args in (("estimate", "s.nc", "-o", "s.nc"), ("estimate", "s.nc", "-o", "link.nc"),
                 ("prepare", spec, "--settings", "3", "-o", spec), ("reference", spec, "--state", "zero", "-o", spec),
                 ("simulate", spec, "--state", "zero", "--snapshots", "5", "-o", spec),
                 ("plan", spec, "--error", "0.1", "-o", spec)):
        out = run(*args, cwd=tmp_path)
        assert one_sentence(out) and "input file" in out.stderr, (args, out.stderr)
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir() if p.name != "link.nc"} == before
    assert not leftovers(tmp_path)


@pytest.mark.parametrize("args,needle", [
    (("estimate", "s.nc", "--blocks", "1", "-o", "r.nc"), "--blocks must be from 2 to 10000, got 1"),
    (("estimate", "s.nc", "--blocks", "0", "-o", "r.nc"), "--blocks must be from 2"),
    (("plan", "chain.toml", "--error", "1e-300"), "--error must be above 1e-08"),
    (("plan", "chain.toml", "--error", "0.1", "--distance", "-1"), "--distance must be from 1"),
    (("plan", "chain.toml", "--error", "0.1", "--shots", "0"), "--shots must be at least 1"),
    (("simulate", "chain.toml", "--state", "zero", "--snapshots", "5", "--seed", "-1", "-o", "x.nc"),
     "--seed must be from 0"),
    (("simulate", "chain.toml", "--state", "zero", "--snapshots", "5", "--times", "nan", "-o", "q"), "--times"),
    (("simulate", "chain.toml", "--state", "zero", "--snapshots", "5", "--times", "0,inf", "-o", "q"), "--times"),
    (("reference", "chain.toml", "--state", "zero", "--bond-dim", "0", "-o", "x.nc"), "--bond-dim must be from 1"),
    (("ingest", "r.csv", "--label", "time=0,5", "-o", "x.nc"), "time"),
])
def test_options_that_make_no_sense(tmp_path, spec, args, needle):
    (tmp_path / "r.csv").write_text("setting,basis,outcome\n0,ZZZZZZ,000000\n")
    (tmp_path / "s.nc").write_text("not netcdf")
    out = run(*args, cwd=tmp_path)
    assert one_sentence(out) and needle in out.stderr, out.stderr


def test_a_series_is_written_as_a_unit(tmp_path, spec):
    base = ("simulate", spec, "--state", "zero", "--snapshots", "40", "--seed", "3", "-o", "q", "--quiet")
    assert run(*base, "--times", "0,1", cwd=tmp_path).returncode == 0
    # times that differ only in the fifth digit get different files
    assert run(*base, "--times", "1.00001,1.00002", cwd=tmp_path).returncode == 0
    assert sorted(p.name for p in (tmp_path / "q").iterdir()) == ["shadow_t1.00001.nc", "shadow_t1.00002.nc"]
    (tmp_path / "q" / "notes.txt").write_text("mine")
    out = run(*base, "--times", "0", cwd=tmp_path)
    assert one_sentence(out) and "other files" in out.stderr
    assert (tmp_path / "q" / "notes.txt").read_text() == "mine" and not leftovers(tmp_path)


def test_sigterm_leaves_no_temporary_and_keeps_the_old_output(tmp_path, spec):
    # SIGTERM is handled like Ctrl-C (exit status 128 + 15 by convention, bash(1)).
    assert run("simulate", spec, "--state", "zero", "--snapshots", "20", "--seed", "1", "-o", "s.nc",
               cwd=tmp_path).returncode == 0
    old = (tmp_path / "s.nc").read_bytes()
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    big = tmp_path / "big.toml"
    big.write_text('[lattice]\nkind = "chain"\nsize = [12]\n[model]\nkind = "tfim"\n')
    proc = subprocess.Popen([sys.executable, "-m", "manybody", "simulate", str(big), "--state", "ground",
                             "--ensemble", "shallow", "--depth", "2", "--snapshots", "2000000", "--seed", "2",
                             "-o", "s.nc", "--quiet"], cwd=tmp_path, env=env, stderr=subprocess.PIPE, text=True)
    deadline = time.time() + 60
    while not leftovers(tmp_path) and time.time() < deadline and proc.poll() is None:
        time.sleep(0.2)  # wait until the temporary file exists: the write is under way
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 128 + signal.SIGTERM and "Traceback" not in err
    assert (tmp_path / "s.nc").read_bytes() == old and not leftovers(tmp_path)


def test_outputs_that_cannot_be_written(tmp_path, spec):
    (tmp_path / "afile").write_text("x")
    (tmp_path / "adir").mkdir()
    assert one_sentence(run("demo", "-o", "afile", cwd=tmp_path))
    assert one_sentence(run("prepare", spec, "--settings", "2", "-o", "s.nc", "--qasm", "afile", cwd=tmp_path))
    assert one_sentence(run("reference", spec, "--state", "zero", "-o", "adir", cwd=tmp_path))
    assert not leftovers(tmp_path)


def test_models_too_large_or_too_strong_are_refused_before_work(tmp_path):
    for text, needle in (('[lattice]\nkind = "square"\nsize = [4294967296, 4294967296]\n[model]\nkind = "tfim"\n',
                          "cells"),
                         ('[lattice]\nkind = "chain"\nsize = [100000]\n[model]\nkind = "tfim"\n', "GiB"),
                         ('[lattice]\nkind = "kagome"\nsize = [180, 180]\n[model]\nkind = "hubbard"\n', "GiB"),
                         ('[lattice]\nkind = "chain"\nsize = [8]\n[model]\nkind = "tfim"\nJ = 1e200\n', "too large")):
        path = tmp_path / "m.toml"
        path.write_text(text)
        start = time.time()
        out = run("model", path, "--exact", cwd=tmp_path)
        assert one_sentence(out) and needle in out.stderr, out.stderr
        assert time.time() - start < 60
