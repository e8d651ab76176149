"""Shared pieces of the hostile-input tests (tests/hostile/test_hostile*.py): hypothesis settings,
file digests and the one-line error check."""

from __future__ import annotations

import hashlib
from pathlib import Path

from hypothesis import HealthCheck, settings

N = 24  # samples in the base file
EPOCH = "2027-02-03T00:00:00Z"
CORE = ("time", "azimuth", "signal")


def _settings(n: int, *, fixed: bool):
    """Hypothesis settings: no example database (tests write only under tmp_path)."""
    return settings(max_examples=n, deadline=None, database=None, derandomize=fixed,
                    suppress_health_check=[HealthCheck.function_scoped_fixture,
                                           HealthCheck.too_slow, HealthCheck.data_too_large])


def digest(path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def assert_one_line_naming(exc: BaseException, *paths) -> None:
    message = str(exc)
    assert "\n" not in message and "\r" not in message, message
    assert any(message.startswith(f"{p}: ") for p in paths), (message, paths)
