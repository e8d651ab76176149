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


