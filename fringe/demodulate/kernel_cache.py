"""Where the compiled kernel (:mod:`fringe.demodulate.kernel`) keeps its machine code.

numba caches the compiled kernel beside its source (``__pycache__``), else in the user's cache
directory (``~/.cache/numba``), else in ``NUMBA_CACHE_DIR``. On a cluster node, in a container
or with a read-only install none of these may be writable, and numba then refuses to load the
module ("cannot cache function ...: no locator available"). :func:`choose_cache` picks a
writable place before the kernel is compiled: the usual ones, else a directory under the
system's temporary directory, else no cache at all (each run compiles again), with a one-line
note in the log saying which. :func:`cache_is_warm` tells whether compiled code is already
stored, so the command line can say once, on a terminal, that the first run after an install
compiles for several seconds.
"""

from __future__ import annotations

import hashlib
import logging
import os
import tempfile
from pathlib import Path

logger = logging.getLogger(__name__)

__all__ = ["CACHE", "cache_dirs", "cache_is_warm", "choose_cache"]

#: The kernel module's source file.
KERNEL_SOURCE = Path(__file__).with_name("kernel.py")


def _writable(directory: Path) -> bool:
    """Whether a file can be created in ``directory`` (made if missing), as numba checks."""
    try:
        directory.mkdir(parents=True, exist_ok=True)
        tempfile.TemporaryFile(dir=directory).close()
    except OSError:
        return False
    return True


def _subpath(source: Path) -> str:
    """The directory name numba gives for a source file inside a cache directory."""
    parent = os.path.dirname(os.path.abspath(source))
    return f"{os.path.basename(parent)}_{hashlib.sha1(parent.encode()).hexdigest()}"


def cache_dirs(source: Path = KERNEL_SOURCE) -> list[Path]:
    """Where numba may keep the kernel's compiled code, in the order numba tries them."""
    dirs = []
    if os.environ.get("NUMBA_CACHE_DIR"):
        dirs.append(Path(os.environ["NUMBA_CACHE_DIR"]) / _subpath(source))
    dirs.append(source.parent / "__pycache__")
    dirs.append(Path.home() / ".cache" / "numba" / _subpath(source))
    return dirs


def choose_cache(source: Path = KERNEL_SOURCE, writable=_writable) -> tuple[bool, str | None]:
    """Decide whether (and where) numba caches the kernel; return ``(cache, note)``.

    When none of :func:`cache_dirs` is writable, ``NUMBA_CACHE_DIR`` is set to a directory
    under the system's temporary directory (and numba's configuration with it); when that is
    not writable either, caching is off. ``note`` says so in one line (None when the usual
    place works). ``writable(directory)`` is the test (injected by the tests).
    """
    if any(writable(d) for d in cache_dirs(source)):
        return True, None
    fallback = Path(tempfile.gettempdir()) / f"fringe-numba-cache-{os.getuid()}"
    if writable(fallback / _subpath(source)):
        os.environ["NUMBA_CACHE_DIR"] = str(fallback)
        try:
            from numba.core import config
            config.CACHE_DIR = str(fallback)
        except ImportError:                 # numba reads the variable when imported
            pass
        return True, (f"compiled-kernel cache: the package directory and the home directory "
                      f"cannot be written; caching in {fallback} instead (set "
                      "NUMBA_CACHE_DIR to choose)")
    return False, ("compiled-kernel cache: no writable directory (package, home, temporary); "
                   "the kernel is compiled on every run (several seconds; set NUMBA_CACHE_DIR "
                   "to a writable directory)")


def cache_is_warm(source: Path = KERNEL_SOURCE) -> bool:
    """Whether compiled code of the kernel is stored in one of :func:`cache_dirs`."""
    stem = source.stem
    return any(d.is_dir() and any(d.glob(f"{stem}.*.nbi")) for d in cache_dirs(source))


def _decide() -> bool:
    cache, note = choose_cache()
    if note:
        logger.warning(note)
    return cache


#: Whether the kernel's functions are compiled with ``cache=True`` (decided once, on import).
CACHE = _decide()
