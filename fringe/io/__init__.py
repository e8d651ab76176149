"""File formats: run files (HDF5) and CSV import.

* :func:`open_run` reads and validates a run file; :class:`RunWriter` writes one atomically.
* :func:`import_csv` turns a CSV table plus metadata (TOML or keywords) into a run file.

The run-file format is specified in ``docs/run-format.md``. The names below are loaded on first
use, so importing a light submodule (e.g. ``fringe.io.atomic``) does not import h5py.
"""

from __future__ import annotations

import importlib

_EXPORTS = {
    "APPARATUS_KINDS": "runformat", "FORMAT_VERSION": "runformat", "RunFile": "runreader",
    "RunWriter": "runwriter", "open_run": "runreader", "sha256": "runreader",
    "CsvImportSummary": "csvimport", "import_csv": "csvimport",
    "read_import_metadata": "csvimport",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    if name in _EXPORTS:
        return getattr(importlib.import_module(f".{_EXPORTS[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_EXPORTS))
