"""The fit result: a fixed schema with three views (repr, summary(), to_dict()/from_dict()).

The JSON file written by ``fringe fit`` is ``FitResult.to_dict()``; its per-turn amplitudes go to
an HDF5 file beside it (:func:`write_turns`, :func:`read_turns`). Both formats are documented in
``docs/fit.md``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

FORMAT = "fit"
FORMAT_VERSION = 1

CONVENTIONS = {
    "coefficient_frame": "SCCEF (J2000/ICRS equatorial axes), C2",
    "lab_frame": "x south, y east, z up; colatitude = 90 deg - geodetic latitude (C4)",
    "sidereal_angle": "phi = ERA(UT1) + east longitude (C5)",
    "theta": "azimuth of path 1 from south toward east, theta = pi - A (C6, C7)",
    "beat": "path 1 minus path 2, path 2 at azimuth A1 + separation (C8)",
    "normalisation": "two-path signal (C9)",
    "fourier_model": "S = B sin 2theta + C cos 2theta, C = C0 + Cs1 sin phi + ... (C10)",
    "rms": "rms_mm = delta - beta + 1/2, rms_kt = beta - alpha - 1 (C13)",
    "uncertainties": "1 sigma",
}


@dataclass
class FitResult:
    """Everything ``fringe fit`` reports; see ``docs/fit.md`` for the field meanings."""

    theory: str
    units: str
    coefficients: dict
    fixed: dict
    covariance: dict
    harmonics: dict
    warnings: list
    efficiency: dict
    statistics: dict
    stage1: dict
    site: dict
    apparatus: dict
    epoch_utc: str
    span_s: float
    settings: dict
    input: dict
    software: dict
    created_utc: str
    amplitudes_file: str = ""
    nuisance: dict = field(default_factory=dict)
    notes: list = field(default_factory=list)
    upper_limits: dict = field(default_factory=dict)
    one_stage: dict = field(default_factory=dict)
    conventions: dict = field(default_factory=lambda: dict(CONVENTIONS))

    def to_dict(self) -> dict:
        out = {"fringe_format": FORMAT, "fringe_format_version": FORMAT_VERSION}
        out.update({k: getattr(self, k) for k in self.__dataclass_fields__})
        return _plain(out)

    @classmethod
    def from_dict(cls, d: dict) -> FitResult:
        from fringe.errors import ConfigError

        if d.get("fringe_format") != FORMAT or d.get("fringe_format_version") != FORMAT_VERSION:
            raise ConfigError("fit result: fringe_format: expected 'fit' version 1")
        kw = {k: d[k] for k in cls.__dataclass_fields__ if k in d}
        return cls(**kw)

    def correlation(self) -> np.ndarray:
        m = np.array(self.covariance["matrix"], float)
        s = np.sqrt(np.diag(m))
        return m / np.outer(s, s)

    def summary(self) -> str:
        lines = [f"fit of {self.input.get('path', '?')} — theory {self.theory}, "
                 f"{self.span_s / 86400:.2f} d, units {self.units}",
                 f"turns: {self.stage1.get('n_accepted')} accepted of "
                 f"{self.stage1.get('n_blocks')} ({self.stage1.get('n_rejected_glitch')} "
                 f"glitch, {self.stage1.get('n_rejected_partial')} partial); turn period "
                 f"{self.stage1.get('turn_period_s', float('nan')):.4g} s",
                 f"uncertainty: {self.statistics.get('uncertainty')} (reduced chi2 "
                 f"{self.statistics.get('chi2_reduced', float('nan')):.3f}, dof "
                 f"{self.statistics.get('dof')})", "",
                 f"{'coefficient':<12}{'value':>13}{'sigma':>12}{'efficiency':>12}"]
        for name, v in self.coefficients.items():
            eff = self.efficiency.get(name)
            lines.append(f"{name:<12}{v['value']:>13.4g}{v['sigma']:>12.3g}"
                         f"{(f'{eff:.3f}' if eff is not None else '-'):>12}")
        for name, v in self.fixed.items():
            lines.append(f"{name:<12}{v:>13.4g}{'fixed':>12}")
        for name, v in self.nuisance.items():
            lines.append(f"{name:<12}{v['value']:>13.4g}{v['sigma']:>12.3g}{'nuisance':>12}")
        for k, v in self.upper_limits.items():
            lines.append(f"95 % upper limit {k}: {v:.4g}")
        if self.one_stage:
            lines.append("one-stage cross-check: " + ", ".join(
                f"{n} {v['value']:.3g}±{v['sigma']:.2g}"
                for n, v in self.one_stage.get("coefficients", {}).items()))
        for w in self.warnings:
            lines.append(f"WARNING: {w}")
        for n in self.notes:
            lines.append(f"note: {n}")
        return "\n".join(lines)

    def __repr__(self) -> str:
        return (f"FitResult(theory={self.theory!r}, free={list(self.coefficients)}, "
                f"warnings={len(self.warnings)})")


def _plain(obj):
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return _plain(obj.tolist())
    if isinstance(obj, (np.floating, float)):
        x = float(obj)
        return x if math.isfinite(x) else None
    if isinstance(obj, (np.integer,)):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


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
