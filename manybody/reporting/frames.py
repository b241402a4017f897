"""What a report shows: which dataset is a results dataset, which times, and a reference that matches.

A report must never compare an estimate with the exact value of another
time, another subsystem or another lattice. The reference is therefore
matched to the results by time (coordinate values equal up to 1e-9) and by
subsystem label, and refused in one sentence when it does not match
(docs/formats.md, "Results dataset" and "Report folder").
"""

from __future__ import annotations

import ast

import numpy as np
import xarray as xr

from manybody.errors import InputError

TIME_TOLERANCE = 1e-9
MAX_FRAMES = 4
RESULT_VARIABLES = ("energy", "energy_density", "magnetization", "correlation", "renyi2", "purity", "fidelity",
                    "total_magnetization", "mutual_information", "structure_factor")
#: attributes that name the physics; when both datasets carry one, they must agree
IDENTITY_ATTRS = ("model_spec", "model_hash", "model", "spec", "state", "lattice")


def _label_attr(ds) -> dict:
    """The ``label`` attribute (Python literal text such as "{'time': 0.5}") as a dict; {} when absent."""
    try:
        value = ast.literal_eval(str(ds.attrs.get("label", "{}")))  # literals only, never code
    except (ValueError, SyntaxError):
        return {}
    return value if isinstance(value, dict) else {}


def check_results(ds: xr.Dataset, path: str = "results") -> None:
    """InputError (one sentence) unless ``ds`` is a results dataset written by ``estimate``."""
    attrs = ds.attrs
    if attrs.get("kind") == "exact reference":
        raise InputError(f"{path}: is an exact reference, not a results dataset (give it with --reference)")
    if "file_kind" in attrs:
        raise InputError(f"{path}: is a {attrs['file_kind']} file, not a results dataset "
                         "(run 'manybody estimate' on it first)")
    if "recommended_depth" in attrs:
        raise InputError(f"{path}: is a measurement plan, not a results dataset")
    if "n_snapshots" not in attrs or not any(name in ds for name in RESULT_VARIABLES) or "site" not in ds.dims:
        raise InputError(f"{path}: not a results dataset from 'manybody estimate' (it needs the attribute "
                         "n_snapshots, a site dimension and at least one estimated variable such as energy)")


def _times_text(values) -> str:
    return ", ".join(f"{float(t):g}" for t in values)


def select_times(ds: xr.Dataset, time: float | None = None) -> list:
    """Indices along ``time``/``label`` that the per-time figures show: the chosen time, or up to four."""
    dim = "time" if "time" in ds.dims else "label" if "label" in ds.dims else None
    if dim is None:
        if time is not None and "time" in _label_attr(ds):
            if abs(float(_label_attr(ds)["time"]) - float(time)) > TIME_TOLERANCE:
                raise InputError(f"time {time:g}: the results are at t = {float(_label_attr(ds)['time']):g} only",
                                 argument="time")
        elif time is not None:
            raise InputError(f"time {time:g}: the results are not a time series", argument="time")
        return [None]
    n = ds.sizes[dim]
    if time is not None:
        if dim != "time":
            raise InputError(f"time {time:g}: the results are a series by label, not by time", argument="time")
        hit = np.flatnonzero(np.abs(ds.time.values - float(time)) <= TIME_TOLERANCE)
        if len(hit) == 0:
            raise InputError(f"time {time:g}: not among the times of the results ({_times_text(ds.time.values)})",
                             argument="time")
        return [int(hit[0])]
    return sorted({int(i) for i in np.round(np.linspace(0, n - 1, min(n, MAX_FRAMES)))})


def frame(ds: xr.Dataset, index) -> tuple[xr.Dataset, str, str]:
    """(the dataset at one time, its title such as "t = 0.5", a file-name tag such as "_t0.5")."""
    if index is None:
        label = _label_attr(ds)
        return ds, (f"t = {float(label['time']):g}" if "time" in label else ""), ""
    if "time" in ds.dims:
        t = float(ds.time.values[index])
        return ds.isel(time=index), f"t = {t:g}", f"_t{t:g}"
    name = str(ds.label.values[index])
    tag = "".join(c if c.isalnum() or c in ".-" else "_" for c in name)
    return ds.isel(label=index), name, f"_{tag}"


def describe(ds: xr.Dataset) -> str:
    """Ensemble, depth, snapshots and error method, from the attributes of a results dataset."""
    a = ds.attrs
    ens = str(a.get("ensemble", "?"))
    depth = int(a.get("depth", 0))
    text = f"{ens} ensemble" + (f", depth {depth}" if ens == "shallow" or depth else "")
    series = "time" in ds.coords or "label" in ds.coords
    text += f", {int(a.get('n_snapshots', 0))} snapshots" + (" (first of the series)" if series else "")
    if int(a.get("calibrated", 0)):
        text += ", robust (calibrated)"
    return text


def caption(ds: xr.Dataset, title: str) -> str:
    """The top line of a figure: time (in 1/(energy unit of the couplings), hbar = 1) or label, then describe()."""
    if title.startswith("t = "):
        title += " (1/energy unit of the couplings, ħ = 1)"
    return (f"{title}\n" if title else "") + describe(ds)


def _refuse(what: str) -> None:
    raise InputError(f"reference: {what}; refusing to compare", argument="reference")


def _check_sites(results, reference) -> None:
    n, m = results.sizes.get("site", 0), reference.sizes.get("site", 0)
    if n != m:
        _refuse(f"it has {m} sites, the results {n}")
    for c in ("x", "y"):
        if c in results.coords and c in reference.coords and \
                not np.allclose(results[c].values, reference[c].values, atol=TIME_TOLERANCE):
            _refuse("its site positions differ from those of the results (another lattice)")


def _check_identity(results, reference) -> None:
    for key in IDENTITY_ATTRS:
        if key in results.attrs and key in reference.attrs and \
                str(results.attrs[key]).strip() != str(reference.attrs[key]).strip():
            _refuse(f"its {key} differs from that of the results")


def _match_times(results, reference) -> xr.Dataset:
    """The reference at the results' times (exact equality up to 1e-9), with the results' time values."""
    if "label" in results.dims or "label" in reference.dims:
        if "label" not in results.dims or "label" not in reference.dims or \
                list(results.label.values) != list(reference.label.values):
            _refuse("its series labels differ from those of the results")
        return reference
    if "time" in results.dims:
        want = results.time.values
    elif "time" in _label_attr(results):
        want = np.array([float(_label_attr(results)["time"])])
    else:
        want = None
    if want is None:
        if "time" in reference.dims or "time" in _label_attr(reference):
            _refuse("it is at a time t but the results carry no time")
        return reference
    have = reference.time.values if "time" in reference.dims else (
        np.array([float(_label_attr(reference)["time"])]) if "time" in _label_attr(reference) else np.array([]))
    if have.size == 0:
        _refuse(f"the results are at t = {_times_text(want)} but the reference has no time")
    gap = np.abs(want[:, None] - have[None, :])
    missing = want[gap.min(axis=1) > TIME_TOLERANCE]
    if missing.size:
        _refuse(f"it has no value at t = {_times_text(missing)} (its times: {_times_text(have)})")
    if "time" not in reference.dims:
        return reference
    picked = reference.isel(time=gap.argmin(axis=1))
    return picked.assign_coords(time=results.time.values) if "time" in results.dims else picked.squeeze("time")


def _match_subsystems(results, reference) -> xr.Dataset:
    if "subsystem" not in results.dims:
        return reference
    have = list(reference.subsystem.values) if "subsystem" in reference.dims else []
    missing = [str(s) for s in results.subsystem.values if s not in have]
    if missing:
        _refuse(f"it has no subsystem {', '.join(missing)}")
    ref = reference.sel(subsystem=results.subsystem.values)
    if not np.array_equal(ref.subsystem_size.values, results.subsystem_size.values):
        _refuse("its subsystem sizes differ from those of the results for the same labels")
    return ref


def match_reference(results: xr.Dataset, reference: xr.Dataset | None) -> xr.Dataset | None:
    """The reference aligned with the results (same times, same subsystems), or InputError in one sentence.

    Checks: the reference is an exact reference (not another estimate), has
    the same sites at the same positions, agrees on any model or state
    attribute both carry, has a value at every time of the results (equal up
    to 1e-9) and every subsystem label of the results with the same size.
    """
    if reference is None:
        return None
    if reference.attrs.get("kind") != "exact reference":
        _refuse("it is not an exact reference (attribute kind = 'exact reference' missing)")
    _check_sites(results, reference)
    _check_identity(results, reference)
    ref = _match_subsystems(results, _match_times(results, reference))
    return ref


def full_reference_curve(results: xr.Dataset, reference: xr.Dataset | None) -> xr.Dataset | None:
    """The reference on its own (possibly finer) time grid, for exact curves in S2(t) and C(t) figures."""
    if reference is None or "time" not in results.dims or "time" not in reference.dims:
        return None
    if "subsystem" in results.dims and "subsystem" in reference.dims:
        reference = reference.sel(subsystem=results.subsystem.values)
    return reference
