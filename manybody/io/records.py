"""Measurement records (CSV) read in streamed, vectorised blocks.

Format (docs/formats.md): a header, then one row per shot or per distinct
outcome with a ``count`` column. A UTF-8 byte-order mark before the header
(spreadsheet programs write one) is skipped.

    local ensemble:      setting,basis,outcome[,count]     e.g. 17,XZZYX,01101,3
    shallow and global:  setting,outcome[,count]

Columns may come in any order. The file is read in blocks of bytes; each
block is parsed with numpy (newline and comma positions, fixed-width
gathers for basis and outcome, digit arithmetic for integers), so rows never
become Python objects. Every problem raises :class:`InputError` naming the
file, the line and the field.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

import numpy as np

from manybody.errors import InputError

BLOCK_BYTES = 1 << 24
_MAX_DIGITS = 15  # exact in float64; also the largest count a shadow file holds (10^15 - 1)
_MAX_FIELD = 64  # digits of a zero-padded integer field
MAX_LINE_BYTES = 1 << 26  # a longer line is not a records file
_BOM = b"\xef\xbb\xbf"


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
        raise InputError(f"{path} line 1: the header has no 'basis' column, which local-ensemble records need "
                         "(shallow and global records need --settings)")
    if with_basis is False and "basis" in names:
        raise InputError(f"{path} line 1: a 'basis' column belongs to local-ensemble records only; "
                         "shallow and global settings come from the settings file")
    return names


def _field_text(buf, start, end) -> str:
    return bytes(buf[start:end]).decode("utf-8", errors="replace")


def _gather(buf, starts, width):
    """Rows buf[s:s + width] for every start s, padded past the end (one copy, no index array)."""
    padded = buf if len(buf) >= width else np.concatenate([buf, np.zeros(width, np.uint8)])
    windows = np.lib.stride_tricks.sliding_window_view(padded, width)
    return windows[np.minimum(starts, len(windows) - 1)]


def _parse_integers(buf, starts, ends, name, column, lines, path):
    """Non-negative decimal integers in buf[start:end] for every row.

    The digits are gathered right-aligned (a window ending at each field's
    end), masked left of the field, and weighted by powers of ten in one
    matrix product (exact: at most 15 significant digits in float64;
    zero padding in front is allowed).
    """
    width = ends - starts
    maxw = int(min(max(width.max(initial=1), 1), _MAX_FIELD))
    padded = np.concatenate([np.full(maxw, 48, np.uint8), buf])  # room left of the first row
    digits = _gather(padded, ends, maxw) - np.uint8(48)  # window ends at the field's end
    digits[np.arange(maxw) < (maxw - width)[:, None]] = 0  # left of the field
    bad = (width < 1) | (width > _MAX_FIELD)
    if digits.size and digits.max() > 9:
        bad |= np.any(digits > 9, axis=1)
    if bad.any():
        r = int(np.argmax(bad))
        text = _field_text(buf, starts[r], ends[r])
        if not text:
            raise InputError(f"{path} line {lines[r]}: field {column} ({name}) is empty; "
                             "expected a non-negative integer")
        if text.isascii() and text.isdigit():  # longer than any zero padding we read
            raise InputError(f"{path} line {lines[r]}: {name} {text[:20]}... has {len(text)} digits; "
                             f"allowed: 0 to {10**_MAX_DIGITS - 1}")
        raise InputError(f"{path} line {lines[r]}: {name} {text!r} is not a non-negative integer")
    if maxw > _MAX_DIGITS:
        big = np.any(digits[:, :maxw - _MAX_DIGITS] != 0, axis=1)
        if big.any():
            r = int(np.argmax(big))
            raise InputError(f"{path} line {lines[r]}: {name} {_field_text(buf, starts[r], ends[r])} has more "
                             f"than {_MAX_DIGITS} digits; allowed: 0 to {10**_MAX_DIGITS - 1}")
        digits = digits[:, maxw - _MAX_DIGITS:]
    powers = 10.0 ** np.arange(digits.shape[1] - 1, -1, -1)
    return np.rint(digits @ powers).astype(np.int64)


def _parse_fixed(buf, starts, ends, n, name, column, lines, path, alphabet: str, allowed: str):
    """Fixed-width strings over a run of consecutive characters: code = char - alphabet[0]."""
    width = ends - starts
    if np.any(width == 0):
        r = int(np.argmax(width == 0))
        raise InputError(f"{path} line {lines[r]}: field {column} ({name}) is empty; expected one of "
                         f"{allowed} per qubit")
    if np.any(width != n):
        r = int(np.argmax(width != n))
        raise InputError(f"{path} line {lines[r]}: {name} {_field_text(buf, starts[r], ends[r])!r} has "
                         f"{width[r]} characters, expected {n} (one per qubit)")
    codes = _gather(buf, starts, n) - np.uint8(ord(alphabet[0]))  # below alphabet[0] wraps to large values
    top = len(alphabet) - 1
    if codes.size and codes.max() > top:  # one global check; find the row only on failure
        r = int(np.argmax(np.any(codes > top, axis=1)))
        raise InputError(f"{path} line {lines[r]}: {name} {_field_text(buf, starts[r], ends[r])!r} has a "
                         f"character other than {allowed}")
    return codes


def _field_commas(buf, starts, ends, newlines, keep, n_fields, names, lines, path):
    """(rows, n_fields - 1) comma positions; a row with another count raises InputError."""
    commas = np.flatnonzero(buf == 44)
    rows = len(starts)
    if len(commas) == rows * (n_fields - 1):
        # fast path: as many commas as expected, each row's share inside its own line
        table = commas.reshape(rows, n_fields - 1)
        if n_fields == 1 or (np.all(table[:, 0] >= starts) & np.all(table[:, -1] < ends)):
            return table
    row_of = np.searchsorted(newlines, commas)  # line index (blank lines included) of each comma
    per_line = np.bincount(row_of, minlength=len(newlines))[keep]
    if np.all(per_line == n_fields - 1):  # cannot happen when the fast path is right; never misreport
        return commas.reshape(rows, n_fields - 1)
    r = int(np.argmax(per_line != n_fields - 1))
    raise InputError(f"{path} line {lines[r]}: expected {n_fields} fields "
                     f"({','.join(names)}), found {per_line[r] + 1}")


def _raw_blocks(fh, block_bytes: int):
    """Yield (bytes ending with a newline, number of the line before its first line)."""
    line_offset = 1  # the header
    carry = b""
    while True:
        chunk = fh.read(block_bytes)
        data = carry + chunk
        if not chunk:
            if data:
                yield (data if data.endswith(b"\n") else data + b"\n"), line_offset
            return
        cut = data.rfind(b"\n")
        if cut < 0:
            if len(data) > MAX_LINE_BYTES:
                raise InputError(f"{fh.name} line {line_offset + 1}: longer than {MAX_LINE_BYTES >> 20} MiB; "
                                 "not a records file")
            carry = data
            continue
        data, carry = data[:cut + 1], data[cut + 1:]
        yield data, line_offset
        line_offset += data.count(b"\n")


def _parse_block(data: bytes, line_offset: int, names, n_qubits, path) -> RecordBlock | None:
    """Parse one block of whole lines (None when it holds only blank lines)."""
    col = {name: i for i, name in enumerate(names)}
    buf = np.frombuffer(data, dtype=np.uint8)
    newlines = np.flatnonzero(buf == 10)
    starts = np.concatenate([[0], newlines[:-1] + 1])
    ends = newlines - (buf[np.maximum(newlines - 1, 0)] == 13)
    ends = np.maximum(ends, starts)
    lines = line_offset + 1 + np.arange(len(newlines))
    keep = ends > starts  # blank lines are skipped
    starts, ends, lines = starts[keep], ends[keep], lines[keep]
    if len(starts) == 0:
        return None
    commas = _field_commas(buf, starts, ends, newlines, keep, len(names), names, lines, path)
    f_start = np.column_stack([starts, commas + 1])
    f_end = np.column_stack([commas, ends])

    def field(name):
        return f_start[:, col[name]], f_end[:, col[name]]

    if n_qubits is None:
        s, e = field("outcome")
        n_qubits = int(e[0] - s[0])
    outcome = _parse_fixed(buf, *field("outcome"), n_qubits, "outcome", col["outcome"] + 1, lines, path, "01",
                           "0 and 1")
    basis = None
    if "basis" in col:
        basis = _parse_fixed(buf, *field("basis"), n_qubits, "basis", col["basis"] + 1, lines, path, "XYZ",
                             "X, Y and Z")
    setting = _parse_integers(buf, *field("setting"), "setting", col["setting"] + 1, lines, path)
    if "count" in col:
        count = _parse_integers(buf, *field("count"), "count", col["count"] + 1, lines, path)
    else:
        count = np.ones(len(starts), dtype=np.int64)
    return RecordBlock(setting, basis, outcome, count, lines)


def _header(fh, path, with_basis):
    """Column names from the first line (a UTF-8 byte-order mark skipped)."""
    header = fh.readline(1 << 16)
    if header.startswith((b"\xff\xfe", b"\xfe\xff")):
        raise InputError(f"{path}: the file is UTF-16 text; save it as UTF-8 (CSV UTF-8 in spreadsheet programs)")
    if header.startswith(_BOM):
        header = header[len(_BOM):]
    if not header:
        raise InputError(f"{path}: the file is empty; expected a header such as setting,basis,outcome,count")
    if not header.strip():
        raise InputError(f"{path} line 1: the line is blank; expected a header such as setting,basis,outcome,count")
    if not header.endswith(b"\n") and len(header) == 1 << 16:
        raise InputError(f"{path} line 1: the header is longer than 64 KiB; not a records file")
    try:
        return _columns(header.decode("utf-8"), path, with_basis)
    except UnicodeDecodeError:
        raise InputError(f"{path} line 1: the header is not UTF-8 text") from None


def read_records(path, n_qubits: int | None = None, with_basis: bool | None = None,
                 block_bytes: int | None = None, workers: int = 2):
    """Yield :class:`RecordBlock` objects for a records CSV file, in file order.

    ``n_qubits`` fixes the width of basis and outcome strings (else the first
    data row sets it). ``with_basis`` True/False requires/forbids a basis
    column. Blocks after the first are parsed by ``workers`` threads (numpy
    releases the GIL in its loops), at most ``workers + 1`` in flight.
    Raises InputError for the first bad row.
    """
    from concurrent.futures import ThreadPoolExecutor

    path = os.fspath(path)
    block_bytes = BLOCK_BYTES if block_bytes is None else block_bytes
    try:
        fh = open(path, "rb")
    except OSError as exc:
        raise InputError(f"{path}: cannot read the records ({exc.strerror})") from None
    with fh, ThreadPoolExecutor(max_workers=max(1, workers)) as pool:
        names = _header(fh, path, with_basis)
        any_rows = False
        pending = []
        for data, offset in _raw_blocks(fh, block_bytes):
            if n_qubits is None:  # the first rows fix the width for every later block
                block = _parse_block(data, offset, names, None, path)
                if block is not None:
                    n_qubits = block.outcome.shape[1]
                    any_rows = True
                    yield block
                continue
            pending.append(pool.submit(_parse_block, data, offset, names, n_qubits, path))
            while len(pending) > workers:
                block = pending.pop(0).result()
                if block is not None:
                    any_rows = True
                    yield block
        for future in pending:
            block = future.result()
            if block is not None:
                any_rows = True
                yield block
        if not any_rows:
            raise InputError(f"{path}: the file has a header but no records")
