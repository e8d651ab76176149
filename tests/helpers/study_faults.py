"""Faults injected into a study's campaigns (importable by spawned pool workers).

Module-level functions, picklable by reference: a spawned process or a dask worker imports
this module (``tests.helpers`` is on the path the parent hands its children).
"""

from __future__ import annotations

import os


def square_or_fail(item: int) -> int:
    """item**2; raises for item 1 and ends its process abruptly for item 2 (a lost worker)."""
    if item == 1:
        raise RuntimeError("injected failure of item 1")
    if item == 2:
        os._exit(3)
    return item * item


def square_or_raise(item: int) -> int:
    """item**2; raises for item 1 (no lost process)."""
    if item == 1:
        raise RuntimeError("injected failure of item 1")
    return item * item


def failing_campaign(task):
    """:func:`fringe.study.campaign.run_campaign`, except that campaign 1 raises."""
    from fringe.study.campaign import run_campaign

    if task.index == 1:
        raise RuntimeError("injected failure of campaign 1")
    return run_campaign(task)


def fail_record(item, reason) -> dict:
    """What the tests keep for a failed item: the item and the reason's text."""
    return {"failed": item, "reason": str(reason)}


def quick_then_slow(item: int) -> int:
    """Item 0 returns at once; every other item sleeps 120 s (a long campaign)."""
    import time

    if item:
        time.sleep(120.0)
    return item
