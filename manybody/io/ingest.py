"""Records CSV -> shadow: validation against the settings, then one Shadow."""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from manybody.errors import InputError
from manybody.io.files import refuse_overwrite
from manybody.io.records import read_records
from manybody.io.shadow import Shadow, ShadowWriter
from manybody.measure.ensembles import LocalEnsemble, Settings, basis_strings


def parse_labels(items) -> dict:
    """``KEY=VALUE`` strings -> dict; finite numeric values become floats; ``time`` must be one."""
    out = {}
    for item in items or ():
        key, sep, value = item.partition("=")
        if not sep or not key.strip():
            raise InputError(f"--label {item!r}: expected KEY=VALUE, for example time=0.5")
        try:
            number = float(value)
        except ValueError:
            number = None
        if number is not None and math.isfinite(number):
            out[key.strip()] = number
        elif key.strip() == "time":
            raise InputError(f"--label {item!r}: time must be a finite number, for example time=0.5")
        else:
            out[key.strip()] = value.strip()
    return out


def _total(counts) -> int:
    """Sum of counts as an exact Python integer (an int64 sum could wrap for counts near 10^15)."""
    if len(counts) == 0 or int(counts.max()) * len(counts) < 2**63:
        return int(counts.sum())
    return int(counts.astype(object).sum())


class _SettingBases:
    """The basis of every local setting seen so far, checked row by row.

    Setting ids below ``DENSE_IDS`` index dense arrays directly (no sorting);
    larger ids are kept in sorted arrays and found by binary search.
    """

    DENSE_IDS = 1 << 22

    def __init__(self, n_qubits: int, path):
        self.path = path
        self.ids = np.zeros(0, dtype=np.int64)  # sorted ids (sparse mode)
        self.basis = np.zeros((0, n_qubits), dtype=np.uint8)
        self.line = np.zeros(0, dtype=np.int64)  # 0 = not seen (dense mode)
        self.dense = True

    def _slots(self, ids):
        """Positions of ``ids`` in the tables; new ids get slots (line 0)."""
        if self.dense and ids.max(initial=0) < self.DENSE_IDS:
            top = int(ids.max(initial=-1)) + 1
            if top > len(self.line):
                grow = max(top, 2 * len(self.line))
                self.basis = np.concatenate([self.basis, np.zeros((grow - len(self.line), self.basis.shape[1]),
                                                                  np.uint8)])
                self.line = np.concatenate([self.line, np.zeros(grow - len(self.line), np.int64)])
            return ids
        if self.dense:  # switch to sparse mode, keeping what was seen
            self.dense = False
            self.ids = np.flatnonzero(self.line)
            self.basis, self.line = self.basis[self.ids], self.line[self.ids]
        new = np.setdiff1d(ids, self.ids)
        if len(new):
            merged = np.concatenate([self.ids, new])
            order = np.argsort(merged, kind="stable")
            self.ids = merged[order]
            self.basis = np.concatenate([self.basis, np.zeros((len(new), self.basis.shape[1]), np.uint8)])[order]
            self.line = np.concatenate([self.line, np.zeros(len(new), np.int64)])[order]
        return np.searchsorted(self.ids, ids)

    def check(self, block) -> None:
        slot = self._slots(block.setting)
        fresh = self.line[slot] == 0
        if fresh.any():
            rows = np.flatnonzero(fresh)
            _, first = np.unique(slot[rows], return_index=True)
            rows = rows[first]
            self.basis[slot[rows]] = block.basis[rows]
            self.line[slot[rows]] = block.line[rows]
        differ = np.any(block.basis != self.basis[slot], axis=1)
        if differ.any():
            r = int(np.argmax(differ))
            s = slot[r]
            raise InputError(f"{self.path} line {block.line[r]}: setting {block.setting[r]} has basis "
                             f"{basis_strings(block.basis[[r]])[0]} here but "
                             f"{basis_strings(self.basis[[s]])[0]} on line {self.line[s]}")

    def settings(self) -> Settings:
        if self.dense:
            ids = np.flatnonzero(self.line)
            return Settings(ids.astype(np.int64), basis=self.basis[ids])
        return Settings(self.ids, basis=self.basis)


def ingest(path, output, settings: Shadow | None = None, n_qubits: int | None = None, qubit_site=None,
           model_spec: str = "", label: dict | None = None, settings_path: str = "the settings file",
           progress=None):
    """Stream a records CSV into the shadow file ``output`` (atomically).

    Without ``settings`` the records must be local-ensemble rows with a
    basis column; the settings are then the distinct (setting, basis) pairs.
    With ``settings`` every setting id must exist there, and local bases
    must agree with it. Returns (shadow header without records, number of
    records, number of snapshots).
    """
    refuse_overwrite(output, [path, getattr(settings, "origin", None) or None])
    kind = settings.ensemble.kind if settings is not None else "local"
    if settings is not None:
        n_qubits = settings.n_qubits
        sorted_ids = np.argsort(settings.settings.ids, kind="stable")
        ids_sorted = settings.settings.ids[sorted_ids]
    if qubit_site is not None and n_qubits is not None and len(qubit_site) != n_qubits:
        raise InputError(f"the model has {len(qubit_site)} qubits but {settings_path} has {n_qubits}")
    known = None
    n_records = n_snapshots = 0
    with ShadowWriter(output) as out:
        blocks = read_records(path, n_qubits=n_qubits, with_basis=(kind == "local"))
        for block in (progress(blocks) if progress else blocks):
            n_qubits = block.outcome.shape[1]
            if settings is not None:
                _check_against_settings(block, settings, sorted_ids, ids_sorted, path, settings_path)
            else:
                if known is None:
                    known = _SettingBases(n_qubits, path)
                known.check(block)
            out.append(block.setting, block.outcome, block.count)
            n_records += len(block.count)
            n_snapshots += _total(block.count)
        if qubit_site is not None and len(qubit_site) != n_qubits:
            raise InputError(f"{path}: the records have {n_qubits} qubits but the model has {len(qubit_site)}")
        if settings is None:
            header = Shadow(ensemble=LocalEnsemble(n_qubits), settings=known.settings(),
                            qubit_site=np.arange(n_qubits) if qubit_site is None else np.asarray(qubit_site))
        else:
            header = settings if qubit_site is None else replace(settings, qubit_site=np.asarray(qubit_site))
        header = replace(header, model_spec=model_spec or header.model_spec,
                         label={**header.label, **(label or {})}, source=f"ingested from {path}")
        out.finish(header, with_records=True)
    return header, n_records, n_snapshots


def _check_against_settings(block, settings, sorted_ids, ids_sorted, path, settings_path):
    pos = np.searchsorted(ids_sorted, block.setting)
    ok = pos < len(ids_sorted)
    ok[ok] = ids_sorted[pos[ok]] == block.setting[ok]
    if not ok.all():
        r = int(np.argmin(ok))
        raise InputError(f"{path} line {block.line[r]}: setting {block.setting[r]} is not in {settings_path}")
    if settings.ensemble.kind == "local":
        position = sorted_ids[pos]
        differ = np.any(settings.settings.basis[position] != block.basis, axis=1)
        if differ.any():
            r = int(np.argmax(differ))
            raise InputError(
                f"{path} line {block.line[r]}: setting {block.setting[r]} has basis "
                f"{basis_strings(block.basis[[r]])[0]} but {settings_path} says "
                f"{basis_strings(settings.settings.basis[[position[r]]])[0]}")
