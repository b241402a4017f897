"""Per-block partial sums: what every accumulator keeps (docs/design.md sections 4 and 5).

Snapshots are grouped into B blocks of whole settings. An accumulator adds,
for each chunk of snapshots, the sums of its per-snapshot values over every
block; estimates are functions of the totals, and the delete-one-block
jackknife evaluates them on (total - block). Products of means are made
unbiased by leaving out pairs of snapshots from the same setting, which
needs per-setting sums kept until the last chunk has been read.
"""

from __future__ import annotations

import numpy as np


class BlockSums:
    """Named arrays whose first axis is the block; one instance per accumulator, names private to it."""

    def __init__(self, n_blocks: int):
        self.n_blocks = n_blocks
        self.data: dict[str, np.ndarray] = {}

    def __contains__(self, name) -> bool:
        return name in self.data

    def add(self, name, onehot, values):
        """Add per-snapshot ``values`` (N, ...) to their blocks (``onehot`` (N, B))."""
        values = np.asarray(values, dtype=float)
        flat = values.reshape(len(values), -1)
        part = (onehot.T @ flat).reshape((self.n_blocks,) + values.shape[1:])
        self.add_blocks(name, part)

    def add_blocks(self, name, part):
        """Add an array that already has one entry per block (B, ...)."""
        if name in self.data:
            self.data[name] += part
        else:
            self.data[name] = np.array(part, dtype=float)

    def add_gram(self, name, runs, values):
        """Per block, values[run]^T values[run] over the rows of that block (runs: (block, rows) pairs)."""
        self.add_grams(name, block_grams(runs, values), values.shape[1])

    def add_grams(self, name, grams, dim: int):
        """Add (block, dim x dim matrix) pairs, e.g. from :func:`block_grams`, to their blocks."""
        if name not in self.data:
            self.data[name] = np.zeros((self.n_blocks, dim, dim))
        acc = self.data[name]
        for b, gram in grams:
            acc[b] += gram


def block_grams(runs, values) -> list:
    """(block, values[rows]^T values[rows]) for each run of rows of one block (runs: (block, rows) pairs).

    float32 values: the products are exact for integer-valued entries below 2^24.
    """
    return [(b, values[rows].T @ values[rows]) for b, rows in runs]


class PerSetting:
    """Sums over the shots of each setting, for the within-setting corrections of products of means."""

    def __init__(self, n_settings: int):
        self.n_settings = n_settings
        self.data: dict[str, np.ndarray] = {}

    def __contains__(self, name) -> bool:
        return name in self.data

    def __getitem__(self, name) -> np.ndarray:
        return self.data[name]

    def add(self, name, positions, values):
        values = np.asarray(values, dtype=float)
        if name not in self.data:
            self.data[name] = np.zeros((self.n_settings,) + values.shape[1:])
        np.add.at(self.data[name], positions, values)


def block_runs(blocks):
    """(block, rows) pairs: contiguous slices when records come in setting order, index arrays otherwise."""
    cuts = np.flatnonzero(np.diff(blocks)) + 1
    starts = np.concatenate([[0], cuts])
    stops = np.concatenate([cuts, [len(blocks)]])
    if len(starts) <= 2 * len(np.unique(blocks)):
        return [(int(blocks[a]), slice(a, b)) for a, b in zip(starts, stops)]
    return [(int(b), np.flatnonzero(blocks == b)) for b in np.unique(blocks)]


def within_sums(per_setting: np.ndarray, setting_block: np.ndarray, n_blocks: int, outer: bool = False):
    """Sum over the settings of each block of S_s S_s (elementwise) or S_s S_s^T (``outer``)."""
    out = np.zeros((n_blocks,) + ((per_setting.shape[1],) * 2 if outer else per_setting.shape[1:]))
    for b in range(n_blocks):
        sel = per_setting[setting_block == b]
        out[b] = sel.T @ sel if outer else np.sum(sel * sel, axis=0)
    return out
