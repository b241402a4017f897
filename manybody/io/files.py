"""Atomic writes: a temporary file beside the target, renamed over it only on success.

Temporary files are named ``.tmp-manybody-<pid>-<random>.<target name><suffix>``
so that a later write to the same target recognises the leftovers of a
process that died (power cut, SIGKILL) and removes them; a temporary of a
process that is still alive is never touched. The finished file gets the
permissions an ordinary ``open(path, "w")`` would give: those of the file
it replaces, else ``0o666`` less the umask. Failures of the file system
(disk full, read-only folder, a folder where a file was expected) become
:class:`InputError` with one sentence, and the temporary file is removed.
"""

from __future__ import annotations

import errno as _errno
import io
import os
import re
import shutil
import signal
import stat
import tempfile
import threading
from contextlib import contextmanager

from manybody.errors import InputError

TEMP_PREFIX = ".tmp-manybody-"
_NAME_CHARS = 120  # of the target's name kept in the temporary's name (file names stop at 255 bytes)


# ----------------------------------------------------------------- messages
def os_reason(exc: BaseException) -> str:
    """'no space left on device' from an OSError, also when HDF5 buried the errno in its message."""
    code = getattr(exc, "errno", None)
    if not code:
        found = re.search(r"errno = (\d+)", str(exc))
        code = int(found.group(1)) if found else None
    if code == _errno.EISDIR:
        return "it is a folder; give a file name"
    if code:
        return os.strerror(code)[:1].lower() + os.strerror(code)[1:]
    text = str(exc).strip().splitlines()
    return text[0] if text else type(exc).__name__


def write_error(path, exc: BaseException) -> InputError:
    """The one-sentence InputError for a failed write of ``path``."""
    return InputError(f"cannot write {os.fspath(path)}: {os_reason(exc)}")


# ----------------------------------------------------------------- output checks
def _same_file(a: str, b: str) -> bool:
    try:
        if os.path.samefile(a, b):  # links and hard links included
            return True
    except OSError:
        pass
    return os.path.realpath(a) == os.path.realpath(b)


def refuse_overwrite(output, inputs, option: str = "-o") -> None:
    """Raise InputError when ``output`` is a folder or resolves to any of ``inputs`` (None entries ignored).

    An atomic write renames its result over the output at the end, so an
    output equal to an input (the records CSV, a settings file, a shadow, a
    model spec, a calibration) would replace data that is still being read.
    """
    if output is None:
        return
    out = os.fspath(output)
    if os.path.isdir(out):
        raise InputError(f"{option} {out}: is a folder; give the name of a file to write")
    for item in inputs:
        if item is None:
            continue
        inp = os.fspath(item)
        if _same_file(out, inp):
            raise InputError(f"{option} {out}: is the input file {inp}; writing it would destroy the input, "
                             "choose another output name")


# ----------------------------------------------------------------- temporaries
def _umask() -> int:
    """The process umask without changing it (Linux /proc), else by the set-and-restore fallback."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def _pid_alive(pid: int) -> bool:
    if pid <= 0:
        return True  # not ours to judge
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:  # PermissionError: alive, another user's
        return True
    return True


def _temp_pattern(name: str, suffix: str) -> re.Pattern:
    return re.compile(re.escape(TEMP_PREFIX) + r"(\d+)-[a-z0-9_]{8}\." + re.escape(name[:_NAME_CHARS] + suffix)
                      + "$")


def sweep_stale(path, suffix: str = "") -> list[str]:
    """Remove temporaries of ``path`` left by processes that no longer run; returns what was removed."""
    folder, name = os.path.split(os.path.abspath(os.fspath(path)))
    pattern = _temp_pattern(name, suffix)
    removed = []
    try:
        entries = os.listdir(folder)
    except OSError:
        return removed
    for entry in entries:
        found = pattern.match(entry)
        if found and not _pid_alive(int(found.group(1))):
            try:
                os.remove(os.path.join(folder, entry))
                removed.append(entry)
            except OSError:
                pass  # another process swept it first, or the folder is read-only
    return removed


def temporary_beside(path, suffix: str = "") -> str:
    """A fresh temporary file in the target's folder (created, so that the name is ours).

    Stale temporaries of the same target from dead processes are swept
    first. Raises InputError when the target is a folder or the folder
    cannot be written.
    """
    path = os.path.abspath(os.fspath(path))
    if os.path.isdir(path):
        raise InputError(f"cannot write {path}: it is a folder; give a file name")
    folder, name = os.path.split(path)
    try:
        os.makedirs(folder, exist_ok=True)
        sweep_stale(path, suffix)
        fd, tmp = tempfile.mkstemp(prefix=f"{TEMP_PREFIX}{os.getpid()}-",
                                   suffix="." + name[:_NAME_CHARS] + suffix, dir=folder)
    except OSError as exc:
        raise write_error(path, exc) from None
    os.close(fd)
    return tmp


def discard(tmp) -> None:
    """Remove a temporary file if it is there; never raises."""
    try:
        os.remove(tmp)
    except OSError:
        pass


def settle(tmp: str, path, keep: bool) -> None:
    """Rename ``tmp`` over ``path`` when ``keep``, else remove it: nothing half-written stays.

    Before the rename the file gets the mode an ordinary write would give.
    A failed rename removes ``tmp`` and raises InputError.
    """
    if not keep:
        discard(tmp)
        return
    path = os.fspath(path)
    try:
        try:
            mode = stat.S_IMODE(os.stat(path).st_mode) if os.path.isfile(path) else 0o666 & ~_umask()
        except OSError:
            mode = 0o666 & ~_umask()
        os.chmod(tmp, mode)
        os.replace(tmp, path)
    except OSError as exc:
        discard(tmp)
        raise write_error(path, exc) from None


@contextmanager
def atomic_path(path, suffix: str = ""):
    """with atomic_path(p) as tmp: write tmp; it becomes p only if the block ends without an error.

    The block should only write: an OSError raised in it (disk full, ...)
    is reported as ``InputError("cannot write p: ...")``.
    """
    tmp = temporary_beside(path, suffix)
    try:
        yield tmp
    except OSError as exc:
        discard(tmp)
        raise write_error(path, exc) from None
    except BaseException:
        discard(tmp)
        raise
    settle(tmp, path, keep=True)


@contextmanager
def atomic_folder(path, keep=r"shadow_t.*\.nc"):
    """with atomic_folder(p) as tmp: write files into tmp; they replace the folder p only if the block succeeds.

    A series (one file per time) is then written as a unit: an interrupted run
    leaves the previous series as it was, never a mix of two runs. An existing
    ``p`` may hold only files whose names match ``keep`` (an earlier series);
    anything else is refused before work starts, so that nothing of the
    user's is deleted.
    """
    path = os.path.abspath(os.fspath(path))
    if os.path.exists(path):
        if not os.path.isdir(path):
            raise InputError(f"-o {path}: is a file; a series needs a folder")
        foreign = [name for name in os.listdir(path) if not re.fullmatch(keep, name)]
        if foreign:
            raise InputError(f"-o {path}: the folder holds other files ({foreign[0]}, ...); give a new or empty "
                             "folder for the series")
    parent = os.path.dirname(path)
    os.makedirs(parent, exist_ok=True)
    tmp = tempfile.mkdtemp(prefix=f".tmp-manybody-{os.getpid()}-", suffix="." + os.path.basename(path), dir=parent)
    try:
        yield tmp
    except BaseException as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        if isinstance(exc, OSError):
            raise write_error(path, exc) from None
        raise
    old = None
    if os.path.exists(path):
        old = tempfile.mkdtemp(prefix=f".tmp-manybody-{os.getpid()}-old-", dir=parent)
        os.replace(path, os.path.join(old, "series"))
    os.chmod(tmp, 0o777 & ~_umask())
    os.replace(tmp, path)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


# ----------------------------------------------------------------- HDF5 through a guarded file object
class GuardedFile(io.RawIOBase):
    """A binary file for HDF5 (h5py's file-object driver) that never lets a write error reach HDF5.

    After a write fails (disk full, quota, an interrupt), HDF5 keeps dirty
    chunks it cannot flush and retries on every close, and may crash. Here
    the first failure is kept in :attr:`failure`, later writes are dropped,
    HDF5 closes cleanly, and the caller raises the failure itself
    (:meth:`raise_failure`) and removes the temporary file.
    """

    def __init__(self, raw, path):
        super().__init__()
        self.raw = raw  # a real binary file object opened for reading and writing
        self.path = os.fspath(path)  # the target, for the message
        self.failure: BaseException | None = None

    def readable(self):
        return True

    def writable(self):
        return True

    def seekable(self):
        return True

    def seek(self, pos, whence=0):
        return self.raw.seek(pos, whence)

    def tell(self):
        return self.raw.tell()

    def readinto(self, buffer):
        return self.raw.readinto(buffer)

    def _guard(self, action, fallback):
        if self.failure is not None:
            return fallback
        try:
            return action()
        except BaseException as exc:  # noqa: BLE001 - kept and raised by the owner after HDF5 has closed
            self.failure = exc
            return fallback

    def write(self, data):
        return self._guard(lambda: self.raw.write(data), len(memoryview(data)))

    def truncate(self, size=None):
        return self._guard(lambda: self.raw.truncate(size), size)

    def flush(self):
        if not self.raw.closed:
            self._guard(self.raw.flush, None)

    def close(self):
        if not self.closed:
            self._guard(self.raw.close, None)
            if not self.raw.closed:
                self.raw.close()
        super().close()

    def raise_failure(self) -> None:
        """Raise the kept failure: an OSError as InputError('cannot write ...'), anything else as it was."""
        failure = self.failure
        if failure is None:
            return
        if isinstance(failure, OSError):
            raise write_error(self.path, failure) from None
        raise failure


# ----------------------------------------------------------------- signals
class Terminated(KeyboardInterrupt):
    """SIGTERM turned into an interrupt, so that ``except BaseException`` clean-ups run."""

    def __init__(self, signum: int = signal.SIGTERM):
        super().__init__(f"terminated by signal {signum}")
        self.signum = signum


def _on_sigterm(signum, frame):
    # a second SIGTERM while cleaning up ends the process the default way
    signal.signal(signum, signal.SIG_DFL)
    raise Terminated(signum)


def install_signal_cleanup() -> bool:
    """Handle SIGTERM like SIGINT: raise :class:`Terminated` (a KeyboardInterrupt) in the main thread.

    Temporaries are then removed by the writers' clean-up paths. Call once
    from the command-line main; exit status 128 + ``exc.signum`` (143) is
    customary. A SIGTERM the caller ignores (SIG_IGN) stays ignored.
    Returns whether the handler was installed (only the main thread can).
    """
    if threading.current_thread() is not threading.main_thread():
        return False
    if signal.getsignal(signal.SIGTERM) == signal.SIG_IGN:
        return False
    signal.signal(signal.SIGTERM, _on_sigterm)
    return True
