"""Measurement records (CSV) read in streamed, vectorised blocks.

Format (INTERFACE.md): a header, then one row per shot or per distinct
outcome with a ``count`` column.

    local ensemble:      setting,basis,outcome[,count]     e.g. 17,XZZYX,01101,3
    shallow and global:  setting,outcome[,count]

Columns may come in any order. The file is read in blocks of bytes; each
block is parsed with numpy (newline and comma positions, fixed-width
gathers for basis and outcome, digit arithmetic for integers), so rows never
become Python objects. Every problem raises :class:`InputError` naming the
file, the line and the field.
"""

from __future__ import annotations

from dataclasses import dataclass
import os

import numpy as np

from .errors import InputError

BLOCK_BYTES = 1 << 24
_BASIS_CODE = np.full(256, 255, dtype=np.uint8)
for _code, _letter in enumerate("XYZ"):
    _BASIS_CODE[ord(_letter)] = _code
_MAX_DIGITS = 18


@dataclass
class RecordBlock:
    """Parsed rows of one block: setting ids, bases (local), outcomes, counts, line numbers."""

    setting: np.ndarray
    basis: np.ndarray | None
    outcome: np.ndarray
    count: np.ndarray
    line: np.ndarray


def _columns(header: str, path: str, with_basis: bool | None):
    names = [c.strip().lower() for c in header.rstrip("\r\n").split(",")]
    allowed = {"setting", "basis", "outcome", "count"}
    for name in names:
        if name not in allowed:
            raise InputError(f"{path} line 1: unknown column {name!r}; allowed: setting, basis, outcome, count")
    if len(set(names)) != len(names):
        raise InputError(f"{path} line 1: a column name is repeated in the header")
    for need in ("setting", "outcome"):
        if need not in names:
            raise InputError(f"{path} line 1: the header has no {need!r} column "
                             f"(expected setting,basis,outcome[,count] or setting,outcome[,count])")
    if with_basis is True and "basis" not in names:
        raise InputError(f"{path} line 1: the header has no 'basis' column, which local-ensemble records need")
    if with_basis is False and "basis" in names:
        raise InputError(f"{path} line 1: a 'basis' column belongs to local-ensemble records only; "
                         "shallow and global settings come from the settings file")
    return names


def _field_text(buf, start, end) -> str:
    return bytes(buf[start:end]).decode("utf-8", errors="replace")


def _parse_integers(buf, starts, ends, name, lines, path):
    """Non-negative decimal integers in buf[start:end] for every row."""
    width = ends - starts
    bad = (width < 1) | (width > _MAX_DIGITS)
    maxw = int(min(max(width.max(initial=1), 1), _MAX_DIGITS))
    idx = starts[:, None] + np.arange(maxw)
    inside = np.arange(maxw) < width[:, None]
    digits = buf[np.minimum(idx, len(buf) - 1)].astype(np.int64) - 48
    bad |= np.any(inside & ((digits < 0) | (digits > 9)), axis=1)
    if bad.any():
        r = int(np.argmax(bad))
        raise InputError(f"{path} line {lines[r]}: {name} {_field_text(buf, starts[r], ends[r])!r} "
                         f"is not a non-negative integer")
    value = np.zeros(len(starts), dtype=np.int64)
    for j in range(maxw):
        value = np.where(inside[:, j], value * 10 + digits[:, j], value)
    return value


def _parse_fixed(buf, starts, ends, n, name, lines, path, lut, allowed):
    width = ends - starts
    if np.any(width != n):
        r = int(np.argmax(width != n))
        raise InputError(f"{path} line {lines[r]}: {name} {_field_text(buf, starts[r], ends[r])!r} has "
                         f"{width[r]} characters, expected {n} (one per qubit)")
    codes = lut[buf[starts[:, None] + np.arange(n)]]
    bad = np.any(codes == 255, axis=1)
    if bad.any():
        r = int(np.argmax(bad))
        raise InputError(f"{path} line {lines[r]}: {name} {_field_text(buf, starts[r], ends[r])!r} has a "
                         f"character other than {allowed}")
    return codes


_OUTCOME_CODE = np.full(256, 255, dtype=np.uint8)
_OUTCOME_CODE[ord("0")] = 0
_OUTCOME_CODE[ord("1")] = 1


def read_records(path, n_qubits: int | None = None, with_basis: bool | None = None,
                 block_bytes: int = BLOCK_BYTES):
    """Yield :class:`RecordBlock` objects for a records CSV file.

    ``n_qubits`` fixes the width of basis and outcome strings (else the first
    data row sets it). ``with_basis`` True/False requires/forbids a basis
    column. Raises InputError for the first bad row.
    """
    path = os.fspath(path)
    try:
        fh = open(path, "rb")
    except OSError as exc:
        raise InputError(f"{path}: cannot read the records ({exc.strerror})") from None
    with fh:
        header = fh.readline()
        if not header.strip():
            raise InputError(f"{path}: the file is empty; expected a header such as setting,basis,outcome,count")
        try:
            names = _columns(header.decode("utf-8"), path, with_basis)
        except UnicodeDecodeError:
            raise InputError(f"{path} line 1: the header is not UTF-8 text") from None
        n_fields = len(names)
        col = {name: i for i, name in enumerate(names)}
        line_offset = 1  # lines consumed so far
        carry = b""
        any_rows = False
        while True:
            chunk = fh.read(block_bytes)
            data = carry + chunk
            if not chunk:
                if not data:
                    break
                data = data + b"\n" if not data.endswith(b"\n") else data
                carry = b""
            else:
                cut = data.rfind(b"\n")
                if cut < 0:
                    carry = data
                    continue
                data, carry = data[:cut + 1], data[cut + 1:]
            buf = np.frombuffer(data, dtype=np.uint8)
            newlines = np.flatnonzero(buf == 10)
            starts = np.concatenate([[0], newlines[:-1] + 1])
            ends = newlines - (buf[np.maximum(newlines - 1, 0)] == 13)
            ends = np.maximum(ends, starts)
            lines = line_offset + 1 + np.arange(len(newlines))
            line_offset += len(newlines)
            keep = ends > starts  # blank lines are skipped
            starts, ends, lines = starts[keep], ends[keep], lines[keep]
            if len(starts) == 0:
                if not chunk:
                    break
                continue
            any_rows = True
            commas = np.flatnonzero(buf == 44)
            row_of = np.searchsorted(newlines, commas)  # row index (among all lines) of each comma
            per_line = np.bincount(row_of, minlength=len(newlines))[keep]
            if np.any(per_line != n_fields - 1):
                r = int(np.argmax(per_line != n_fields - 1))
                raise InputError(f"{path} line {lines[r]}: expected {n_fields} fields "
                                 f"({','.join(names)}), found {per_line[r] + 1}")
            commas = commas[keep[row_of]].reshape(-1, n_fields - 1) if n_fields > 1 else np.zeros((len(starts), 0), int)
            f_start = np.column_stack([starts, commas + 1])
            f_end = np.column_stack([commas, ends])
            outcome = _parse_fixed(buf, f_start[:, col["outcome"]], f_end[:, col["outcome"]],
                                   n_qubits if n_qubits else int(f_end[0, col["outcome"]] - f_start[0, col["outcome"]]),
                                   "outcome", lines, path, _OUTCOME_CODE, "0 and 1")
            n_qubits = outcome.shape[1]
            basis = None
            if "basis" in col:
                basis = _parse_fixed(buf, f_start[:, col["basis"]], f_end[:, col["basis"]], n_qubits, "basis",
                                     lines, path, _BASIS_CODE, "X, Y and Z")
            setting = _parse_integers(buf, f_start[:, col["setting"]], f_end[:, col["setting"]], "setting",
                                      lines, path)
            if "count" in col:
                count = _parse_integers(buf, f_start[:, col["count"]], f_end[:, col["count"]], "count",
                                        lines, path)
            else:
                count = np.ones(len(starts), dtype=np.int64)
            yield RecordBlock(setting, basis, outcome, count, lines)
            if not chunk:
                break
        if not any_rows:
            raise InputError(f"{path}: the file has a header but no records")
