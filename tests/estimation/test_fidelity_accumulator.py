"""Fidelity through the estimate driver, the Python API and the command line."""

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import manybody as mb
from manybody.estimation.calibration import Calibration
from manybody.estimation.driver import estimate
from manybody.measure.ensembles import LocalEnsemble, ShallowEnsemble
from manybody.references import exact
from manybody.simulation.noise import Noise
from tests.helpers import chain, make_shadow, tfim_model, within

ROOT = Path(__file__).resolve().parents[2]


@pytest.mark.parametrize("depth", [0, 2])
def test_fidelity_of_the_sampled_state_to_itself_and_to_a_product_state(depth):
    # F(psi, psi) = 1 and F(psi, |0...0>) = |<0...0|psi>|^2 (scipy ground state; facts of the trade).
    n = 6
    model = tfim_model(n)
    _, psi = exact.ground_state(model.hamiltonian)
    ens = LocalEnsemble(n) if depth == 0 else ShallowEnsemble(n, depth, chain(n))
    shadow = make_shadow(psi, ens, 4000, seed=30 + depth)
    zero = exact.product_state("0" * n)
    for target, value in ((psi, 1.0), (zero, abs(psi[0]) ** 2)):
        result = estimate(shadow, model, quantities=("fidelity",), options={"target": target})
        ok, worst = within(result.fidelity.values, result.fidelity_err.values, value)
        assert ok, worst


def test_shallow_fidelity_beyond_the_exact_size_carries_the_fit_residual():
    # 16 qubits at depth 2: the fitted tensor-network inverse (docs/design.md section 4). The GHZ
    # state's fidelity to itself is 1 and to |0...0> is 1/2 (facts of the trade); the error bar
    # includes the fit's bias bound max|lambda g - 1| (checked on all 2^16 support patterns).
    import quimb.tensor as qtn

    from manybody.estimation.shallow_network import shallow_inverse
    from manybody.io.shadow import Shadow
    from manybody.simulation.sampling import sample_mps

    n = 16
    ghz = np.zeros(2**n)
    ghz[[0, -1]] = 1 / np.sqrt(2)
    ens = ShallowEnsemble(n, 2, chain(n))
    rng = np.random.default_rng(5)
    settings = ens.draw(600, rng)
    bits, _ = sample_mps(qtn.MPS_ghz_state(n), ens, settings, 1, rng)  # exact: bond 2 never truncated
    shadow = Shadow(ensemble=ens, settings=settings, qubit_site=np.arange(n), record_setting=settings.ids,
                    outcomes=bits, counts=np.ones(600, np.int64))
    for target, value in ((qtn.MPS_computational_state("0" * n), 0.5), (ghz, 1.0)):
        result = estimate(shadow, None, quantities=("fidelity",), options={"target": target})
        attrs = result.fidelity.attrs
        bias = shallow_inverse(ens, bond=int(attrs["inverse_bond"])).bias_bound  # the bond the estimate chose
        assert attrs["inverse_bias_bound"] == bias
        assert attrs["inverse_max_residual_over"] == "all support patterns"
        # our own rule: the sweep's rounding bound (single precision when it is at most a tenth of the
        # bias bound, docs/design.md section 4.5) is added to the bias bound
        assert attrs["rounding_bound"] <= 0.1 * bias
        assert float(result.fidelity_err) >= attrs["bias_bound_in_error"] == bias + attrs["rounding_bound"]
        ok, worst = within(result.fidelity.values, result.fidelity_err.values, value)
        assert ok, worst
    # our own behaviour: the fitted route asks for small parts (the progress bar moves, the parts share
    # the cores, here 3 parts of 256 records); every scheduler cuts the same parts and gives the same numbers
    from manybody.estimation.accumulators.fidelity import NETWORK_PART_RECORDS

    serial = estimate(shadow, None, quantities=("fidelity",), options={"target": ghz}, scheduler="sync")
    assert NETWORK_PART_RECORDS < 600 and float(serial.fidelity) == float(result.fidelity)


def test_robust_fidelity_with_readout_errors():
    # Readout flips shrink lambda per qubit; the calibrated inverse removes the bias
    # (Chen, Yu, Zeng, Flammia, PRX Quantum 2, 030348 (2021)). Target: the prepared state itself.
    n = 5
    plus = exact.product_state("+-0+1")
    noise = Noise(p01=0.04, p10=0.04)
    zero = exact.product_state("0" * n)
    cal = Calibration(make_shadow(zero, LocalEnsemble(n), 40000, seed=3, noise=noise))
    shadow = make_shadow(plus, LocalEnsemble(n), 8000, seed=4, noise=noise)
    robust = estimate(shadow, None, calibration=cal, quantities=("fidelity",), options={"target": plus})
    ok, worst = within(robust.fidelity.values, robust.fidelity_err.values, 1.0)
    assert ok, worst
    plain = estimate(shadow, None, quantities=("fidelity",), options={"target": plus})
    assert float(plain.fidelity) < 1 - 4 * float(plain.fidelity_err)  # biased without calibration


def test_api_and_command_line_targets(tmp_path):
    spec = tmp_path / "chain.toml"
    spec.write_text('[lattice]\nkind = "chain"\nsize = [6]\n[model]\nkind = "tfim"\nJ = 1.0\nh = 1.0\n')
    model = mb.load_model(spec)
    shadow = mb.simulate(model, "ground", snapshots=3000, seed=8)
    result = mb.estimate(shadow, target="ground", quantities=["fidelity"])
    ok, worst = within(result.fidelity.values, result.fidelity_err.values, 1.0)  # same state: F = 1
    assert ok, worst
    assert result.fidelity.attrs["target"] == "ground"
    with pytest.raises(mb.InputError, match="^target: the state has 3 qubits"):
        mb.estimate(shadow, target=np.ones(8))
    path = tmp_path / "gs.nc"
    shadow_file = mb.simulate(model, "neel", snapshots=2000, seed=9)
    from manybody.io.shadow import write_shadow

    write_shadow(shadow_file, path)
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    out = subprocess.run([sys.executable, "-m", "manybody", "estimate", str(path), "--target", "010101",
                          "-o", str(tmp_path / "r.nc")], capture_output=True, text=True, env=env, timeout=300)
    assert out.returncode == 0, out.stderr
    assert "fidelity" in out.stdout
    import xarray as xr

    with xr.open_dataset(tmp_path / "r.nc") as written:  # the neel state is 010101: F = 1
        ok, worst = within(written.fidelity.values, written.fidelity_err.values, 1.0)
    assert ok, worst
