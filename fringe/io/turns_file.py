"""The per-turn amplitudes file written beside a fit result (HDF5): its columns, writer and reader."""

from __future__ import annotations

import numpy as np

#: Columns of the per-turn amplitudes file, in order (docs/fit.md).
TURN_COLUMNS = ("t_mid_s", "phi_rad", "C", "B", "sigma_C", "sigma_B", "accepted", "status",
                "model_C", "model_B", "n_valid", "residual_rms")


class TurnColumns:
    """The per-turn columns of a fit (:data:`TURN_COLUMNS`), made a segment of the turn table
    at a time (so a table kept in scratch files is never whole in memory).

    ``segments()`` yields one dict of columns per segment; ``to_dict()`` (or indexing by a
    column name) joins them. ``close()`` (or leaving a ``with`` block) removes the fit's
    scratch files; the columns cannot be read after that.
    """

    def __init__(self, setup, store, models, scratch=None):
        self._setup, self._store, self._models, self._scratch = setup, store, models, scratch

    def __len__(self) -> int:
        return self._store.n_blocks

    def segments(self):
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
        parts = list(self.segments())
        return {k: np.concatenate([p[k] for p in parts]) for k in TURN_COLUMNS}

    def __getitem__(self, name: str):
        if name not in TURN_COLUMNS:
            raise KeyError(name)
        return np.concatenate([p[name] for p in self.segments()])

    def close(self) -> None:
        if self._scratch is not None:
            self._scratch.close()

    def __enter__(self) -> TurnColumns:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def write_turns(path, *, units: str, epoch_utc: str, columns, overwrite: bool = False,
                protect=()) -> None:
    """Write the per-turn amplitudes file (HDF5, atomic).

    ``columns``: a dict of equal-length arrays, or :class:`TurnColumns` (written a segment at
    a time).
    """
    import h5py

    from fringe.io.atomic import write_atomic

    def _w(tmp):
        with h5py.File(tmp, "w") as f:
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
                    if name not in g:
                        g.create_dataset(name, shape=(n,), dtype=np.asarray(arr).dtype)
                    g[name][done:done + m] = arr
                done += m

    write_atomic(path, _w, overwrite=overwrite, protect=protect)


def read_turns(path) -> dict:
    """Read a per-turn amplitudes file: dict of arrays plus 'units' and 'epoch_utc'."""
    import h5py

    from fringe.errors import InputFileError

    try:
        with h5py.File(path, "r") as f:
            if f.attrs.get("fringe_format") != "turns":
                raise InputFileError(path, "fringe_format", "expected 'turns'")
            out = {k: np.asarray(v[()]) for k, v in f["turns"].items()}
            out["units"] = str(f.attrs["units"])
            out["epoch_utc"] = str(f.attrs["epoch_utc"])
            return out
    except OSError:
        raise InputFileError(path, "file", "expected a readable HDF5 turns file") from None
