"""From one shadow to the results dataset, with error bars (docs/design.md sections 4, 5 and 9).

The driver reads the shadow once, in chunks of snapshots; every chunk goes
to each requested accumulator, which adds it to its own per-block sums
(blocks are runs of whole settings). After the last chunk the accumulators
close their within-setting sums, the error-bar method runs over their block
sums, and each writes its variables into one xarray Dataset.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from manybody import __version__
from manybody.errors import InputError
from manybody.estimation.accumulators import ACCUMULATORS, DEFAULT_QUANTITIES
from manybody.estimation.accumulators.purity import warn_long_pair_counts
from manybody.estimation.errorbars import METHODS
from manybody.estimation.parallel import fill_parts
from manybody.estimation.setup import Chunk, Eigenvalues, Setup, Subsystem, parse_subsystems
from manybody.schema import site_coords

__all__ = ["estimate", "parse_subsystems", "Subsystem"]


def estimate(shadow, model=None, subsystems=(), calibration=None, n_blocks: int = 20, method: str = "jackknife",
             correlations: bool = True, mutual_information: bool = True, chunk: int = 8192, progress=None,
             quantities=None, options: dict | None = None, scheduler=None) -> xr.Dataset:
    """Estimates with error bars of the requested quantities (default: all that the shadow and model allow).

    ``quantities`` are names of :data:`manybody.estimation.accumulators.ACCUMULATORS`;
    ``correlations=False`` keeps the magnetization but skips the pair maps;
    ``options`` are handed to every accumulator's ``build`` (for example a target state);
    ``scheduler`` (None: threads when more than one core is available; "threads", "sync",
    a cluster address or a dask.distributed Client) runs the parts of the records
    (:mod:`manybody.estimation.parallel`); the results do not depend on it.
    ``chunk``: snapshots per chunk handed to the accumulators.
    """
    if method not in METHODS:
        raise InputError(f"unknown error-bar method {method!r}; allowed: {', '.join(METHODS)}", argument="errors")
    setup, counts = _setup(shadow, model, subsystems, calibration, n_blocks)
    if quantities is None or "purity" in quantities:
        warn_long_pair_counts(setup, counts)
    options = {"correlations": correlations, "mutual_information": mutual_information, **(options or {})}
    accumulators = fill_parts(setup, lambda s: _accumulators(s, quantities, options), chunk, scheduler, progress)
    for acc in accumulators:
        acc.finish()
    return _dataset(setup, accumulators, counts, method)


def fill(accumulators, setup, chunks, size: int = 8192) -> None:
    """Hand the snapshots of every read (setting positions, outcomes, counts) to every accumulator, one row per
    shot, in chunks of at most ``size`` snapshots."""
    for pos, bits, weights in chunks:
        for part_pos, part_bits in shot_pieces(pos, bits, weights, size):
            part = Chunk(setup, part_pos, part_bits)
            for acc in accumulators:
                acc.add(part)


def shot_pieces(pos, bits, weights, size: int):
    """Records (positions, outcomes, counts) as pieces of at most ``size`` rows, record r repeated counts[r] times.

    A record with more shots than ``size`` is cut across pieces (only its
    repetitions are ever in memory, ``size`` at a time).
    """
    weights = np.asarray(weights, dtype=np.int64)
    if len(weights) and weights.min() == 1 and weights.max() == 1:  # one shot per record: slices
        for a in range(0, len(weights), size):
            yield pos[a:a + size], bits[a:a + size]
        return
    ends = np.cumsum(weights)
    starts = ends - weights
    total = int(ends[-1]) if len(ends) else 0
    for a in range(0, total, size):
        b = min(a + size, total)
        first, last = np.searchsorted(ends, a, side="right"), np.searchsorted(starts, b, side="left")
        reps = np.minimum(ends[first:last], b) - np.maximum(starts[first:last], a)
        yield np.repeat(pos[first:last], reps), np.repeat(bits[first:last], reps, axis=0)


def _setup(shadow, model, subsystems, calibration, n_blocks, read: int = 1 << 20):
    """The Setup, and the per-block snapshot counts n and n2 (sum of squared shots per setting).

    One pass over the setting ids and counts of the records (``read`` at a time), not their outcomes.
    """
    n = shadow.ensemble.n_qubits
    if model is not None and model.n_qubits != n:
        raise InputError(f"the model has {model.n_qubits} qubits but the shadow has {n}", argument="model")
    qubit_site = np.asarray(shadow.qubit_site if model is None else model.qubit_site)
    k = len(shadow.settings)
    per_setting = np.zeros(k)
    for pos, _, weights in shadow.chunks(read, outcomes=False):
        per_setting += np.bincount(pos, weights=weights, minlength=k)
    active = np.flatnonzero(per_setting)
    if len(active) < 2:
        raise InputError("the shadow needs snapshots from at least two settings", argument="shadow")
    n_blocks = int(min(n_blocks, len(active)))
    setting_block = np.full(k, -1)
    setting_block[active] = np.arange(len(active)) * n_blocks // len(active)  # contiguous runs of settings
    setup = Setup(shadow=shadow, model=model, lam=Eigenvalues(shadow.ensemble, calibration), qubit_site=qubit_site,
                  setting_block=setting_block, n_blocks=n_blocks, multi=bool(per_setting.max() > 1),
                  subsystems=list(subsystems), setting_shots=per_setting)
    blocks = setting_block[active]
    counts = {"n": np.bincount(blocks, weights=per_setting[active], minlength=n_blocks).astype(float),
              "n2": np.bincount(blocks, weights=per_setting[active] ** 2, minlength=n_blocks).astype(float)}
    return setup, counts


def _accumulators(setup, quantities, options):
    names = DEFAULT_QUANTITIES if quantities is None else tuple(quantities)
    unknown = [q for q in names if q not in ACCUMULATORS]
    if unknown:
        raise InputError(f"unknown quantity {unknown[0]!r}; allowed: {', '.join(ACCUMULATORS)}",
                         argument="quantities")
    built = [ACCUMULATORS[name].build(setup, options) for name in ACCUMULATORS if name in names]
    return [acc for acc in built if acc is not None]


def _dataset(setup, accumulators, counts, method) -> xr.Dataset:
    coords = site_coords(setup.model, setup.n_sites)
    data = {}
    for acc in accumulators:
        full, err = acc.errors(counts, method)
        acc.variables(full, err, data, coords)
    shadow = setup.shadow
    ens = shadow.ensemble
    attrs = {"n_snapshots": int(counts["n"].sum()), "n_settings": int(len(shadow.settings)),
             "ensemble": ens.kind, "depth": int(ens.depth), "error_method": method,
             "error_blocks": int(setup.n_blocks), "calibrated": int(setup.calibrated),
             "several_shots_per_setting": int(setup.multi), "tool_version": __version__,
             "source": shadow.source, "label": str(shadow.label),
             "model_spec": setup.model.spec.text if setup.model is not None else ""}
    return xr.Dataset(data, coords=coords, attrs=attrs)
