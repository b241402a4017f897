"""The command line through a subprocess: output, exit codes, one-sentence errors."""

import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def run(*args, cwd=None):
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.run([sys.executable, "-m", "manybody", *args], capture_output=True, text=True,
                          cwd=cwd or ROOT, env=env, timeout=300)


def test_model_exact_on_demo_chain():
    out = run("model", "demo_runs/tfim_chain.toml", "--exact")
    assert out.returncode == 0, out.stderr
    assert "12 sites, 11 bonds" in out.stdout
    line = next(l for l in out.stdout.splitlines() if l.startswith("ground energy"))
    assert "exact diagonalization" in line
    # the value itself is checked against Pfeuty's solution in test_models; here it must parse
    float(line.split()[2])


def test_help_teaches():
    out = run("model", "--help")
    assert out.returncode == 0 and "example:" in out.stdout and "--exact" in out.stdout


@pytest.mark.parametrize("content,needle", [
    ('[lattice]\nkind = "chain"\nsize = [4]\nfoo = 1\n[model]\nkind = "tfim"\n', "unknown key 'foo'"),
    ("this is not toml", "not valid TOML"),
])
def test_bad_spec_exits_2_with_one_sentence(tmp_path, content, needle):
    spec = tmp_path / "bad.toml"
    spec.write_text(content)
    out = run("model", str(spec))
    assert out.returncode == 2
    assert needle in out.stderr and "Traceback" not in out.stderr
    assert len(out.stderr.strip().splitlines()) == 1


def test_missing_file_and_unknown_option():
    out = run("model", "no/such/file.toml")
    assert out.returncode == 2 and "cannot read" in out.stderr
    out = run("model", "demo_runs/tfim_chain.toml", "--exactly")
    assert out.returncode == 2 and "unrecognized arguments" in out.stderr and "Traceback" not in out.stderr


def test_too_large_for_exact_is_bad_input(tmp_path):
    spec = tmp_path / "big.toml"
    spec.write_text('[lattice]\nkind = "square"\nsize = [6, 6]\n[model]\nkind = "heisenberg"\n')
    out = run("model", str(spec), "--exact")
    assert out.returncode == 2 and "too many for exact diagonalization" in out.stderr
