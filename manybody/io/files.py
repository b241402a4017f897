"""Atomic writes: a temporary file beside the target, renamed over it only on success."""

from __future__ import annotations

import os
import tempfile
from contextlib import contextmanager


def temporary_beside(path, suffix: str = "") -> str:
    """A fresh temporary file in the target's folder (created, so that the name is ours)."""
    folder = os.path.dirname(os.path.abspath(os.fspath(path)))
    os.makedirs(folder, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=suffix, dir=folder)
    os.close(fd)
    return tmp


def settle(tmp: str, path, keep: bool) -> None:
    """Rename ``tmp`` over ``path`` when ``keep``, else remove it: nothing half-written stays."""
    if keep:
        os.replace(tmp, os.fspath(path))
    elif os.path.exists(tmp):
        os.remove(tmp)


@contextmanager
def atomic_path(path, suffix: str = ""):
    """with atomic_path(p) as tmp: write tmp; it becomes p only if the block ends without an error."""
    tmp = temporary_beside(path, suffix)
    try:
        yield tmp
    except BaseException:
        settle(tmp, path, keep=False)
        raise
    settle(tmp, path, keep=True)
