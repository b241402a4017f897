"""Synthetic experiments: noise, reproducibility, series, backends."""

import numpy as np
import pytest

from hamiltonians.spec import parse_spec
from manybody.errors import InputError
from manybody.io.shadow import read_shadow
from manybody.simulation.experiment import Noise, product_letters, simulate

CHAIN = '[lattice]\nkind = "chain"\nsize = [{n}]\n[model]\nkind = "tfim"\nJ = 1.0\nh = 1.0\n'


def model(n=6):
    return parse_spec(CHAIN.format(n=n), "chain.toml").build()


def all_records(shadow):
    chunks = list(shadow.chunks())
    return (np.concatenate([c[0] for c in chunks]), np.concatenate([c[1] for c in chunks]),
            np.concatenate([c[2] for c in chunks]))


def test_readout_noise_biases_z_as_one_minus_2p(tmp_path):
    # With bit-flip probability p the local Z estimator 3 (-1)^b [basis Z] on |0...0>
    # has mean 1 - 2p (common practice, no source: a flip turns +1 into -1); 4-sigma bound.
    p = 0.05
    path = simulate(model(), "zero", 30000, noise=Noise(p01=p, p10=p), seed=3, output=str(tmp_path / "s.nc"))[0]
    shadow = read_shadow(path)
    setting, bits, _ = all_records(shadow)
    basis = shadow.settings.basis[setting]
    est = np.where(basis == 2, 3.0 * (1 - 2.0 * bits), 0.0)
    mean, err = est.mean(axis=0), est.std(axis=0, ddof=1) / np.sqrt(len(est))
    assert np.all(np.abs(mean - (1 - 2 * p)) < 4 * err)
    assert shadow.metadata["readout_p01"] == [p]


def test_depolarizing_before_measurement_randomises_outcomes(tmp_path):
    # Depolarizing with probability q randomises the outcome with probability q, so <Z> = 1 - q
    # on |0...0> (common practice, no source); 4-sigma bound.
    q = 0.2
    path = simulate(model(), "zero", 30000, noise=Noise(depolarizing=q), seed=4, output=str(tmp_path / "d.nc"))[0]
    shadow = read_shadow(path)
    setting, bits, _ = all_records(shadow)
    est = np.where(shadow.settings.basis[setting] == 2, 3.0 * (1 - 2.0 * bits), 0.0)
    err = est.std(axis=0, ddof=1) / np.sqrt(len(est))
    assert np.all(np.abs(est.mean(axis=0) - (1 - q)) < 4 * err)


def test_same_seed_same_content_other_seed_independent(tmp_path):
    a = read_shadow(simulate(model(), "ground", 3000, seed=7, output=str(tmp_path / "a.nc"))[0])
    b = read_shadow(simulate(model(), "ground", 3000, seed=7, output=str(tmp_path / "b.nc"))[0])
    c = read_shadow(simulate(model(), "ground", 3000, seed=8, output=str(tmp_path / "c.nc"))[0])
    for x, y in zip(all_records(a), all_records(b)):
        assert np.array_equal(x, y)
    assert np.array_equal(a.settings.basis, b.settings.basis)
    assert not np.array_equal(all_records(a)[1], all_records(c)[1])


def test_quench_series_files_and_labels(tmp_path):
    paths = simulate(model(), "neel", 500, ensemble_kind="shallow", depth=2, shots=10, times=[0.0, 0.5, 1.0],
                     seed=1, output=str(tmp_path / "q"))
    assert [p.split("/")[-1] for p in paths] == ["shadow_t0.nc", "shadow_t0.5.nc", "shadow_t1.nc"]
    shadows = [read_shadow(p) for p in paths]
    assert [s.label["time"] for s in shadows] == [0.0, 0.5, 1.0]
    assert all(s.n_snapshots == 500 for s in shadows)
    # the Neel state is an eigenstate of sum ZZ: energy at t = 0 is -J (n-1) (open chain)
    assert shadows[0].metadata["state_energy"] == pytest.approx(5.0)
    # energy is conserved by the evolution (exact dense evolution)
    assert shadows[2].metadata["state_energy"] == pytest.approx(5.0, abs=1e-9)


def test_mps_backend_matches_dense_ground_energy(tmp_path):
    dense = read_shadow(simulate(model(8), "ground", 100, seed=1, output=str(tmp_path / "d.nc"))[0])
    mps = read_shadow(simulate(model(8), "ground", 100, ensemble_kind="shallow", depth=1, backend="mps",
                               seed=1, output=str(tmp_path / "m.nc"))[0])
    assert mps.metadata["backend"] == "mps" and mps.metadata["discarded_weight"] < 1e-8
    assert mps.metadata["state_energy"] == pytest.approx(dense.metadata["state_energy"], abs=1e-8)


def test_product_state_names():
    assert product_letters("neel", 5) == "01010"
    assert product_letters("+-+-", 4) == "+-+-"
    with pytest.raises(InputError, match="expected 'ground', a name"):
        product_letters("0x", 2)
