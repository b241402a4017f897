"""Records CSV -> shadow: validation against the settings, then one Shadow."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from .ensembles import LocalEnsemble, Settings, basis_strings
from .errors import InputError
from .records import read_records
from .shadow import Shadow


def parse_labels(items) -> dict:
    """``KEY=VALUE`` strings -> dict; numeric values become floats."""
    out = {}
    for item in items or ():
        key, sep, value = item.partition("=")
        if not sep or not key.strip():
            raise InputError(f"--label {item!r}: expected KEY=VALUE, for example time=0.5")
        try:
            out[key.strip()] = float(value)
        except ValueError:
            out[key.strip()] = value.strip()
    return out


def _merge_known(known_ids, known_basis, known_line, uid, ubasis, uline, path):
    """Check bases of settings seen before; return the merged sorted tables."""
    pos = np.searchsorted(known_ids, uid)
    found = pos < len(known_ids)
    found[found] = known_ids[pos[found]] == uid[found]
    if found.any():
        differ = np.any(known_basis[pos[found]] != ubasis[found], axis=1)
        if differ.any():
            j = int(np.flatnonzero(found)[np.argmax(differ)])
            k = pos[j]
            raise InputError(f"{path} line {uline[j]}: setting {uid[j]} has basis {basis_strings(ubasis[[j]])[0]} "
                             f"here but {basis_strings(known_basis[[k]])[0]} on line {known_line[k]}")
    new = ~found
    ids = np.concatenate([known_ids, uid[new]])
    order = np.argsort(ids, kind="stable")
    return (ids[order], np.concatenate([known_basis, ubasis[new]])[order],
            np.concatenate([known_line, uline[new]])[order])


def ingest(path, settings: Shadow | None = None, n_qubits: int | None = None, qubit_site=None,
           model_spec: str = "", label: dict | None = None, settings_path: str = "settings file") -> Shadow:
    """Read a records CSV into a Shadow.

    Without ``settings`` the records must be local-ensemble rows with a
    basis column; the settings are then the distinct (setting, basis) pairs.
    With ``settings`` every setting id must exist there, and local bases
    must agree with it.
    """
    kind = settings.ensemble.kind if settings is not None else "local"
    if settings is not None:
        n_qubits = settings.n_qubits
        with_basis = True if kind == "local" else False
        sorted_ids = np.argsort(settings.settings.ids, kind="stable")
        ids_sorted = settings.settings.ids[sorted_ids]
    else:
        with_basis = True
    known_ids = np.zeros(0, dtype=np.int64)
    known_basis = None
    known_line = np.zeros(0, dtype=np.int64)
    setting_col, outcome_col, count_col = [], [], []
    for block in read_records(path, n_qubits=n_qubits, with_basis=with_basis):
        n_qubits = block.outcome.shape[1]
        if settings is not None:
            pos = np.searchsorted(ids_sorted, block.setting)
            ok = pos < len(ids_sorted)
            ok[ok] = ids_sorted[pos[ok]] == block.setting[ok]
            if not ok.all():
                r = int(np.argmin(ok))
                raise InputError(f"{path} line {block.line[r]}: setting {block.setting[r]} is not in {settings_path}")
            position = sorted_ids[pos]
            if kind == "local":
                differ = np.any(settings.settings.basis[position] != block.basis, axis=1)
                if differ.any():
                    r = int(np.argmax(differ))
                    raise InputError(
                        f"{path} line {block.line[r]}: setting {block.setting[r]} has basis "
                        f"{basis_strings(block.basis[[r]])[0]} but {settings_path} says "
                        f"{basis_strings(settings.settings.basis[[position[r]]])[0]}")
            setting_col.append(position)
        else:
            uid, first, inv = np.unique(block.setting, return_index=True, return_inverse=True)
            ref = block.basis[first]
            differ = np.any(block.basis != ref[inv], axis=1)
            if differ.any():
                r = int(np.argmax(differ))
                f = first[inv[r]]
                raise InputError(f"{path} line {block.line[r]}: setting {block.setting[r]} has basis "
                                 f"{basis_strings(block.basis[[r]])[0]} here but "
                                 f"{basis_strings(block.basis[[f]])[0]} on line {block.line[f]}")
            if known_basis is None:
                known_basis = np.zeros((0, n_qubits), dtype=np.uint8)
            known_ids, known_basis, known_line = _merge_known(known_ids, known_basis, known_line, uid, ref,
                                                              block.line[first], path)
            setting_col.append(block.setting)
        outcome_col.append(block.outcome)
        count_col.append(block.count)

    record_setting = np.concatenate(setting_col)
    outcomes = np.concatenate(outcome_col)
    del outcome_col
    counts = np.concatenate(count_col)
    if settings is None:
        record_setting = np.searchsorted(known_ids, record_setting)
        ens = LocalEnsemble(n_qubits)
        base = Shadow(ensemble=ens, settings=Settings(known_ids, basis=known_basis),
                      qubit_site=np.arange(n_qubits) if qubit_site is None else np.asarray(qubit_site))
    else:
        base = settings
        if qubit_site is not None:
            base = replace(base, qubit_site=np.asarray(qubit_site))
    if qubit_site is not None and len(qubit_site) != n_qubits:
        raise InputError(f"{path}: the records have {n_qubits} qubits but the model has {len(qubit_site)}")
    return base.with_records(record_setting, outcomes, counts, model_spec=model_spec or base.model_spec,
                             label={**base.label, **(label or {})}, source="ingested from " + str(path))
