"""Whole-or-nothing writes of small outputs (JSON, text, figures), and what they share.

Each writer writes a temporary file beside the target and renames it into place with
:func:`os.replace`, so a reader never sees a partial file. :func:`check_output_path` refuses to
replace an existing file without ``overwrite``, never lets an output replace an input, and
refuses, before anything is computed, a target that is a directory, a name that is too long, or
a directory that is missing, not a directory, read-only or not writable.

What the writers of :mod:`fringe.io` share lives here too:

* :func:`output_error` turns an :class:`OSError` of a write into one line naming the path, the
  cause and the fix (full disk, read-only filesystem, no permission, name too long, ...);
* :func:`temp_name` names every temporary file and directory ``.NAME.fringe-HOST-PID-RANDOM.KIND``,
  and :func:`sweep_leftovers` removes those whose process on this machine is gone (what SIGKILL
  or a power cut leaves), so the next run cleans up after a killed one;
* :func:`note_interrupt`, :func:`interrupt_received` and :func:`signals_deferred` let a
  clean-up or a commit finish before SIGINT/SIGTERM act, and let an interrupt that something
  swallowed (a clean-up callback) still stop a commit.

A symlink given as the target is written through: the file it points to is replaced (its
temporary file goes beside that file, so the rename never crosses filesystems).
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import json
import logging
import os
import re
import secrets
import shutil
import signal
import socket
import threading
import warnings
from collections.abc import Callable, Iterable
from pathlib import Path

from fringe.errors import FringeWarning, OutputError, output_exists

logger = logging.getLogger(__name__)

#: The fix named for each cause of a failed write (errno -> advice).
_FIXES = {
    errno.ENOSPC: "free space on that filesystem or write somewhere else",
    errno.EDQUOT: "free space within your quota or write somewhere else",
    errno.EROFS: "the filesystem is read-only: write somewhere else",
    errno.EACCES: "choose a directory you may write to",
    errno.EPERM: "choose a directory you may write to",
    errno.ENAMETOOLONG: "choose a shorter file or directory name",
    errno.ENOTDIR: "a part of the path is a file, not a directory: choose another path",
    errno.EISDIR: "the path is a directory: name a file instead",
    errno.ENOENT: "create the directory first or choose another path",
    errno.EXDEV: "write to the filesystem of the target",
    errno.EIO: "check the disk or write somewhere else",
}


def output_error(path, exc: OSError) -> OutputError:
    """The one-line :class:`OutputError` for an :class:`OSError` raised writing ``path``.

    Parameters
    ----------
    path : str or os.PathLike
        The output named in the message (the target, not a temporary file).
    exc : OSError
        What the operating system said.
    """
    cause = exc.strerror or str(exc) or type(exc).__name__
    fix = _FIXES.get(exc.errno, "choose another output path")
    return OutputError(f"{path}: cannot be written ({cause}); {fix}")


# ------------------------------------------------------------------ temporary names

_HOST = hashlib.sha256(socket.gethostname().encode("utf-8", "replace")).hexdigest()[:6]
#: What every temporary file or directory of fringe is called (see :func:`temp_name`).
TEMP_PATTERN = re.compile(r"\.(?:.*\.)?fringe-(?P<host>[0-9a-f]{6})-(?P<pid>\d+)-[0-9a-f]{8}"
                          r"\.(?P<kind>part|staging|scratch)")
#: Longest part of an output's name kept in its temporary file's name (bytes stay below the
#: usual 255-byte limit of a file name).
_NAME_KEPT = 80


def temp_name(name: str, kind: str) -> str:
    """A fresh hidden name ``.NAME.fringe-HOST-PID-RANDOM.KIND`` (``.fringe-...`` without NAME).

    HOST is a short hash of this machine's name and PID this process, so
    :func:`sweep_leftovers` can tell a dead run's leftovers from a running one's.
    """
    stem = f".{name[:_NAME_KEPT]}." if name else "."
    return f"{stem}fringe-{_HOST}-{os.getpid()}-{secrets.token_hex(4)}.{kind}"


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:                       # exists, owned by someone else
        return True
    return True


def sweep_leftovers(directory) -> list[Path]:
    """Remove the temporary files of dead fringe runs in ``directory``; return what was removed.

    Only names of :data:`TEMP_PATTERN` made on this machine by a process that no longer exists
    are removed. Those made on another machine (a shared filesystem) are named in a
    :class:`~fringe.errors.FringeWarning` and left alone: their run may still be going.
    """
    removed, foreign = [], []
    try:
        entries = list(os.scandir(directory))
    except OSError:
        return removed
    for entry in entries:
        m = TEMP_PATTERN.fullmatch(entry.name)
        if m is None:
            continue
        if m["host"] != _HOST:
            foreign.append(entry.name)
            continue
        if _alive(int(m["pid"])):
            continue
        with contextlib.suppress(OSError), signals_deferred():
            if entry.is_dir(follow_symlinks=False):
                shutil.rmtree(entry.path)
            else:
                os.unlink(entry.path)
            removed.append(Path(entry.path))
            logger.info("removed %s, left by an interrupted fringe run", entry.path)
    if foreign:
        warnings.warn(f"{directory}: {', '.join(sorted(foreign))}: left by a fringe run on "
                      "another machine (killed, or still running); delete when no run is "
                      "active", FringeWarning, stacklevel=2)
    return removed


# ------------------------------------------------------------------ signals

_INTERRUPT = {"signum": None}
_DEFERRED = (signal.SIGINT, signal.SIGTERM)


def note_interrupt(signum: int) -> None:
    """Record that SIGINT/SIGTERM arrived (the command line's handler calls this)."""
    _INTERRUPT["signum"] = signum


def interrupt_received() -> int | None:
    """The signal number recorded by :func:`note_interrupt`, or None."""
    return _INTERRUPT["signum"]


def clear_interrupt() -> None:
    """Forget a recorded interrupt (a new command starts)."""
    _INTERRUPT["signum"] = None


@contextlib.contextmanager
def signals_deferred():
    """Hold SIGINT and SIGTERM until the block ends (clean-ups and commits run to the end).

    A signal that arrives meanwhile is delivered when the block ends. Outside the main thread
    (where Python runs no signal handlers) this does nothing.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    old = signal.pthread_sigmask(signal.SIG_BLOCK, _DEFERRED)
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, old)


def pending_interrupt() -> bool:
    """Whether SIGINT/SIGTERM is held by :func:`signals_deferred` or was already recorded."""
    if interrupt_received() is not None:
        return True
    return bool(set(signal.sigpending()) & set(_DEFERRED))


# ------------------------------------------------------------------ checks

def name_max(directory) -> int:
    """The longest file name (bytes) the filesystem of ``directory`` takes (255 if unknown)."""
    try:
        return int(os.pathconf(directory, "PC_NAME_MAX"))
    except (OSError, ValueError):
        return 255


def check_directory_writable(directory, shown=None) -> None:
    """Refuse (OutputError) a directory that is missing, not a directory or not writable.

    ``shown`` is the path named in the message (default ``directory``).
    """
    shown = directory if shown is None else shown
    d = Path(directory)
    if not d.exists():
        raise OutputError(f"{shown}: directory {d} does not exist; create it first or choose "
                          "another path")
    if not d.is_dir():
        raise OutputError(f"{shown}: {d} is not a directory; choose another path")
    with contextlib.suppress(OSError):
        if os.statvfs(d).f_flag & os.ST_RDONLY:
            raise OutputError(f"{shown}: cannot be written ({d} is on a read-only "
                              "filesystem); write somewhere else")
    if not os.access(d, os.W_OK | os.X_OK):
        raise OutputError(f"{shown}: cannot be written (no permission to write in {d}); "
                          "choose a directory you may write to")


def check_name_length(path, shown=None) -> None:
    """Refuse (OutputError) a path with a component longer than its filesystem allows.

    Checked before anything touches the path (a stat of such a path raises ENAMETOOLONG).
    """
    shown = path if shown is None else shown
    p = Path(os.path.abspath(path))
    existing = p
    while not os.path.isdir(existing) and existing != existing.parent:
        existing = existing.parent
    limit = name_max(existing)
    try:
        path_max = int(os.pathconf(existing, "PC_PATH_MAX"))
    except (OSError, ValueError):
        path_max = 4096
    if len(os.fsencode(str(p))) >= path_max:
        raise OutputError(f"{shown}: path too long ({len(os.fsencode(str(p)))} bytes, at most "
                          f"{path_max - 1}); choose a shorter path")
    for part in p.parts:
        if len(os.fsencode(part)) > limit:
            raise OutputError(f"{shown}: file name too long ({len(os.fsencode(part))} bytes, "
                              f"at most {limit}); choose a shorter name")


def real_target(path) -> Path:
    """The file a write to ``path`` replaces: ``path``, or what it points to if a symlink."""
    p = Path(path)
    return Path(os.path.realpath(p)) if p.is_symlink() else p


def check_output_path(path: str | os.PathLike, *, overwrite: bool = False,
                      protect: Iterable[str | os.PathLike] = ()) -> Path:
    """Validate an output path before anything is computed; return it as a Path.

    Refused with :class:`~fringe.errors.OutputError`: an input of ``protect`` (by resolved
    path or file identity), an existing file without ``overwrite``, a directory, a name longer
    than the filesystem allows, and a directory that is missing, read-only or not writable.
    """
    out = Path(path)
    check_name_length(out)
    for p in protect:
        try:
            if Path(p).exists() and out.exists() and os.path.samefile(p, out):
                raise OutputError(f"{out}: refusing to write over an input file")
        except OSError:
            pass
        if Path(p).resolve() == out.resolve():
            raise OutputError(f"{out}: refusing to write over an input file")
    target = real_target(out)
    if target.is_dir():
        raise OutputError(f"{out}: is a directory, expected a file path; remove it or "
                          "choose another name")
    if out.exists() and not overwrite:
        raise output_exists(out)
    check_directory_writable(target.parent, shown=out)
    check_name_length(target, shown=out)
    return out


def write_atomic(path: str | os.PathLike, writer: Callable[[str], None], *,
                 overwrite: bool = False, protect: Iterable = ()) -> Path:
    """Call ``writer(temp_path)`` then rename the temporary file to ``path``.

    An :class:`OSError` (full disk, read-only filesystem, ...) becomes a one-line
    :class:`~fringe.errors.OutputError` naming ``path``; the temporary file is removed on any
    failure or interrupt.
    """
    out = check_output_path(path, overwrite=overwrite, protect=protect)
    target = real_target(out)
    sweep_leftovers(target.parent)
    tmp = os.path.join(target.parent, temp_name(target.name, "part"))
    try:
        os.close(os.open(tmp, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o666))
    except OSError as exc:
        raise output_error(out, exc) from None
    try:
        writer(tmp)
        with signals_deferred():          # an interrupt before the rename discards the file
            if pending_interrupt():       # held now, or swallowed on the way (a finaliser)
                raise KeyboardInterrupt
            os.replace(tmp, target)
    except OSError as exc:
        _remove_quietly(tmp)
        raise output_error(out, exc) from None
    except BaseException:
        _remove_quietly(tmp)
        raise
    return out


def _remove_quietly(path) -> None:
    """Remove a temporary file, holding SIGINT/SIGTERM until it is gone."""
    with signals_deferred(), contextlib.suppress(FileNotFoundError):
        os.unlink(path)


def write_text_atomic(path, text: str, **kw) -> Path:
    """Write ``text`` (UTF-8) to ``path`` whole or not at all; return the path written.

    Parameters
    ----------
    path : str or os.PathLike
        The target file.
    text : str
        The full contents.
    **kw
        ``overwrite`` and ``protect``, as for :func:`write_atomic`.
    """
    def _w(tmp):
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(text)
    return write_atomic(path, _w, **kw)


def write_json_atomic(path, obj, **kw) -> Path:
    """Write ``obj`` as indented JSON (keys in their given order) to ``path``, whole or not at all.

    ``**kw`` are ``overwrite`` and ``protect``, as for :func:`write_atomic`; returns the path.
    """
    return write_text_atomic(path, json.dumps(obj, indent=2, sort_keys=False) + "\n", **kw)


def save_figure_atomic(fig, path, **kw) -> Path:
    """Save a matplotlib figure atomically (format from the target's suffix)."""
    fmt = Path(path).suffix.lstrip(".") or "png"
    return write_atomic(path, lambda tmp: fig.savefig(tmp, format=fmt, dpi=130,
                                                      bbox_inches="tight"), **kw)
