"""estimate --observable, --observables-file and --overlap through the command line and the Python API."""

from pathlib import Path

import xarray as xr

import manybody as mb
from manybody.references import exact
from tests.helpers import run_cli, within

ROOT = Path(__file__).resolve().parents[2]
SPEC = '[lattice]\nkind = "chain"\nsize = [4]\n[model]\nkind = "tfim"\nJ = 1.0\nh = 0.7\n'


def run(*args, cwd):
    return run_cli(*args, cwd=cwd)


def test_observables_and_overlap_from_the_command_line(tmp_path):
    # References: <Z0 Z1 Z2 Z3> and <X0 X1> of the scipy ground state; the overlap of two independent
    # shadows of one pure state is its purity, 1 (facts of the trade).
    (tmp_path / "chain.toml").write_text(SPEC)
    (tmp_path / "obs.toml").write_text('[[observable]]\nname = "xx"\nexpression = "X0 X1"\n')
    for name, seed in (("a.nc", 1), ("b.nc", 2)):
        assert run("simulate", "chain.toml", "--state", "ground", "--snapshots", "6000", "--seed", seed, "-o", name,
                   cwd=tmp_path).returncode == 0
    out = run("estimate", "a.nc", "--observable", "string=Z0 Z1 Z2 Z3", "--observables-file", "obs.toml",
              "--overlap", "b.nc", "-o", "r.nc", cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    model = mb.parse_model(SPEC)
    _, psi = exact.ground_state(model.hamiltonian)
    from hamiltonians.pauli import PauliExpansion

    ref = [exact.expectation(PauliExpansion.from_strings(s), psi) for s in ("ZZZZ", "XXII")]
    with xr.open_dataset(tmp_path / "r.nc") as ds:
        assert list(ds.observable_name.values) == ["string", "xx"]
        ok, worst = within(ds.observable.values, ds.observable_err.values, ref)
        assert ok, worst
        ok, worst = within(ds.normalized_overlap.values, ds.normalized_overlap_err.values, 1.0)
        assert ok, worst
    bad = run("estimate", "a.nc", "--observable", "bad=Q0", "-o", "x.nc", cwd=tmp_path)
    assert bad.returncode == 2 and "--observable 'bad'" in bad.stderr and "Traceback" not in bad.stderr
    # on qubits 1-2 only: two shadows of one state have normalised overlap 1 there too (same fact)
    out = run("estimate", "a.nc", "--overlap", "b.nc", "--overlap-qubits", "1-2", "-o", "r2.nc", cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    with xr.open_dataset(tmp_path / "r2.nc") as ds:
        ok, worst = within(ds.normalized_overlap.values, ds.normalized_overlap_err.values, 1.0)
        assert ok, worst
    for qubits, words in (("1-x", "a list a,b,c of qubits"), ("2,7", "from 0 to 3")):
        bad = run("estimate", "a.nc", "--overlap", "b.nc", "--overlap-qubits", qubits, "-o", "x.nc", cwd=tmp_path)
        assert bad.returncode == 2 and "--overlap-qubits" in bad.stderr and words in bad.stderr, bad.stderr


def test_observables_through_the_api():
    model = mb.parse_model(SPEC)
    shadow = mb.simulate(model, "zero", snapshots=2000, seed=3)
    result = mb.estimate(shadow, observables=["z0=Z0", "zz=Z1 Z2"], quantities=["observables"])
    ok, worst = within(result.observable.values, result.observable_err.values, [1.0, 1.0])  # |0000>: Z strings = 1
    assert ok, worst
