"""HDF5 output that survives a full disk: the writes of HDF5 go through :class:`GuardedFile`.

When the disk fills while the HDF5 library writes (``No space left on device``), the library's
state breaks: closing the file fails, every object's clean-up prints a traceback, and the
interpreter can end with a segmentation fault. :func:`open_h5_output` therefore hands HDF5 a
Python file object (h5py's file-object driver) that never reports a failed write to it: the
first :class:`OSError` is kept, later writes are dropped, and HDF5 finishes and closes normally.
The caller then checks :attr:`GuardedFile.error` and discards the file; the writers of
:mod:`fringe.io` turn it into one line naming the output and the fix.
"""

from __future__ import annotations

import os

__all__ = ["GuardedFile", "open_h5_output"]


class GuardedFile:
    """A binary file for h5py that keeps the first failed write instead of raising it.

    Parameters
    ----------
    path : str or os.PathLike
        An existing (empty) file, opened for reading and writing.

    Attributes
    ----------
    error : OSError or None
        The first failure of a write, truncate, flush or sync; None while all went well.
    """

    def __init__(self, path):
        self._fh = open(path, "r+b", buffering=0)  # noqa: SIM115 (closed by close())
        self.error: OSError | None = None

    def write(self, data) -> int:
        """Write ``data`` at the current position (dropped after a failure); return its size."""
        view = memoryview(data).cast("B")
        size = view.nbytes
        if self.error is None:
            try:
                done = self._fh.write(view)
                while done < size:                 # a short write: go on with the rest
                    done += self._fh.write(view[done:])
            except OSError as exc:
                self.error = exc
        else:
            self._fh.seek(size, os.SEEK_CUR)
        return size

    def readinto(self, buffer) -> int:
        """Read into ``buffer``; bytes past the end of the file read as zeros."""
        got = self._fh.readinto(buffer) or 0
        view = memoryview(buffer).cast("B")
        if got < view.nbytes:
            view[got:] = bytes(view.nbytes - got)
        return view.nbytes

    def read(self, size: int = -1) -> bytes:
        """Read up to ``size`` bytes."""
        return self._fh.read(size)

    def seek(self, offset: int, whence: int = os.SEEK_SET) -> int:
        """Move the position; return it."""
        return self._fh.seek(offset, whence)

    def tell(self) -> int:
        """The current position."""
        return self._fh.tell()

    def truncate(self, size: int | None = None) -> int:
        """Set the file's length (a failure is kept, not raised)."""
        size = self._fh.tell() if size is None else size
        if self.error is None:
            try:
                self._fh.truncate(size)
            except OSError as exc:
                self.error = exc
        return size

    def flush(self) -> None:
        """Nothing to flush (unbuffered)."""

    def close(self) -> None:
        """Sync to the disk (a failure is kept) and close."""
        if self._fh.closed:
            return
        if self.error is None:
            try:
                os.fsync(self._fh.fileno())
            except OSError as exc:
                self.error = exc
        self._fh.close()

    @property
    def closed(self) -> bool:
        """Whether :meth:`close` was called."""
        return self._fh.closed


def open_h5_output(path, **kwargs):
    """``(h5py.File, GuardedFile)`` writing the existing empty file ``path`` through the guard.

    ``kwargs`` go to :class:`h5py.File` (mode "w"). Close the h5py file, then the guard, then
    check the guard's ``error``.
    """
    import h5py

    guard = GuardedFile(path)
    try:
        return h5py.File(guard, "w", **kwargs), guard
    except BaseException:
        guard.close()
        raise
