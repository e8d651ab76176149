"""The files of one fit, written as a set: the result (JSON) and its per-turn amplitudes (HDF5).

:func:`fit_outputs` checks the targets and opens their :class:`~fringe.io.outputset.OutputSet`
before the fit is computed (a read-only or missing directory is known at once, not after
minutes of work); :func:`write_fit_files` writes the turns file, records its SHA-256 in the
result (``amplitudes_sha256``) and writes the result. Both appear together, or neither; a report
refuses a turns file whose hash is not the one recorded (:func:`check_companion`).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

from fringe.errors import InputFileError
from fringe.io.atomic import write_json_atomic
from fringe.io.outputset import OutputSet
from fringe.io.turns_file import write_turns

__all__ = ["check_companion", "fit_outputs", "turns_path_of", "write_fit_files"]


def turns_path_of(out) -> Path:
    """The per-turn amplitudes file beside the result ``out`` (X.json -> X.turns.h5)."""
    return Path(out).with_suffix(".turns.h5")


def fit_outputs(out, *, overwrite: bool = False, protect=()) -> OutputSet:
    """The output set of a fit to ``out`` (checked now; open it with ``with``).

    The turns file is moved into place first and the result last.
    """
    out = Path(out)
    return OutputSet(out.parent, [turns_path_of(out).name, out.name], overwrite=overwrite,
                     protect=protect, shown=out)


def write_fit_files(outputs: OutputSet, result, columns):
    """Write ``columns`` and ``result`` into the open set ``outputs``; return the result written.

    The result returned (and written) names the turns file and records its SHA-256.
    """
    from fringe.io.runreader import sha256

    turns_name, result_name = outputs.names
    staged_turns = outputs.path(turns_name)
    write_turns(staged_turns, units=result.units, epoch_utc=result.epoch_utc, columns=columns)
    result = dataclasses.replace(result, amplitudes_file=turns_name,
                                 amplitudes_sha256=sha256(staged_turns))
    write_json_atomic(outputs.path(result_name), result.to_dict())
    return result


def check_companion(fit, turns_path) -> None:
    """Refuse (InputFileError) a turns file that is not the one written with the result ``fit``.

    Results without a recorded hash (written by older versions) are not checked.
    """
    from fringe.io.runreader import sha256

    expected = getattr(fit, "amplitudes_sha256", "")
    if not expected:
        return
    got = sha256(turns_path)
    if got != expected:
        raise InputFileError(turns_path, "sha256", f"expected the per-turn amplitudes file "
                             f"written with the fit result (sha256 {expected[:12]}...), got "
                             f"another file (sha256 {got[:12]}...); re-run fringe fit or "
                             "restore the matching pair")
