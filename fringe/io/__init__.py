"""File formats: run files (HDF5) and CSV import.

* :func:`open_run` reads and validates a run file; :class:`RunWriter` writes one atomically.
* :func:`import_csv` turns a CSV table plus metadata (TOML or keywords) into a run file.

The run-file format is specified in ``docs/run-format.md``.
"""

from .csvimport import CsvImportSummary, import_csv, read_import_metadata
from .runfile import APPARATUS_KINDS, FORMAT_VERSION, RunFile, RunWriter, open_run, sha256

__all__ = ["APPARATUS_KINDS", "FORMAT_VERSION", "CsvImportSummary", "RunFile", "RunWriter",
           "import_csv", "open_run", "read_import_metadata", "sha256"]
