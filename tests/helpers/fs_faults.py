"""Faults of the filesystem for the tests of tests/hostile (injected, or a small real mount).

Injected faults run everywhere: :func:`fail_writes` makes the writes of chosen outputs fail
with an :class:`OSError` (ENOSPC, EROFS, ...) at the write layer of ``fringe.io``, both for the
small whole-file writers (``fringe.io.atomic``) and for HDF5 data going through the guard
(``fringe.io.h5guard``), and :func:`read_only_everywhere` makes every directory look like part
of a read-only filesystem. :func:`tmpfs` mounts a real, small tmpfs under ``tmp_path`` when the
tests run as root and the sandbox allows mounts; otherwise the test is skipped.
"""

from __future__ import annotations

import errno
import os
import subprocess
from pathlib import Path

import pytest

from fringe.io.atomic import TEMP_PATTERN

EXAMPLES = Path(__file__).resolve().parents[2] / "examples"


class _FailingFile:
    """A file object whose writes raise ``OSError(code)`` (HDF5 data through the guard)."""

    def __init__(self, fh, code: int):
        self._fh, self._code = fh, code

    def write(self, data):
        raise OSError(self._code, os.strerror(self._code))

    def __getattr__(self, name):
        return getattr(self._fh, name)


def fail_writes(monkeypatch, names, code: int = errno.ENOSPC) -> None:
    """Make every write of an output whose file name is in ``names`` fail with ``code``.

    The failure comes from the operating system's side of the write layer: the temporary file
    is created, then writing its contents raises ``OSError(code)``.
    """
    import fringe.io.atomic as atomic
    import fringe.io.h5guard as h5guard

    names = set(names)
    real_write_atomic = atomic.write_atomic

    def write_atomic(path, writer, **kw):
        if Path(path).name in names:
            def failing(tmp):
                raise OSError(code, os.strerror(code), tmp)
            return real_write_atomic(path, failing, **kw)
        return real_write_atomic(path, writer, **kw)

    real_init = h5guard.GuardedFile.__init__

    def init(self, path):
        real_init(self, path)
        if any(Path(path).name.startswith(f".{n}.") for n in names):
            self._fh = _FailingFile(self._fh, code)

    monkeypatch.setattr(atomic, "write_atomic", write_atomic)
    monkeypatch.setattr(h5guard.GuardedFile, "__init__", init)


def read_only_everywhere(monkeypatch) -> None:
    """Make ``os.statvfs`` report a read-only filesystem for every path (fringe.io.atomic)."""
    import fringe.io.atomic as atomic

    real = os.statvfs

    class _ReadOnly:
        def __init__(self, st):
            self._st = st

        @property
        def f_flag(self):
            return self._st.f_flag | os.ST_RDONLY

        def __getattr__(self, name):
            return getattr(self._st, name)

    monkeypatch.setattr(atomic.os, "statvfs", lambda p: _ReadOnly(real(p)))


def leftovers(folder: Path) -> list[Path]:
    """Every temporary file or directory of fringe under ``folder`` (recursively)."""
    return [p for p in Path(folder).rglob("*") if TEMP_PATTERN.fullmatch(p.name)]


def tree(folder: Path) -> dict[str, bytes]:
    """Relative path -> bytes of every file under ``folder`` (a snapshot)."""
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(Path(folder).rglob("*")) if p.is_file()}


def one_error_line(stderr: str) -> str:
    """The single ``error: ...`` line of ``stderr`` (warnings aside); fails on anything else."""
    lines = [ln for ln in stderr.splitlines() if ln.strip() and not ln.startswith("warning")]
    assert len(lines) == 1 and lines[0].startswith("error: "), stderr
    assert "Traceback" not in stderr and "Usage:" not in stderr, stderr
    return lines[0]


def can_mount() -> bool:
    """Whether this process may mount a tmpfs (root, and the sandbox allows it)."""
    return hasattr(os, "geteuid") and os.geteuid() == 0


def tmpfs(path: Path, size: str, *, read_only: bool = False) -> Path:
    """Mount a tmpfs of ``size`` at ``path`` (created); skip the test if that is impossible."""
    if not can_mount():
        pytest.skip("a real small filesystem needs root (mount -t tmpfs)")
    path.mkdir(parents=True, exist_ok=True)
    opts = f"size={size}" + (",ro" if read_only else "")
    res = subprocess.run(["mount", "-t", "tmpfs", "-o", opts, "tmpfs", str(path)],
                         capture_output=True, text=True)
    if res.returncode != 0:
        pytest.skip(f"mount -t tmpfs is not allowed here ({res.stderr.strip()})")
    return path


def unmount(path: Path) -> None:
    """Undo :func:`tmpfs` (lazily, so an open file cannot block it)."""
    subprocess.run(["umount", "-l", str(path)], capture_output=True)
