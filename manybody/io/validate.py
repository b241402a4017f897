"""Checks of shadow and settings files as they are opened (docs/formats.md).

Attributes and settings are small and checked in full when the file is
opened; the records are checked chunk by chunk as they are read (the ids
against the settings, the counts against the limit), on the arrays that
estimation reads anyway, so the checks add almost nothing to a read. Every
failure is an :class:`InputError` of one sentence naming the variable or
attribute and what is allowed.
"""

from __future__ import annotations

import json
import math

import numpy as np

from manybody.errors import InputError
from manybody.measure.ensembles import N_TWO_QUBIT_CLIFFORDS

#: the largest count of one record: 15 decimal digits, as in a records CSV (exact in float64)
MAX_COUNT = 10**15 - 1
#: nesting allowed in the JSON attributes label and metadata
MAX_JSON_DEPTH = 16
MAX_QUBITS = 1_000_000


def _describe(value) -> str:
    if isinstance(value, (list, tuple, np.ndarray)):
        return f"an array of {len(value) if isinstance(value, (list, tuple)) else value.size} values"
    text = repr(value.item() if isinstance(value, np.generic) else value)
    return text if len(text) <= 40 else text[:37] + "..."


def text_attr(attrs, name: str, where: str, default: str | None = None) -> str:
    """A text attribute (absent: ``default``, or InputError when there is none)."""
    if name not in attrs:
        if default is None:
            raise InputError(f"{where}: attribute {name} is missing")
        return default
    value = attrs[name]
    if isinstance(value, bytes):
        try:
            value = value.decode("utf-8")
        except UnicodeDecodeError:
            raise InputError(f"{where}: attribute {name} is not UTF-8 text") from None
    if not isinstance(value, str):
        raise InputError(f"{where}: attribute {name} must be text, found {_describe(value)}")
    return str(value)


def int_attr(attrs, name: str, where: str, low: int, high: int) -> int:
    """An integer attribute between ``low`` and ``high``."""
    if name not in attrs:
        raise InputError(f"{where}: attribute {name} is missing")
    value = attrs[name]
    if isinstance(value, np.ndarray) and value.size == 1:
        value = value.reshape(())[()]
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, np.integer)) \
            or not low <= int(value) <= high:
        raise InputError(f"{where}: attribute {name} is {_describe(value)}; "
                         f"allowed: an integer from {low} to {high}")
    return int(value)


def _refuse_constant(text):
    raise ValueError(f"{text} is not a number JSON allows")


def _depth_and_finite(value) -> tuple[int, bool]:
    """Nesting depth of a decoded JSON value and whether all its numbers are finite (no recursion)."""
    depth, finite, stack = 0, True, [(value, 1)]
    while stack:
        item, level = stack.pop()
        depth = max(depth, level)
        if isinstance(item, dict):
            stack.extend((v, level + 1) for v in item.values())
        elif isinstance(item, list):
            stack.extend((v, level + 1) for v in item)
        elif isinstance(item, float) and not math.isfinite(item):
            finite = False
    return depth, finite


def json_attr(attrs, name: str, where: str, finite: bool) -> dict:
    """A JSON-object attribute (``{}`` when absent), nested at most MAX_JSON_DEPTH deep."""
    text = text_attr(attrs, name, where, default="{}")
    allowed = f"a JSON object nested at most {MAX_JSON_DEPTH} deep"
    try:
        value = json.loads(text, parse_constant=_refuse_constant) if finite else json.loads(text)
    except RecursionError:
        raise InputError(f"{where}: attribute {name} is nested too deeply; allowed: {allowed}") from None
    except ValueError as exc:
        raise InputError(f"{where}: attribute {name} is not valid JSON ({str(exc).splitlines()[0]}); "
                         f"allowed: {allowed}") from None
    if not isinstance(value, dict):
        raise InputError(f"{where}: attribute {name} is a JSON {type(value).__name__}; allowed: {allowed}")
    depth, all_finite = _depth_and_finite(value)
    if depth > MAX_JSON_DEPTH:
        raise InputError(f"{where}: attribute {name} is nested {depth} deep; allowed: {allowed}")
    if finite and not all_finite:
        raise InputError(f"{where}: attribute {name} holds an infinite number; allowed: finite numbers only")
    return value


def check_label(label: dict, where: str) -> dict:
    """A label's ``time``, when present, is a finite real number (series are ordered by it)."""
    time = label.get("time")
    if "time" in label and (isinstance(time, bool) or not isinstance(time, (int, float))
                            or not math.isfinite(time)):
        raise InputError(f"{where}: label time is {_describe(time)}; allowed: a finite number")
    return label


def seed_attr(attrs, where: str) -> int | None:
    text = text_attr(attrs, "seed", where, default="").strip()
    if not text:
        return None
    if not text.isdigit() or len(text) > 40:
        raise InputError(f"{where}: attribute seed is {_describe(text)}; allowed: empty or a non-negative integer")
    return int(text)


# ----------------------------------------------------------------- variables
def variable(ds, name: str, where: str, dims: tuple, shape: tuple | None = None, kinds: str = "iu",
             load: bool = True):
    """The values of a settings variable (None unless ``load``), with its dimensions, shape and number kind checked."""
    if name not in ds.variables:
        raise InputError(f"{where}: variable {name} is missing")
    var = ds.variables[name]
    if tuple(var.dims) != dims:
        raise InputError(f"{where}: variable {name} has dimensions ({', '.join(var.dims)}); "
                         f"expected ({', '.join(dims)})")
    if var.dtype.kind not in kinds:
        raise InputError(f"{where}: variable {name} holds {var.dtype} values; expected integers")
    if shape is not None and tuple(var.shape) != tuple(shape):
        raise InputError(f"{where}: variable {name} has shape {tuple(var.shape)}; expected {tuple(shape)}")
    return np.asarray(var.values) if load else None


def in_range(values, name: str, where: str, low: int, high: int, allowed: str | None = None):
    """Every entry between ``low`` and ``high``; the first other one is named."""
    values = np.asarray(values)
    if values.size and (values.min() < low or values.max() > high):
        bad = np.argwhere((values < low) | (values > high))[0]
        at = ", ".join(str(int(i)) for i in bad)
        raise InputError(f"{where}: variable {name} has {values[tuple(bad)]} at [{at}]; "
                         f"allowed: {allowed or f'{low} to {high}'}")
    return values


def setting_ids(ds, where: str) -> np.ndarray:
    ids = in_range(variable(ds, "setting_id", where, ("setting",)), "setting_id", where, 0, 2**62,
                   "non-negative integers")
    ordered = np.sort(ids)
    twice = ordered[1:] == ordered[:-1]
    if twice.any():
        raise InputError(f"{where}: variable setting_id lists setting {ordered[1:][twice][0]} more than once; "
                         "each setting id must be unique")
    return ids.astype(np.int64)


def settings_arrays(ds, where: str, kind: str, n: int, k: int, n_gates: int = 0) -> dict:
    """The settings variables of an ensemble ``kind``: shapes and values checked."""
    out = {}
    if kind in ("local", "shallow"):
        out["basis"] = in_range(variable(ds, "basis", where, ("setting", "qubit"), (k, n)), "basis", where, 0, 2,
                                "0 (X), 1 (Y), 2 (Z)").astype(np.uint8)
    if kind == "shallow":
        out["gates"] = in_range(variable(ds, "gate", where, ("setting", "slot"), (k, n_gates)), "gate", where, 0,
                                N_TWO_QUBIT_CLIFFORDS - 1).astype(np.uint16)
    if kind == "global":
        for name in ("tableau_x", "tableau_z"):
            out[name] = in_range(variable(ds, name, where, ("setting", "generator", "qubit"), (k, 2 * n, n)),
                                 name, where, 0, 1, "bits 0 and 1").astype(np.uint8)
        sign = variable(ds, "tableau_sign", where, ("setting", "generator"), (k, 2 * n))
        if sign.size and not np.all((sign == 1) | (sign == -1)):
            bad = np.argwhere((sign != 1) & (sign != -1))[0]
            raise InputError(f"{where}: variable tableau_sign has {sign[tuple(bad)]} at [{bad[0]}, {bad[1]}]; "
                             "allowed: -1 and +1")
        out["tableau_sign"] = sign.astype(np.int8)
    return out


def coupling(ds, where: str, n: int) -> np.ndarray:
    edges = variable(ds, "coupling", where, ("edge", "pair"))
    if edges.ndim != 2 or (edges.size and edges.shape[1] != 2):
        raise InputError(f"{where}: variable coupling has shape {edges.shape}; expected (edges, 2)")
    in_range(edges, "coupling", where, 0, n - 1, f"qubits 0 to {n - 1}")
    if edges.size and np.any(edges[:, 0] == edges[:, 1]):
        raise InputError(f"{where}: variable coupling joins qubit {edges[edges[:, 0] == edges[:, 1]][0, 0]} "
                         "to itself; allowed: edges between two different qubits")
    return edges.astype(np.int64).reshape(-1, 2)


def qubit_site(ds, where: str, n: int) -> np.ndarray:
    if "qubit_site" in ds.variables and ds.variables["qubit_site"].shape != (n,):
        raise InputError(f"{where}: variable qubit_site has {ds.variables['qubit_site'].size} entries but "
                         f"attribute n_qubits is {n}; expected one lattice site per qubit")
    return in_range(variable(ds, "qubit_site", where, ("qubit",), (n,)), "qubit_site", where, 0, 2**31,
                    "non-negative site numbers").astype(np.int64)


def record_layout(ds, where: str, n: int) -> None:
    """record_setting, outcome and count: dimensions and number types (values are checked per chunk)."""
    variable(ds, "record_setting", where, ("record",), load=False)
    variable(ds, "count", where, ("record",), load=False)
    variable(ds, "outcome", where, ("record", "outcome_byte"), kinds="u", load=False)
    width = ds.variables["outcome"].shape[1]
    if width != -(-n // 8) or ds.variables["outcome"].dtype != np.uint8:
        raise InputError(f"{where}: variable outcome has {width} {ds.variables['outcome'].dtype} values per record; "
                         f"expected {-(-n // 8)} bytes (uint8) for {n} qubits")


# ----------------------------------------------------------------- records, chunk by chunk
class RecordCheck:
    """Positions of record setting ids in the settings, with ids and counts checked, one chunk at a time."""

    def __init__(self, ids, where: str):
        ids = np.asarray(ids)
        self.where = where or "the shadow"
        self.n = len(ids)
        self.identity = bool(np.array_equal(ids, np.arange(self.n)))
        self.order = np.argsort(ids, kind="stable")
        self.sorted = ids[self.order]

    def positions(self, setting_ids, start: int) -> np.ndarray:
        ids = np.asarray(setting_ids)
        if ids.dtype.kind not in "iu":
            raise InputError(f"{self.where}: variable record_setting holds {ids.dtype} values; expected integers")
        if not len(ids):
            return np.zeros(0, dtype=np.int64)
        raw = ids
        if ids.dtype == np.uint64:  # compare as int64: mixed uint64/int64 would go through float64
            ids = np.minimum(ids, np.uint64(2**62 + 1)).astype(np.int64)
        if self.identity:
            if ids.min() >= 0 and ids.max() < self.n:
                return ids.astype(np.int64, copy=False)
            bad = (ids < 0) | (ids >= self.n)
        else:
            at = np.minimum(np.searchsorted(self.sorted, ids), max(self.n - 1, 0))
            bad = self.sorted[at] != ids if self.n else np.ones(len(ids), bool)
            if not bad.any():
                return self.order[at]
        r = int(np.argmax(bad))
        raise InputError(f"{self.where}: variable record_setting names setting {raw[r]} at record {start + r}, "
                         "which is not in variable setting_id")

    def counts(self, counts, start: int) -> np.ndarray:
        counts = np.asarray(counts)
        if counts.dtype.kind not in "iu":
            raise InputError(f"{self.where}: variable count holds {counts.dtype} values; expected integers")
        if len(counts) and ((counts.dtype.kind == "i" and counts.min() < 0) or counts.max() > MAX_COUNT):
            r = int(np.argmax((counts < 0) | (counts > MAX_COUNT)))
            raise InputError(f"{self.where}: variable count has {counts[r]} at record {start + r}; "
                             f"allowed: 0 to {MAX_COUNT}")
        return counts.astype(np.int64, copy=False)
