"""Estimation with dask: the records split into parts, accumulators filled per part, their sums added.

Every accumulator is a reduction over chunks of snapshots (docs/design.md
section 9): per-block sums and per-setting sums simply add, so a part of the
records can be read and accumulated anywhere, by a thread or by a worker of
a dask.distributed cluster, and the parts merged in a fixed order. The
results equal the serial ones up to the order of floating-point additions.

Accumulators with state beyond their sums (purities kept per setting or per
pair of snapshots, counts of visible strings) add it in ``merge_state(other)``;
an accumulator that keeps other attributes in ``add`` must define it.
"""

from __future__ import annotations

from manybody.errors import InputError

#: records per part (a few chunks each, so that every worker stays busy)
PART_RECORDS = 1 << 17


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


def record_parts(n_records: int, part: int = PART_RECORDS) -> list[tuple[int, int]]:
    return [(start, min(start + part, n_records)) for start in range(0, n_records, part)]


def fill_part(setup, build, start: int, stop: int, chunk: int, source=None):
    """Accumulators filled with records start..stop (``source``: a shadow file to open here, for workers)."""
    from manybody.estimation.driver import fill

    shadow = setup.shadow
    if source is not None:
        from manybody.io.shadow import SHADOW_KIND, read_shadow

        shadow = read_shadow(source, kinds=(SHADOW_KIND,))
        setup = setup.with_shadow(shadow)
    part = shadow.with_records(shadow.record_setting[start:stop], shadow.outcomes[start:stop],
                               shadow.counts[start:stop])
    accumulators = build(setup)
    fill(accumulators, setup, part.chunks(chunk))
    return accumulators


def fill_parallel(setup, build, chunk: int, scheduler):
    """Accumulators of all records, filled part by part by dask (``scheduler``: "threads", "sync", an address
    such as "tcp://host:8786", or a dask.distributed Client)."""
    try:
        import dask
    except ImportError:
        raise InputError("scheduler: dask is not installed; pip install 'manybody[dask]'",
                         argument="scheduler") from None
    shadow = setup.shadow
    client, compute = _scheduler(scheduler)
    distributed = client is not None
    source = getattr(shadow, "origin", "") or None
    if distributed and source is None:
        raise InputError("scheduler: a cluster reads the shadow from its file; write it first (Shadow.to_netcdf)",
                         argument="scheduler")
    lite = setup.with_shadow(None) if distributed else setup
    tasks = [dask.delayed(fill_part)(lite, build, a, b, chunk, source if distributed else None)
             for a, b in record_parts(shadow.n_records)]
    parts = compute(tasks)
    merged = parts[0]
    for other in parts[1:]:
        for acc, more in zip(merged, other):
            merge(acc, more)
    for acc in merged:
        acc.setup = setup
    return merged


def _scheduler(scheduler):
    """(client or None, a function computing a list of delayed tasks in order)."""
    import dask

    if isinstance(scheduler, str) and scheduler in ("threads", "sync", "synchronous", "processes"):
        if scheduler == "processes":
            raise InputError("scheduler: 'processes' is not supported; use 'threads' or a dask.distributed "
                             "cluster address", argument="scheduler")
        return None, lambda tasks: list(dask.compute(*tasks, scheduler=scheduler))
    try:
        from dask.distributed import Client
    except ImportError:
        raise InputError("scheduler: a cluster needs dask.distributed; pip install 'manybody[dask]'",
                         argument="scheduler") from None
    if isinstance(scheduler, Client):
        client = scheduler
    elif isinstance(scheduler, str) and "://" in scheduler:
        try:
            client = Client(scheduler, timeout=30)
        except OSError as exc:
            raise InputError(f"scheduler {scheduler}: cannot reach the cluster ({exc})", argument="scheduler") \
                from None
    else:
        raise InputError(f"scheduler {scheduler!r}: allowed: threads, sync, or a cluster address such as "
                         "tcp://host:8786", argument="scheduler")
    return client, lambda tasks: client.gather(client.compute(tasks))
