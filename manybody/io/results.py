"""Results datasets on disk: atomic netCDF writes, series along time or label."""

from __future__ import annotations

import numpy as np
import xarray as xr

from manybody.io.files import GuardedFile, atomic_path


def write_dataset(ds: xr.Dataset, path) -> None:
    """netCDF-4 (h5netcdf) through a temporary file and a rename: nothing half-written.

    A failed write (disk full, read-only folder, a folder named as the
    file) raises InputError("cannot write PATH: ...") and leaves no
    temporary file; an existing file at ``path`` stays as it was.
    """
    with atomic_path(path, ".nc") as tmp:  # OSError inside becomes InputError, temporary removed
        with GuardedFile(open(tmp, "r+b", buffering=0), path) as sink:  # HDF5 never meets the failure
            ds.to_netcdf(sink, engine="h5netcdf")
        sink.raise_failure()


def combine_series(datasets, labels) -> xr.Dataset:
    """One dataset per shadow -> one with a ``time`` dimension (when every label has a time) or ``label``."""
    if len(datasets) == 1:
        return datasets[0]
    if all("time" in lab for lab in labels):
        times = [float(lab["time"]) for lab in labels]
        order = np.argsort(times, kind="stable")
        out = xr.concat([datasets[i] for i in order], dim="time", coords="minimal", compat="override",
                        combine_attrs="override")
        return out.assign_coords(time=[times[i] for i in order])
    names = [",".join(f"{k}={v}" for k, v in lab.items()) or f"shadow {i}" for i, lab in enumerate(labels)]
    out = xr.concat(datasets, dim="label", coords="minimal", compat="override", combine_attrs="override")
    return out.assign_coords(label=names)
