"""The outputs of one command, moved into place together or not at all.

A command that writes several files (``fringe fit``: the result and its turns file;
``fringe report``: documents and figures) opens an :class:`OutputSet` before it computes
anything. Its checks refuse, at once, targets that exist without ``overwrite``, would replace an
input, are directories, or lie in a directory that cannot be written. The command then writes
every output into a hidden staging directory beside the targets (same filesystem) through
:meth:`OutputSet.path`. Leaving the ``with`` block without an error moves them all into place
in the order given (SIGINT and SIGTERM are held meanwhile); an error or an interrupt removes the
staging directory and leaves every target as it was.

A new output directory appears with one rename, whole. Into an existing directory the files
move one by one: only a power cut or SIGKILL in those microseconds can leave some moved and
some not, and ``fringe fit`` names last the file that ties the set together (the result, which
records the SHA-256 of its turns file). What SIGKILL leaves (the staging directory
``.fringe-HOST-PID-RANDOM.staging``) the next :class:`OutputSet` in that directory removes.

:class:`OutputTree` is the same for a command whose outputs are only known once written
(``fringe demo``: a report's figures depend on its content): the command writes anywhere under
:attr:`OutputTree.directory`, and everything found there is moved into place.
"""

from __future__ import annotations

import contextlib
import errno
import os
import shutil
from collections.abc import Iterable, Sequence
from pathlib import Path

from fringe.errors import OutputError
from fringe.io.atomic import (
    check_directory_writable,
    check_name_length,
    check_output_path,
    output_error,
    pending_interrupt,
    real_target,
    signals_deferred,
    sweep_leftovers,
    temp_name,
)

__all__ = ["OutputSet", "OutputTree"]


class OutputSet:
    """Stage the outputs ``names`` (relative to ``root``) and move them into place together.

    Parameters
    ----------
    root : str or os.PathLike
        The output directory; it may not exist yet (then it appears whole, with one rename).
    names : sequence of str
        The outputs, as paths relative to ``root`` (``"figures/a.png"``), in the order they
        are moved into place.
    overwrite : bool
        Replace existing outputs.
    protect : iterable of path
        Inputs that must never be written over.
    shown : path, optional
        What messages about the directory name (default ``root``; a fit names its result).

    Raises
    ------
    OutputError
        One line naming the path and the fix, before anything is written.

    Examples
    --------
    >>> with OutputSet("out", ["a.json", "b.txt"]) as outs:       # doctest: +SKIP
    ...     write_json_atomic(outs.path("a.json"), {...})
    """

    def __init__(self, root, names: Sequence[str], *, overwrite: bool = False,
                 protect: Iterable = (), shown=None):
        self.root = Path(root)
        shown = self.root if shown is None else shown
        self.names = tuple(names)
        for name in self.names:
            check_name_length(self.root / name, shown=shown)
        self.overwrite = overwrite
        self.protect = tuple(protect)
        if self.root.exists() and not self.root.is_dir():
            raise OutputError(f"{self.root}: exists and is not a directory; remove it or "
                              "choose another output directory")
        base = self.root if self.root.is_dir() else _existing_ancestor(self.root)
        check_directory_writable(base, shown=shown)
        self._base, self._shown = base, shown
        for name in self.names:
            target = self.root / name
            if target.parent.exists() and not target.parent.is_dir():
                raise OutputError(f"{target}: {target.parent} is not a directory; remove it "
                                  "or choose another output directory")
            if target.parent.is_dir():
                check_output_path(target, overwrite=overwrite, protect=self.protect)
        self._staging: Path | None = None

    @property
    def base(self) -> Path:
        """The existing directory that holds the staging directory (``root`` if it exists)."""
        return self._base

    @property
    def targets(self) -> list[Path]:
        """The final paths of the outputs, in order."""
        return [self.root / n for n in self.names]

    def __enter__(self) -> OutputSet:
        sweep_leftovers(self._base)
        staging = self._base / temp_name("", "staging")
        try:
            staging.mkdir()
            (staging / "out").mkdir()
        except OSError as exc:
            with contextlib.suppress(OSError):
                shutil.rmtree(staging)
            raise output_error(self._shown, exc) from None
        self._staging = staging
        return self

    def path(self, name: str) -> Path:
        """Where to write the output ``name`` now (inside the staging directory)."""
        if self._staging is None:
            raise RuntimeError("OutputSet is not open: use it as a context manager")
        if name not in self.names:
            raise ValueError(f"{name!r} is not one of the outputs {self.names}")
        p = self._staging / "out" / name
        p.parent.mkdir(parents=True, exist_ok=True)
        return p

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is not None:
            staged = str(self._staging / "out") if self._staging is not None else None
            self.discard()
            if staged and isinstance(exc, OutputError) and staged in str(exc):
                # name the output the user asked for, not its staging copy
                raise OutputError(str(exc).replace(staged, str(self.root))) from None
            return
        self.commit()

    def discard(self) -> None:
        """Remove the staging directory (the targets are left as they were)."""
        if self._staging is not None:
            with signals_deferred():
                shutil.rmtree(self._staging, ignore_errors=True)
            self._staging = None

    def commit(self) -> None:
        """Move every staged output into place, in order; then remove the staging directory.

        An interrupt received before the commit (even one that a clean-up callback swallowed)
        discards the set instead and raises :class:`KeyboardInterrupt`.
        """
        staged = self._staging / "out"
        missing = [n for n in self.names if not (staged / n).is_file()]
        if missing:
            self.discard()
            raise RuntimeError(f"OutputSet: outputs never written: {', '.join(missing)}")
        with signals_deferred():
            if pending_interrupt():
                shutil.rmtree(self._staging, ignore_errors=True)
                self._staging = None
                interrupted = True
            else:
                interrupted = False
                try:
                    self._move_all(staged)
                finally:
                    shutil.rmtree(self._staging, ignore_errors=True)
                    self._staging = None
        if interrupted:
            raise KeyboardInterrupt

    def _move_all(self, staged: Path) -> None:
        if not self.root.exists():
            try:
                self.root.parent.mkdir(parents=True, exist_ok=True)
                os.replace(staged, self.root)
                return
            except OSError as exc:
                raise output_error(self.root, exc) from None
        for name in self.names:
            target = self.root / name
            try:
                target.parent.mkdir(parents=True, exist_ok=True)
                _place(staged / name, real_target(target))
            except OSError as exc:
                raise output_error(target, exc) from None


class OutputTree(OutputSet):
    """An :class:`OutputSet` whose files are whatever is written under :attr:`directory`.

    Parameters
    ----------
    root : str or os.PathLike
        The output directory (it appears whole, with one rename, if it does not exist).
    names : sequence of str
        The outputs known in advance, checked before any work (as :class:`OutputSet` does) and
        moved into place last, in this order; files written besides them (a report's figures)
        are checked when the tree is committed and moved first.
    overwrite, protect, shown
        As for :class:`OutputSet`.
    """

    @property
    def directory(self) -> Path:
        """The staging directory to write the outputs into (same layout as ``root``)."""
        if self._staging is None:
            raise RuntimeError("OutputTree is not open: use it as a context manager")
        return self._staging / "out"

    def path(self, name: str) -> Path:
        """Where to write the output ``name`` (any path relative to ``root``) now."""
        p = self.directory / name
        p.parent.mkdir(parents=True, exist_ok=True)
        return p

    def commit(self) -> None:
        """Check the files written besides the known names, then move everything into place."""
        staged = self.directory
        found = sorted(p.relative_to(staged).as_posix() for p in staged.rglob("*")
                       if p.is_file() or p.is_symlink())
        extra = [n for n in found if n not in self.names]
        try:
            for name in extra:
                target = self.root / name
                if target.parent.is_dir():
                    check_output_path(target, overwrite=self.overwrite, protect=self.protect)
        except BaseException:
            self.discard()
            raise
        self.names = tuple(extra) + self.names
        super().commit()


def _existing_ancestor(path: Path) -> Path:
    """The nearest existing ancestor of ``path`` (the working directory at worst)."""
    p = path.absolute().parent
    while not p.exists():
        p = p.parent
    return p


def _place(src: Path, dst: Path) -> None:
    """Rename ``src`` over ``dst``; across filesystems, copy beside ``dst`` and rename there."""
    try:
        os.replace(src, dst)
    except OSError as exc:
        if exc.errno != errno.EXDEV:
            raise
        tmp = dst.parent / temp_name(dst.name, "part")
        try:
            shutil.copyfile(src, tmp)
            os.replace(tmp, dst)
        except BaseException:
            with contextlib.suppress(FileNotFoundError):
                os.unlink(tmp)
            raise
