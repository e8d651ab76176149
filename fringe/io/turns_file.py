"""The per-turn amplitudes file written beside a fit result (HDF5).

Its columns, its writer and its one reader.

* :class:`TurnColumns` makes the columns of a fit a segment at a time; :func:`write_turns`
  writes them (format "turns", version 1; ``docs/fit.md``).
* :func:`read_turns` reads and checks a file (every column); :func:`accepted_turns` takes the
  accepted turns of what it read, time-sorted and checked for a report
  (:func:`read_accepted_turns` does both). Errors are one line "PATH: FIELD: EXPECTED".
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from fringe.errors import InputFileError, missing_input

#: Columns of the per-turn amplitudes file, in order (docs/fit.md).
TURN_COLUMNS = ("t_mid_s", "phi_rad", "C", "B", "sigma_C", "sigma_B", "accepted", "status",
                "model_C", "model_B", "n_valid", "residual_rms")
#: Columns a file must have (the others, e.g. ``status``, may be missing from a hand-made one).
REQUIRED_COLUMNS = ("t_mid_s", "phi_rad", "C", "B", "sigma_C", "sigma_B", "accepted",
                    "model_C", "model_B")
#: Fewest accepted turns :func:`accepted_turns` takes.
MIN_ACCEPTED = 4


class TurnColumns:
    """The per-turn columns of a fit (:data:`TURN_COLUMNS`).

    They are made a segment of the turn table at a time, so a table kept in scratch files is
    never whole in memory.

    ``segments()`` yields one dict of columns per segment; ``to_dict()`` (or indexing by a
    column name) joins them. ``close()`` (or leaving a ``with`` block) removes the fit's
    scratch files; the columns cannot be read after that.
    """

    def __init__(self, setup, store, models, scratch=None, *, span_s: float | None = None):
        self._setup, self._store, self._models, self._scratch = setup, store, models, scratch
        self._span_s = span_s

    def __len__(self) -> int:
        return self._store.n_blocks

    @property
    def models(self):
        """The fit's per-turn models (``fringe.fit.stages.TurnModels``; its row cache)."""
        return self._models

    def __repr__(self) -> str:
        span = f", span {self._span_s / 86400:.3g} d" if self._span_s is not None else ""
        return (f"TurnColumns({len(self)} turns, {int(np.sum(self._store.accepted))} "
                f"accepted{span}, units {self._setup.units!r})")

    def segments(self):
        """Per segment, a dict of the turn columns (numpy arrays; see ``TURN_COLUMNS``)."""
        from fringe.frames import sidereal_angle_rad

        setup, first = self._setup, 0
        for i, (_, tab) in enumerate(self._store.segments()):
            sel = tab.accepted
            n_acc = int(np.sum(sel))
            mc, mb = self._models.segment(i, first, n_acc)
            first += n_acc
            model_c, model_b = np.full(tab.n_blocks, np.nan), np.full(tab.n_blocks, np.nan)
            model_c[sel], model_b[sel] = mc, mb
            cov = tab.formal_cov()
            yield {"t_mid_s": tab.t_mid_s,
                   "phi_rad": sidereal_angle_rad(setup.epoch, tab.t_mid_s,
                                                 setup.site.east_longitude_rad),
                   "C": tab.C, "B": tab.B, "sigma_C": np.sqrt(cov[:, 0, 0]),
                   "sigma_B": np.sqrt(cov[:, 1, 1]), "accepted": sel.astype(np.int8),
                   "status": tab.status, "model_C": model_c, "model_B": model_b,
                   "n_valid": tab.n_valid, "residual_rms": tab.residual_rms}

    def to_dict(self) -> dict:
        """All turn columns as whole numpy arrays (name to array)."""
        parts = list(self.segments())
        return {k: np.concatenate([p[k] for p in parts]) for k in TURN_COLUMNS}

    def __getitem__(self, name: str):
        if name not in TURN_COLUMNS:
            raise KeyError(name)
        return np.concatenate([p[name] for p in self.segments()])

    def close(self) -> None:
        """Remove the scratch files, if any."""
        if self._scratch is not None:
            self._scratch.close()

    def __enter__(self) -> TurnColumns:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


#: Turns up to which the amplitudes file is built in memory (HDF5's core driver) and written
#: in one piece (about 100 bytes per turn, 1.6 MB at the limit); longer tables are written a
#: segment at a time (a 30-day table in memory raised that fit's peak by 9 MiB).
IN_MEMORY_TURNS = 1 << 14


def write_turns(path, *, units: str, epoch_utc: str, columns, overwrite: bool = False,
                protect=()) -> None:
    """Write the per-turn amplitudes file (HDF5, atomic).

    ``columns``: a dict of equal-length arrays, or :class:`TurnColumns` (written a segment at
    a time). A table of at most :data:`IN_MEMORY_TURNS` turns is laid out in memory and written
    with one write (:func:`_write_image`); a longer one is written through the guard a segment
    at a time. Either way the write goes through :class:`fringe.io.h5guard.GuardedFile`.
    """
    from fringe.io.atomic import write_atomic
    from fringe.io.h5guard import open_h5_output

    def _w(tmp):
        if _n_turns(columns) <= IN_MEMORY_TURNS:
            _write_image(tmp, _fill)
            return
        f, guard = open_h5_output(tmp)
        try:
            _fill(f)
        finally:
            f.close()
            guard.close()
        if guard.error is not None:
            raise guard.error

    def _fill(f):
        f.attrs["fringe_format"] = "turns"
        f.attrs["fringe_format_version"] = 1
        f.attrs["units"] = units
        f.attrs["epoch_utc"] = epoch_utc
        g = f.create_group("turns")
        if isinstance(columns, dict):
            for name, arr in columns.items():
                g.create_dataset(name, data=np.asarray(arr))
            return
        n, done = len(columns), 0
        for part in columns.segments():
            m = part["t_mid_s"].size
            for name, arr in part.items():
                if m == n:                     # one segment: each column in one call
                    g.create_dataset(name, data=np.asarray(arr))
                    continue
                if name not in g:
                    g.create_dataset(name, shape=(n,), dtype=np.asarray(arr).dtype)
                g[name][done:done + m] = arr
            done += m

    write_atomic(path, _w, overwrite=overwrite, protect=protect)


def _n_turns(columns) -> int:
    """Turns in ``columns`` (a dict of equal-length arrays, or :class:`TurnColumns`)."""
    if isinstance(columns, dict):
        return max((np.asarray(a).shape[0] for a in columns.values() if np.ndim(a)), default=0)
    return len(columns)


def _write_image(tmp, fill) -> None:
    """Build an HDF5 file in memory with ``fill(h5py.File)`` and write it to ``tmp`` at once.

    HDF5 writes into memory (the core driver, no backing file); the finished image then goes
    to the existing empty file ``tmp`` in one write through the guard, which keeps a failed write (a
    full disk) and syncs. Raises that failure (an OSError).
    """
    import h5py

    from fringe.io.h5guard import GuardedFile

    f = h5py.File(f"{tmp}.image", "w", driver="core", backing_store=False)
    try:
        fill(f)
        f.flush()
        image = f.id.get_file_image()
    finally:
        f.close()
    guard = GuardedFile(tmp)
    try:
        guard.write(image)
    finally:
        guard.close()
    if guard.error is not None:
        raise guard.error


def _check_stored_here(path, fh, obj, label: str) -> None:
    """Refuse ``obj`` unless its data are stored in ``fh``.

    Refused: behind an external link, virtual, or with external raw storage (the hash of the
    file must identify the data, as for run files).
    """
    import h5py

    other = obj.file.id.fileno != fh.id.fileno
    if other or (isinstance(obj, h5py.Dataset) and (obj.is_virtual or obj.external)):
        raise InputFileError(path, label, "expected data stored in this file, got "
                             + ("a link into another file" if other else
                                "a virtual or externally stored dataset"))


def read_turns(path) -> dict:
    """Read and check a per-turn amplitudes file (HDF5, format "turns", version 1).

    Returns
    -------
    dict
        Every dataset of group ``turns`` (1-D numeric arrays of one length, as stored; the
        columns of :data:`REQUIRED_COLUMNS` are always there) plus ``units`` and
        ``epoch_utc`` (str, or None when the file does not state them).

    Raises
    ------
    InputFileError
        Missing or unreadable file, wrong format or version, a missing, non-numeric or
        wrong-length column.
    """
    import h5py

    path = Path(path)
    if not path.exists():
        raise missing_input(path, "a per-turn amplitudes (HDF5) file")
    if not path.is_file():
        raise InputFileError(path, "file", "expected a per-turn amplitudes (HDF5) file, got a "
                                           "directory or a special file")
    try:
        fh = h5py.File(path, "r")
    except OSError:
        raise InputFileError(path, "file", "expected a readable HDF5 file") from None
    with fh:
        def attr(name):
            v = fh.attrs.get(name)
            return v.decode() if isinstance(v, bytes) else v

        if attr("fringe_format") != "turns":
            raise InputFileError(path, "fringe_format", "expected 'turns', got "
                                                        f"{attr('fringe_format')!r}")
        if attr("fringe_format_version") != 1:
            raise InputFileError(path, "fringe_format_version", "expected 1, got "
                                 f"{attr('fringe_format_version')!r}")
        group = fh.get("turns")
        if not isinstance(group, h5py.Group):
            raise InputFileError(path, "turns", "expected a group of per-turn datasets")
        _check_stored_here(path, fh, group, "turns")
        out, n = {}, None
        for name in list(REQUIRED_COLUMNS) + [k for k in group if k not in REQUIRED_COLUMNS]:
            ds = group.get(name)
            if not isinstance(ds, h5py.Dataset) or ds.ndim != 1 or ds.dtype.kind not in "biuf":
                raise InputFileError(path, f"turns/{name}", "expected a 1-D numeric dataset")
            _check_stored_here(path, fh, ds, f"turns/{name}")
            if n is not None and ds.shape[0] != n:
                raise InputFileError(path, f"turns/{name}", f"expected {n} values (one per "
                                                            f"turn), got {ds.shape[0]}")
            n = ds.shape[0]
            out[name] = np.asarray(ds[()])
        for key in ("units", "epoch_utc"):
            v = attr(key)
            out[key] = None if v is None else str(v)
    return out


def accepted_turns(turns: dict, path, turn_period_s: float | None = None) -> dict:
    """The accepted turns of :func:`read_turns`'s ``turns`` (from ``path``), time-sorted.

    Returns the columns of :data:`REQUIRED_COLUMNS` but ``accepted``, as float arrays of the
    accepted turns, plus ``turn_period_s`` (the given one when positive, else the median turn
    spacing), ``n_turns`` and ``n_rejected``. Raises :class:`~fringe.errors.InputFileError`
    for fewer than :data:`MIN_ACCEPTED` accepted turns, non-finite values or sigmas <= 0 on
    accepted turns, or turn times that do not advance.
    """
    n = turns["t_mid_s"].size
    ok = turns["accepted"] == 1
    if ok.sum() < MIN_ACCEPTED:
        raise InputFileError(path, "turns/accepted", f"expected at least {MIN_ACCEPTED} "
                                                     f"accepted turns, got {int(ok.sum())}")
    order = np.argsort(turns["t_mid_s"][ok].astype(float), kind="stable")
    out = {k: turns[k].astype(float)[ok][order] for k in REQUIRED_COLUMNS if k != "accepted"}
    for name, arr in out.items():
        if not np.all(np.isfinite(arr)):
            raise InputFileError(path, f"turns/{name}", "expected finite values on accepted "
                                                        "turns")
    for name in ("sigma_C", "sigma_B"):
        if not np.all(out[name] > 0):
            raise InputFileError(path, f"turns/{name}", "expected positive values on "
                                                        "accepted turns")
    tp = turn_period_s
    if not (tp is not None and tp > 0):
        tp = float(np.median(np.diff(out["t_mid_s"])))
        if not tp > 0:
            raise InputFileError(path, "turns/t_mid_s", "expected distinct turn times")
    out.update(turn_period_s=float(tp), n_turns=int(n), n_rejected=int(n - ok.sum()))
    return out


def read_accepted_turns(path, turn_period_s: float | None = None) -> dict:
    """:func:`accepted_turns` of :func:`read_turns` (what a report reads)."""
    return accepted_turns(read_turns(path), path, turn_period_s)
