"""File formats: run files (HDF5), CSV import, fit-result and per-turn files, atomic writes.

Layer 4 of the data path.

* :func:`open_run` reads and validates a run file; :class:`RunWriter` writes one atomically; the
  format's rules are in :mod:`fringe.io.runformat` (specified in ``docs/run-format.md``).
* :func:`import_csv` turns a CSV table plus metadata (TOML or keywords) into a run file.
* :class:`FitResult` is the fit-result file (JSON; frozen, its parts in
  :mod:`fringe.io.fit_sections`, warnings as :class:`FitWarning` records), read by
  :func:`read_fit_result`; :func:`write_turns` and :func:`read_turns` write and read the
  per-turn amplitudes beside it (:class:`TurnColumns`; :func:`read_accepted_turns` for a
  report).
* :class:`FrozenMap` and :class:`Fields` (:mod:`fringe.io.records`): the read-only mapping of
  the result records and the field checks of their ``from_dict``.
* :func:`write_atomic` and its text, JSON and figure forms write a file whole or not at all.

The names below are loaded on first use, so importing a light submodule (e.g.
``fringe.io.atomic``) does not import h5py.
"""

from __future__ import annotations

import importlib

_EXPORTS = {
    "APPARATUS_KINDS": "runformat", "FORMAT_VERSION": "runformat",
    "RunFile": "runreader", "open_run": "runreader", "sha256": "runreader",
    "RunWriter": "runwriter",
    "CsvImportSummary": "csvimport", "import_csv": "csvimport",
    "read_import_metadata": "csvimport",
    "FitResult": "fit_result", "read_fit_result": "fit_result",
    "Covariance": "fit_sections", "Estimate": "fit_sections", "FitInput": "fit_sections",
    "FitWarning": "fit_sections", "Harmonics": "fit_sections", "OneStage": "fit_sections",
    "Stage1": "fit_sections", "Statistics": "fit_sections",
    "Fields": "records", "FrozenMap": "records",
    "TurnColumns": "turns_file", "read_turns": "turns_file", "write_turns": "turns_file",
    "accepted_turns": "turns_file", "read_accepted_turns": "turns_file",
    "check_output_path": "atomic", "write_atomic": "atomic", "write_text_atomic": "atomic",
    "write_json_atomic": "atomic", "save_figure_atomic": "atomic",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str):
    if name in _EXPORTS:
        return getattr(importlib.import_module(f".{_EXPORTS[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_EXPORTS))
