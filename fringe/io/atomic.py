"""Whole-or-nothing writes of small outputs (JSON, text, figures).

Each writer writes a temporary file beside the target and renames it into place with
:func:`os.replace`, so a reader never sees a partial file. :func:`check_output_path` refuses to
replace an existing file without ``overwrite`` and never lets an output replace an input.
"""

from __future__ import annotations

import json
import os
import tempfile
from collections.abc import Callable, Iterable
from pathlib import Path

from fringe.errors import OutputError


def check_output_path(path: str | os.PathLike, *, overwrite: bool = False,
                      protect: Iterable[str | os.PathLike] = ()) -> Path:
    """Validate an output path: not an input, not existing unless ``overwrite``."""
    out = Path(path)
    for p in protect:
        try:
            if Path(p).exists() and out.exists() and os.path.samefile(p, out):
                raise OutputError(f"{out}: refusing to write over an input file")
        except OSError:
            pass
        if Path(p).resolve() == out.resolve():
            raise OutputError(f"{out}: refusing to write over an input file")
    if out.exists() and not overwrite:
        raise OutputError(f"{out}: exists (pass overwrite=True to replace it)")
    if not out.parent.exists():
        raise OutputError(f"{out}: directory {out.parent} does not exist")
    return out


def write_atomic(path: str | os.PathLike, writer: Callable[[str], None], *,
                 overwrite: bool = False, protect: Iterable = ()) -> Path:
    """Call ``writer(temp_path)`` then rename the temporary file to ``path``."""
    out = check_output_path(path, overwrite=overwrite, protect=protect)
    fd, tmp = tempfile.mkstemp(prefix=f".{out.name}.", suffix=".part", dir=out.parent)
    os.close(fd)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)          # the mode an ordinary open() would give
    try:
        writer(tmp)
        os.replace(tmp, out)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return out


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
