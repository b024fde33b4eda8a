"""A file that HDF5 writes through and that turns a failed write into a clean Python error afterwards.

When a write fails inside the HDF5 library (a full disk, a file-size limit, a quota), HDF5 2.0 with h5py 3.16
leaves its metadata cache half flushed: every later close or release of an object repeats "Can't decrement id
ref count" and the process ends in a segmentation fault, with nothing the caller can catch. The audit writer
therefore hands h5py this file object (h5py's ``fileobj`` driver) instead of a path: every write goes through
``os.pwrite`` here; the first one that fails is remembered and the rest are counted but not written, so the
library never sees a failure and closes normally. The writer then calls :meth:`GuardedFile.check`, which
raises :class:`vzero.errors.OutputWriteError` naming the path and the cause (the caller removes the partial
file). Positions are kept here, not by the operating system, since a seek past a file-size limit fails too.
"""

from __future__ import annotations

import io
import os
from typing import Any


class GuardedFile(io.RawIOBase):
    """A read-write binary file at ``path`` (created or truncated) whose write failures are deferred."""

    def __init__(self, path: str | os.PathLike[str]) -> None:
        super().__init__()
        self.path = os.fspath(path)
        self.fd = os.open(self.path, os.O_RDWR | os.O_CREAT | os.O_TRUNC, 0o666)
        self.pos = 0
        self.size = 0
        self.error: OSError | None = None

    def readable(self) -> bool:
        return True

    def writable(self) -> bool:
        return True

    def seekable(self) -> bool:
        return True

    def seek(self, pos: int, whence: int = 0) -> int:
        self.pos = pos if whence == io.SEEK_SET else self.pos + pos if whence == io.SEEK_CUR else self.size + pos
        return self.pos

    def tell(self) -> int:
        return self.pos

    def readinto(self, buffer: Any) -> int:
        view = memoryview(buffer).cast("B")
        data = os.pread(self.fd, len(view), self.pos)
        view[: len(data)] = data
        self.pos += len(data)
        return len(data)

    def write(self, buffer: Any) -> int:
        view = memoryview(buffer).cast("B")
        n = len(view)
        if self.error is None:
            try:
                done = 0
                while done < n:
                    done += os.pwrite(self.fd, view[done:], self.pos + done)
            except OSError as exc:
                self.error = exc
        self.pos += n
        self.size = max(self.size, self.pos)
        return n

    def truncate(self, size: int | None = None) -> int:
        size = self.pos if size is None else size
        if self.error is None:
            try:
                os.ftruncate(self.fd, size)
            except OSError as exc:
                self.error = exc
        self.size = size
        return size

    def flush(self) -> None:
        """Writes go straight to the operating system; nothing is buffered here."""

    def close(self) -> None:
        if not self.closed:
            try:
                os.close(self.fd)
            except OSError as exc:
                self.error = self.error or exc
        super().close()

    def check(self) -> None:
        """Raise :class:`OutputWriteError` if any write failed."""
        if self.error is not None:
            from vzero.errors import OutputWriteError

            raise OutputWriteError.from_os(self.error, self.path) from self.error
