"""dask: the same estimates from parts of the records, on threads and on a local cluster of two workers."""

import numpy as np
import pytest

from manybody.estimation import parallel
from manybody.estimation.driver import estimate
from manybody.estimation.setup import parse_subsystems
from manybody.io.shadow import read_shadow, write_shadow
from manybody.measure.ensembles import LocalEnsemble, ShallowEnsemble
from manybody.references import exact
from tests.helpers import chain, make_shadow, tfim_model

N = 8


def largest_difference(a, b):
    assert set(a.data_vars) == set(b.data_vars)
    return max(float(np.nanmax(np.abs(a[v].values - b[v].values), initial=0)) for v in a.data_vars)


@pytest.fixture
def small_parts(monkeypatch):
    monkeypatch.setattr(parallel, "PART_RECORDS", 3000)


@pytest.mark.parametrize("ens,shots", [(LocalEnsemble(N), 1), (LocalEnsemble(N), 6),
                                       (ShallowEnsemble(N, 2, chain(N)), 1)], ids=["local", "local-shots", "shallow"])
def test_threads_give_the_serial_results(ens, shots, small_parts, monkeypatch):
    # The serial path is the reference: sums over parts in another order agree to rounding (1e-12).
    from manybody.estimation.accumulators import purity

    monkeypatch.setattr(purity, "HISTOGRAM_MAX_SITES", 4)  # 0-7 then takes the pair-count path
    model = tfim_model(N)
    _, psi = exact.ground_state(model.hamiltonian)
    shadow = make_shadow(psi, ens, 6000 // shots, shots=shots, seed=5)
    quantities = ("energy", "correlations", "mutual_information", "total_magnetization", "purity")
    subsystems = parse_subsystems("0-2;3,5;0-7" if ens.is_local else "0-2;3,5", N)
    serial = estimate(shadow, model, subsystems, quantities=quantities, chunk=2048)
    threaded = estimate(shadow, model, subsystems, quantities=quantities, chunk=2048, scheduler="threads")
    assert largest_difference(serial, threaded) < 1e-12


def test_local_cluster_of_two_workers_gives_the_serial_results(tmp_path, small_parts):
    distributed = pytest.importorskip("dask.distributed")
    model = tfim_model(N)
    _, psi = exact.ground_state(model.hamiltonian)
    write_shadow(make_shadow(psi, LocalEnsemble(N), 9000, seed=6), tmp_path / "s.nc")
    shadow = read_shadow(tmp_path / "s.nc")
    quantities = ("energy", "correlations", "mutual_information")
    serial = estimate(shadow, model, quantities=quantities)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster, distributed.Client(cluster) as client:
        clustered = estimate(shadow, model, quantities=quantities, scheduler=client)
    assert largest_difference(serial, clustered) < 1e-12
