"""Memory freed by one fit kept in the process for the next (glibc's allocator settings).

By default glibc's ``malloc`` gives every block above its mmap threshold (128 KiB at first,
raised as larger blocks are freed) its own mapping, returned to the operating system when it
is freed, and returns the top of the heap to the system once more than its trim threshold
(twice the mmap threshold) lies free there. A fit of a short record makes short-lived arrays
of about 1.4 MB (a 2-day 1 Hz record's columns) and frees some 10 MB at its end, so each fit
faulted the pages of its temporaries in afresh: about 1.7 ms of a 16 ms fit
(docs/performance.md, "Fifth round"; glibc's rules: docs/references.md [R-num-glibc-malloc]).

:func:`keep_freed_memory` fixes the two thresholds (``mallopt``): blocks below
MMAP_THRESHOLD_BYTES come from the heap, and up to TRIM_THRESHOLD_BYTES of freed heap stays in
the process, where the next fit finds it already mapped. Larger blocks (a long record's
arrays) still get their own mappings and are returned when freed, so a year's fit peaks at
what it did (within 1 %, measured). The ``fringe`` command and a study's campaign workers call
it once; a program using fringe as a library decides for itself (nothing is changed at
import).

Only glibc has these settings (Linux); elsewhere, and where the user set glibc's own
``MALLOC_MMAP_THRESHOLD_`` or ``MALLOC_TRIM_THRESHOLD_`` variables (or ``GLIBC_TUNABLES``),
nothing is changed.
"""

from __future__ import annotations

import os
import sys

__all__ = ["MMAP_THRESHOLD_BYTES", "TRIM_THRESHOLD_BYTES", "keep_freed_memory"]

#: Blocks below this size come from the heap, bytes (above a 2-day 1 Hz record's 1.4 MB
#: columns; a larger block gets its own mapping, returned when freed).
MMAP_THRESHOLD_BYTES = 2 << 20

#: Freed memory at the top of the heap kept in the process up to this much, bytes (what a
#: short record's fit frees at its end; 32 MiB and 256 MiB raised a year's peak by 2-6 %).
TRIM_THRESHOLD_BYTES = 8 << 20

# mallopt's parameter numbers (glibc's malloc.h)
_M_TRIM_THRESHOLD = -1
_M_MMAP_THRESHOLD = -3

#: The user's own allocator settings, which keep_freed_memory leaves alone.
_USER_SETTINGS = ("MALLOC_MMAP_THRESHOLD_", "MALLOC_TRIM_THRESHOLD_", "GLIBC_TUNABLES")

#: (process id, result) of the call in this process (settings survive a fork; a spawned
#: process calls again).
_done: tuple[int, bool] | None = None


def keep_freed_memory() -> bool:
    """Set glibc's mmap and trim thresholds (module docstring) once per process.

    Returns
    -------
    bool
        True if the settings are in force (set by this or an earlier call), False where they
        do not apply (not glibc, the user's own settings, or ``mallopt`` refused them).
    """
    global _done
    if _done is not None and _done[0] == os.getpid():
        return _done[1]
    ok = False
    if sys.platform.startswith("linux") and _glibc() \
            and not any(v in os.environ for v in _USER_SETTINGS):
        import ctypes

        try:
            mallopt = ctypes.CDLL(None).mallopt
        except (OSError, AttributeError):
            mallopt = None
        if mallopt is not None:
            mallopt.argtypes = (ctypes.c_int, ctypes.c_int)
            mallopt.restype = ctypes.c_int
            ok = bool(mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD_BYTES)) and bool(
                mallopt(_M_TRIM_THRESHOLD, TRIM_THRESHOLD_BYTES))
    _done = (os.getpid(), ok)
    return ok


def _glibc() -> bool:
    """True if this process runs on glibc (its version string, e.g. ``"glibc 2.36"``)."""
    try:
        return (os.confstr("CS_GNU_LIBC_VERSION") or "").startswith("glibc")
    except (ValueError, OSError, AttributeError):
        return False
