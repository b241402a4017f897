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


def test_every_scheduler_gives_the_same_numbers(small_parts):
    # The parts, the BLAS threads and the order of merging do not depend on the scheduler: the
    # default (threads on more than one core), 'threads' and 'sync' give identical datasets.
    model = tfim_model(N)
    _, psi = exact.ground_state(model.hamiltonian)
    shadow = make_shadow(psi, LocalEnsemble(N), 10000, seed=8)
    subsystems = parse_subsystems("0-1;2-5", N)
    results = [estimate(shadow, model, subsystems, chunk=1500, scheduler=s) for s in (None, "threads", "sync")]
    for other in results[1:]:
        assert largest_difference(results[0], other) == 0.0


def test_records_with_counts_give_the_results_of_one_row_per_shot(small_parts):
    # The same snapshots written once per shot and as (distinct outcome, count) records of each
    # setting: every quantity agrees to rounding, also when a record has more shots than a chunk.
    model = tfim_model(N)
    _, psi = exact.ground_state(model.hamiltonian)
    shadow = make_shadow(psi, LocalEnsemble(N), 100, shots=40, seed=9)
    key = shadow.record_setting * 2**N + shadow.outcomes @ (2 ** np.arange(N))
    _, first, counts = np.unique(key, return_index=True, return_counts=True)
    grouped = shadow.with_records(shadow.record_setting[first], shadow.outcomes[first], counts)
    assert counts.max() > 6
    subsystems = parse_subsystems("0-2", N)
    rows = estimate(shadow, model, subsystems, chunk=6)
    records = estimate(grouped, model, subsystems, chunk=6)
    assert largest_difference(rows, records) < 1e-12


def test_shot_pieces_repeat_every_record_its_count():
    # Plain arithmetic: the pieces, concatenated, are np.repeat of the records; none is longer than asked.
    from manybody.estimation.driver import shot_pieces

    rng = np.random.default_rng(1)
    pos, counts = np.arange(30), rng.integers(0, 9, 30)
    counts[4] = 40  # more shots than a piece
    bits = rng.integers(0, 2, (30, 3), dtype=np.uint8)
    pieces = list(shot_pieces(pos, bits, counts, 7))
    assert max(len(p) for p, _ in pieces) <= 7
    assert np.array_equal(np.concatenate([p for p, _ in pieces]), np.repeat(pos, counts))
    assert np.array_equal(np.concatenate([b for _, b in pieces]), np.repeat(bits, counts, axis=0))


def test_series_on_threads_equals_the_series_in_this_thread():
    # A quench series runs one shadow per thread; each result must equal the one-thread estimate exactly
    # (a reproducibility check of our own scheduling, no outside source).
    import manybody as mb

    model = tfim_model(N)
    shadows = mb.simulate(model, "neel", 1500, times=[0.0, 0.4, 0.8], seed=4)
    threads = mb.estimate_series(shadows, subsystems="0-1", scheduler="threads")
    alone = mb.estimate_series(shadows, subsystems="0-1", scheduler="sync")
    assert largest_difference(threads, alone) == 0.0
