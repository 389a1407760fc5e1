"""Output files that appear whole or not at all.

Every file kinemap writes (maps, model files, pictures) is first written under a temporary
name in the destination folder and renamed over the final name only when it is complete, so
after an error, Ctrl-C, SIGTERM or SIGKILL at any moment the previous file (if any) is intact.

* Temporary names are ``.<name>.kinemap-<pid>-<random>.tmp``. Errors and signals that Python
  sees remove them; after a SIGKILL (which no process can catch) the next write into the same
  folder removes the leftovers of processes that no longer run.
* Ctrl-C (SIGINT) and SIGTERM that arrive while a file is being written are held until the
  write finishes (library code writing HDF5 cannot be interrupted safely); then the temporary
  file is removed, the old output is left as it was, and the signal takes effect
  (``KeyboardInterrupt``, or termination for SIGTERM).
* Files are created with the permissions the umask allows (like any other program's files).
* An existing output is replaced only with ``overwrite=True``; outputs that are symbolic
  links, devices or folders are refused, and so is an output that is one of the inputs.
"""

from __future__ import annotations

import contextlib
import os
import re
import secrets
import signal
import threading
from collections.abc import Callable
from pathlib import Path
from types import FrameType
from typing import Any

from ..errors import InvalidInputError
from .validate import file_name

_TMP_RE = re.compile(r"^\.(?P<name>.+)\.kinemap-(?P<pid>\d+)-[0-9a-f]+\.tmp$")


def _pid_alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def remove_leftovers(folder: Path, name: str | None = None) -> list[Path]:
    """Remove temporary files of earlier runs in `folder` whose process no longer runs
    (optionally only those for the output `name`). Returns what was removed."""
    removed: list[Path] = []
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for e in entries:
        m = _TMP_RE.match(e.name)
        if not m or (name is not None and m.group("name") != name):
            continue
        if _pid_alive(int(m.group("pid"))):
            continue
        try:
            os.unlink(e.path)
            removed.append(Path(e.path))
        except OSError:
            pass
    return removed


def check_output(path, *, overwrite: bool = False, inputs=(), what: str = "output") -> Path:
    """Validate an output path before any work is done and return it as a Path.

    Raises
    ------
    InvalidInputError
        A name that is not valid UTF-8, an output that is one of `inputs`.
    FileExistsError
        An existing file without ``overwrite=True``.
    OSError
        A missing or unwritable folder, or an output that is a link, device or folder.
    """
    p = Path(file_name(path, what))
    folder = p.parent if str(p.parent) else Path(".")
    if not folder.is_dir():
        raise FileNotFoundError(f"cannot write {what} {str(p)!r}: folder {str(folder)!r} does not exist")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise PermissionError(f"cannot write {what} {str(p)!r}: folder {str(folder)!r} is not writable")
    for inp in inputs:
        if inp is None:
            continue
        try:
            same = p.exists() and os.path.samefile(p, inp)
        except OSError:
            same = False
        if same or p.resolve() == Path(inp).resolve():
            raise InvalidInputError(f"the {what} {str(p)!r} is also an input; choose another output name")
    if p.is_symlink():
        raise OSError(f"{what} {str(p)!r} is a symbolic link; kinemap does not replace links "
                      "(give the target's own path, or remove the link)")
    if p.exists():
        if p.is_dir():
            raise IsADirectoryError(f"{what} {str(p)!r} is a folder")
        if not p.is_file():
            raise OSError(f"{what} {str(p)!r} exists and is not a regular file (a device, pipe or socket); "
                          "kinemap writes only regular files")
        if not overwrite:
            raise FileExistsError(f"{what} {str(p)!r} already exists; kinemap keeps it unless told to replace it "
                                  "(overwrite=True, command line --overwrite)")
    return p


class HeldSignals:
    """Hold SIGINT/SIGTERM while a file is written (main thread only)."""

    def __init__(self):
        self.received: list[int] = []
        self.previous: dict[int, Callable[[int, FrameType | None], Any] | int | None] = {}

    def __enter__(self):
        if threading.current_thread() is threading.main_thread():
            for sig in (signal.SIGINT, signal.SIGTERM):
                try:
                    self.previous[sig] = signal.signal(sig, self._hold)
                except (ValueError, OSError):  # pragma: no cover - embedded interpreters
                    pass
        return self

    def _hold(self, signum, frame):
        self.received.append(signum)

    def __exit__(self, *exc):
        for sig, handler in self.previous.items():
            signal.signal(sig, handler)
        return False

    def deliver(self) -> None:
        """Make a held signal take effect now (after the temporary file is gone)."""
        if not self.received:
            return
        sig = self.received[0]
        if sig == signal.SIGINT:
            raise KeyboardInterrupt
        handler = self.previous.get(sig, signal.SIG_DFL)
        if callable(handler):
            handler(sig, None)
        elif handler == signal.SIG_DFL:
            os.kill(os.getpid(), sig)


class AtomicFile:
    """A file written under a temporary name and renamed into place by :meth:`commit`.

    Parameters
    ----------
    path : str or path-like
        The final name.
    overwrite : bool
        Replace an existing file (default: refuse it).
    inputs : sequence of paths
        Files the run reads; the output may not be one of them.

    Attributes
    ----------
    final : Path
    tmp : Path
        Where to write (an empty file, created with the umask's permissions).
    """

    def __init__(self, path, *, overwrite: bool = False, inputs=(), what: str = "output"):
        self.final = check_output(path, overwrite=overwrite, inputs=inputs, what=what)
        self.overwrite = overwrite
        folder = self.final.parent if str(self.final.parent) else Path(".")
        remove_leftovers(folder)
        tmp = folder / f".{self.final.name}.kinemap-{os.getpid()}-{secrets.token_hex(4)}.tmp"
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
        os.close(fd)
        self.tmp = tmp
        self.done = False

    def commit(self) -> Path:
        """Rename the finished temporary file to the final name (atomic on POSIX)."""
        if self.done:
            return self.final
        if not self.overwrite and self.final.exists():
            self.abort()
            raise FileExistsError(f"{str(self.final)!r} appeared while it was being written; kept it")
        os.replace(self.tmp, self.final)
        self.done = True
        return self.final

    def abort(self) -> None:
        """Remove the temporary file (idempotent)."""
        self.done = True
        try:
            os.unlink(self.tmp)
        except OSError:
            pass


@contextlib.contextmanager
def atomic_write(path, *, overwrite: bool = False, inputs=(), what: str = "output"):
    """``with atomic_write(path) as tmp: write(tmp)``: the file appears under `path` when the
    block completes; on any error or signal nothing new is left (see the module notes)."""
    af = AtomicFile(path, overwrite=overwrite, inputs=inputs, what=what)
    with HeldSignals() as held:
        try:
            yield af.tmp
        except BaseException:
            af.abort()
            raise
        if held.received:
            af.abort()
        else:
            af.commit()
    held.deliver()


__all__ = ["AtomicFile", "atomic_write", "check_output", "remove_leftovers", "HeldSignals"]
