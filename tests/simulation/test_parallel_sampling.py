"""Chunks of settings drawn by several threads give the same records, byte for byte, as the serial loop."""

import pytest

from manybody.errors import InputError
from manybody.simulation import experiment
from manybody.simulation.experiment import simulate_in_memory, simulate_shadows
from manybody.threads import ordered_map
from tests.helpers import tfim_model


def records(workers, backend, ensemble, depth, shots=1, times=None):
    shadows = simulate_in_memory(tfim_model(6), "ground", 300, ensemble, depth, shots, times, backend=backend,
                                 seed=17, workers=workers)
    return [(s.record_setting, s.outcomes, s.counts, s.metadata) for s in shadows]


@pytest.mark.parametrize("backend", ["dense", "mps"])
@pytest.mark.parametrize("ensemble,depth", [("local", 0), ("shallow", 2)])
def test_two_workers_give_the_serial_records(monkeypatch, backend, ensemble, depth):
    monkeypatch.setattr(experiment, "SETTINGS_PER_CHUNK", 16)  # many chunks, so that threads overlap
    serial = records(1, backend, ensemble, depth, shots=2, times=None if backend == "mps" else [0.0, 0.3])
    parallel = records(2, backend, ensemble, depth, shots=2, times=None if backend == "mps" else [0.0, 0.3])
    assert len(serial) == len(parallel)
    for (ids1, bits1, counts1, meta1), (ids2, bits2, counts2, meta2) in zip(serial, parallel):
        assert ids1.tobytes() == ids2.tobytes()
        assert bits1.dtype == bits2.dtype and bits1.tobytes() == bits2.tobytes()
        assert counts1.tobytes() == counts2.tobytes()
        assert meta1 == meta2  # discarded weight included
    # not trivially equal: the outcomes of a ground state vary from snapshot to snapshot
    assert 0.05 < serial[0][1].mean() < 0.95


def test_ordered_map_keeps_order_and_bounds_the_work_ahead():
    started = []

    def slow_square(x):
        started.append(x)
        return x * x

    out = ordered_map(slow_square, range(100), 2)
    first = [next(out) for _ in range(3)]
    assert first == [0, 1, 4]
    assert len(started) <= 3 + 2 * 2  # only a few chunks are drawn ahead (ahead = 2 per worker)
    out.close()
    assert list(ordered_map(slow_square, range(50), 3)) == [x * x for x in range(50)]


def test_workers_must_be_positive():
    with pytest.raises(InputError, match="workers must be at least 1"):
        list(simulate_shadows(tfim_model(4), "zero", 10, workers=0))
