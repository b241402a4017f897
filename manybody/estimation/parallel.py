"""The chunked pass in parts: records split into parts, accumulators filled per part, their sums added in order.

Every accumulator is a reduction over chunks of snapshots (docs/design.md
section 9): per-block sums and per-setting sums simply add, so a part of the
records can be read and accumulated anywhere — in this thread, by a pool of
threads on this machine, or by a worker of a dask.distributed cluster — and
the parts merged in record order. Every scheduler cuts the records into the
same parts, fills each with BLAS on one thread and merges them in the same
order, so the results do not depend on the scheduler (nor on the number of
threads): they are the same numbers, bit for bit, on one machine.

At most a few parts per worker are in flight, so memory stays flat however
many records the shadow holds.

Accumulators with state beyond their sums (purities kept per setting or per
pair of snapshots, counts of visible strings) add it in ``merge_state(other)``;
an accumulator that keeps other attributes in ``add`` must define it.
"""

from __future__ import annotations

from manybody.errors import InputError
from manybody.threads import available_cores, ordered_map_one_blas, ordered_results, single_threaded_blas

#: records per part (a few chunks each, so that every worker stays busy)
PART_RECORDS = 1 << 17
#: parts in flight per worker: results waiting to be merged in order, the bound on memory
PARTS_IN_FLIGHT = 2
#: names of the local schedulers: a pool of threads on this machine, or this thread alone
THREADS, SERIAL = ("threads",), ("sync", "synchronous", "serial")


def merge(acc, other) -> None:
    """Add the sums of ``other`` (the same accumulator, filled with other records) into ``acc``."""
    for name, part in other.sums.data.items():
        acc.sums.add_blocks(name, part)
    for name, values in other.per_setting.data.items():
        if name in acc.per_setting.data:
            acc.per_setting.data[name] += values
        else:
            acc.per_setting.data[name] = values.copy()
    if hasattr(acc, "merge_state"):
        acc.merge_state(other)


def record_parts(n_records: int, part: int | None = None) -> list[tuple[int, int]]:
    """(start, stop) of each part of ``part`` records (default PART_RECORDS, read when called)."""
    part = PART_RECORDS if part is None else part
    return [(start, min(start + part, n_records)) for start in range(0, n_records, part)]


def part_size(accumulators) -> int | None:
    """The smallest part any of the accumulators asks for (None: the default), the same for every scheduler."""
    asked = [getattr(acc, "part_records", None) for acc in accumulators]
    asked = [a for a in asked if a]
    return min(asked) if asked else None


def fill_part(setup, build, start: int, stop: int, chunk: int, source=None):
    """Accumulators filled with records start..stop (``source``: a shadow file to open here, for workers)."""
    from manybody.estimation.driver import fill

    shadow = setup.shadow
    if source is not None:
        from manybody.io.shadow import SHADOW_KIND, read_shadow

        shadow = read_shadow(source, kinds=(SHADOW_KIND,))
        setup = setup.with_shadow(shadow)
    accumulators = build(setup)
    with single_threaded_blas():  # nested inside the caller's limit: no change; on a cluster worker: the limit
        fill(accumulators, setup, shadow.chunks(stop - start, start, stop), chunk)
    return accumulators


def fill_parts(setup, build, chunk: int, scheduler=None, progress=None):
    """Accumulators of all records, filled part by part and merged in record order.

    ``scheduler``: None (threads when this process may use more than one core,
    else this thread), "threads", "sync", an address such as "tcp://host:8786",
    or a dask.distributed Client. ``progress`` wraps the sequence of parts.
    """
    parts = record_parts(setup.shadow.n_records, part_size(build(setup)))
    results = _run(setup, build, chunk, scheduler, parts)
    merged = None
    for accumulators in (progress(_Sized(results, len(parts))) if progress else results):
        if merged is None:
            merged = accumulators
            continue
        for acc, more in zip(merged, accumulators):
            merge(acc, more)
    if merged is None:  # no records at all
        merged = build(setup)
    for acc in merged:
        acc.setup = setup
    return merged


class _Sized:
    """An iterator that knows its length (for a progress bar)."""

    def __init__(self, items, size):
        self.items, self.size = items, size

    def __iter__(self):
        return iter(self.items)

    def __len__(self):
        return self.size


def _run(setup, build, chunk, scheduler, parts):
    """The filled accumulators of every part, in order (a generator)."""
    if scheduler is None:
        workers = min(available_cores(), len(parts))
    elif isinstance(scheduler, str) and scheduler in SERIAL:
        workers = 1
    elif isinstance(scheduler, str) and scheduler in THREADS:
        workers = available_cores()
    elif isinstance(scheduler, str) and scheduler == "processes":
        raise InputError("scheduler: 'processes' is not supported; use 'threads' or a dask.distributed "
                         "cluster address", argument="scheduler")
    else:
        client = _client(scheduler)
        source = getattr(setup.shadow, "origin", "") or None
        if source is None:
            raise InputError("scheduler: a cluster reads the shadow from its file; write it first "
                             "(Shadow.to_netcdf)", argument="scheduler")
        return _run_cluster(setup.with_shadow(None), build, chunk, client, source, parts)

    def one(part):
        return fill_part(setup, build, part[0], part[1], chunk)

    return ordered_map_one_blas(one, parts, workers, PARTS_IN_FLIGHT)


def _run_cluster(lite, build, chunk, client, source, parts):
    """As the pool of threads, on the workers of a dask.distributed cluster, which read the shadow ``source``."""
    window = PARTS_IN_FLIGHT * max(1, len(client.scheduler_info().get("workers", {})))

    def submit(part):
        return client.submit(fill_part, lite, build, part[0], part[1], chunk, source, pure=False)

    return ordered_results(submit, parts, window)


def _client(scheduler):
    """A dask.distributed Client for a Client or a cluster address; InputError otherwise."""
    if isinstance(scheduler, str) and "://" not in scheduler:
        raise InputError(f"scheduler {scheduler!r}: allowed: threads, sync, or a cluster address such as "
                         "tcp://host:8786", argument="scheduler")
    try:
        from dask.distributed import Client
    except ImportError:
        raise InputError("scheduler: a cluster needs dask.distributed; pip install 'manybody[dask]'",
                         argument="scheduler") from None
    if isinstance(scheduler, Client):
        return scheduler
    if not isinstance(scheduler, str):
        raise InputError(f"scheduler {scheduler!r}: allowed: threads, sync, or a cluster address such as "
                         "tcp://host:8786", argument="scheduler")
    try:
        return Client(scheduler, timeout=30)
    except OSError as exc:
        raise InputError(f"scheduler {scheduler}: cannot reach the cluster ({exc})", argument="scheduler") from None
