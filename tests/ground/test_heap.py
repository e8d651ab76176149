"""fringe.heap: freed arrays stay mapped for the next allocation (glibc only)."""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

from fringe.heap import _glibc

# A child process: (optionally) keep_freed_memory, then 40 rounds of six 1 MiB arrays made
# and dropped (as a fit's temporaries); prints the settings' result and the minor page faults
# of the last 39 rounds.
CHILD = """
import resource, sys
import numpy as np
from fringe.heap import keep_freed_memory
ok = keep_freed_memory() if sys.argv[1] == "keep" else None
def round_():
    arrays = [np.ones(1 << 17) for _ in range(6)]
    del arrays
round_()                                           # the first round maps the pages
before = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
for _ in range(39):
    round_()
print(ok, resource.getrusage(resource.RUSAGE_SELF).ru_minflt - before)
"""

needs_glibc = pytest.mark.skipif(not (sys.platform.startswith("linux") and _glibc()),
                                 reason="glibc's allocator settings only")


def _child(mode: str, **env) -> tuple[str, int]:
    clean = {k: v for k, v in os.environ.items()
             if k not in ("MALLOC_MMAP_THRESHOLD_", "MALLOC_TRIM_THRESHOLD_", "GLIBC_TUNABLES")}
    out = subprocess.run([sys.executable, "-c", CHILD, mode], env={**clean, **env},
                         capture_output=True, text=True, check=True).stdout.split()
    return out[0], int(out[1])


@needs_glibc
def test_freed_arrays_are_not_faulted_in_again():
    # a round is 1536 pages of 4 KiB: by default glibc returns the freed 6 MiB to the system
    # (more than its trim threshold, twice the largest freed block) and each round faults its
    # pages in again; kept (below TRIM_THRESHOLD_BYTES), every round reuses them
    ok, kept = _child("keep")
    _, default = _child("default")
    assert ok == "True"
    assert default > 39 * 768         # at least half the pages of every round faulted in
    assert kept < 39 * 16              # a few, for the interpreter's own allocations


@needs_glibc
def test_the_users_own_settings_are_left_alone():
    ok, faults = _child("keep", MALLOC_TRIM_THRESHOLD_="131072")
    assert ok == "False"
    assert faults > 39 * 768
