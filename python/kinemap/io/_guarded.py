"""The temporary file as the HDF5 library sees it while kinemap writes.

The HDF5 library does not survive a write error inside its own close (a full disk, a
file-size limit): it raises, then crashes the process at the next call on the file or when
Python frees the file's objects. :class:`GuardedFile` is handed to h5py's file-object driver
instead of a file name, so HDF5 never sees an I/O error: the first error (or a Ctrl-C that
arrives while HDF5 calls back into Python) is recorded, later writes go to a small in-memory
overlay instead of the disk (so that HDF5 reads back what it believes it wrote while it
closes), and the writer raises the recorded error once HDF5 has closed cleanly.
"""

from __future__ import annotations

import io
import os
from pathlib import Path

#: Bytes of writes kept in memory after a failure so that HDF5 reads back what it believes
#: it wrote while it closes (metadata only; raw data beyond this is dropped).
_OVERLAY_LIMIT = 64 << 20


class GuardedFile(io.RawIOBase):
    """The temporary file as HDF5 sees it: positional reads and writes on a descriptor;
    the first error (or KeyboardInterrupt) is recorded in :attr:`failure`, never raised
    into HDF5, and later writes go to a small in-memory overlay instead of the disk."""

    def __init__(self, path: Path):
        super().__init__()
        self.fd = os.open(path, os.O_RDWR)
        self.pos = 0
        self.failure: BaseException | None = None
        self._overlay: list[tuple[int, bytes]] = []
        self._overlay_bytes = 0

    def readable(self) -> bool:
        return True

    def writable(self) -> bool:
        return True

    def seekable(self) -> bool:
        return True

    def seek(self, pos: int, whence: int = 0) -> int:
        if whence == 0:
            self.pos = int(pos)
        elif whence == 1:
            self.pos += int(pos)
        else:
            self.pos = self._size() + int(pos)
        return self.pos

    def tell(self) -> int:
        return self.pos

    def _size(self) -> int:
        try:
            size = os.fstat(self.fd).st_size
        except OSError:
            size = 0
        for off, data in self._overlay:
            size = max(size, off + len(data))
        return size

    def _record(self, exc: BaseException) -> None:
        if self.failure is None:
            self.failure = exc

    def readinto(self, b) -> int:
        view = memoryview(b).cast("B")
        n = len(view)
        try:
            data = os.pread(self.fd, n, self.pos) if n else b""
        except BaseException as exc:
            self._record(exc)
            data = b""
        view[: len(data)] = data
        view[len(data):] = bytes(n - len(data))
        lo, hi = self.pos, self.pos + n
        for off, blob in self._overlay:  # later writes win
            a, z = max(lo, off), min(hi, off + len(blob))
            if a < z:
                view[a - lo: z - lo] = blob[a - off: z - off]
        self.pos += n
        return n

    def write(self, b) -> int:
        view = memoryview(b).cast("B")
        n = len(view)
        if self.failure is None:
            try:
                done = 0
                while done < n:
                    done += os.pwrite(self.fd, view[done:], self.pos + done)
            except BaseException as exc:
                self._record(exc)
        if self.failure is not None and self._overlay_bytes + n <= _OVERLAY_LIMIT:
            self._overlay.append((self.pos, bytes(view)))
            self._overlay_bytes += n
        self.pos += n
        return n

    def truncate(self, size=None) -> int:
        size = self.pos if size is None else int(size)
        if self.failure is None:
            try:
                os.ftruncate(self.fd, size)
            except BaseException as exc:
                self._record(exc)
        return size

    def flush(self) -> None:
        return None

    def close(self) -> None:
        if self.fd >= 0:
            try:
                os.close(self.fd)
            except OSError as exc:
                self._record(exc)
            self.fd = -1
        super().close()


__all__ = ["GuardedFile"]
