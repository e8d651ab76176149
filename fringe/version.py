"""The version of fringe, in one place, and the versions of the software a result was made with.

The packaging metadata reads ``__version__`` too; the software versions are recorded in every
result file for provenance.
"""

from __future__ import annotations

import importlib
import platform

__version__ = "0.1.0"

#: Import name -> the name recorded in a result file, for the libraries every result depends on.
CORE_LIBRARIES = {"numpy": "numpy", "scipy": "scipy", "h5py": "h5py", "erfa": "pyerfa"}


def software_versions(*extra: str) -> dict[str, str]:
    """Versions of fringe, Python and the libraries a result depends on.

    Parameters
    ----------
    *extra : str
        Import names of further libraries to record (e.g. ``"matplotlib"`` for a report).

    Returns
    -------
    dict of str to str
        ``{"fringe": ..., "python": ..., "numpy": ..., "scipy": ..., "h5py": ...,
        "pyerfa": ..., **extra}``.
    """
    versions = {"fringe": __version__, "python": platform.python_version()}
    for module, label in {**CORE_LIBRARIES, **{name: name for name in extra}}.items():
        versions[label] = importlib.import_module(module).__version__
    return versions
