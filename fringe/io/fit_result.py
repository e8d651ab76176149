"""The fit result and :func:`read_fit_result`, the one reader of the result file.

The record has a fixed schema and three views (repr, summary(), to_dict()/from_dict()). The
JSON file written by ``fringe fit`` is ``FitResult.to_dict()`` (format "fit", version 3:
the version that added the optional ``systematics``, ``blinding``, ``likelihood`` and ``runs``
parts; version-2 files, and version-1 files, whose warnings are plain strings, are read too);
its per-turn amplitudes go to an HDF5 file beside it (:mod:`fringe.io.turns_file`). Both
formats are documented in ``docs/fit.md``. The parts of the result are the records of
:mod:`fringe.io.fit_sections`, :mod:`fringe.io.fit_calibration`, :mod:`fringe.io.fit_budget`
and :mod:`fringe.io.fit_joint`.
"""

from __future__ import annotations

import json
import re
from collections.abc import Mapping
from dataclasses import dataclass, field, fields
from pathlib import Path

import numpy as np

from fringe.errors import InputFileError, missing_input, not_utf8
from fringe.io.fit_budget import Blinding, Systematics
from fringe.io.fit_calibration import SignalCalibration
from fringe.io.fit_joint import Likelihood, Runs, joint_header_lines, runs_table_lines
from fringe.io.fit_sections import (
    Covariance,
    Derived,
    Estimate,
    FitInput,
    FitWarning,
    Harmonics,
    Motion,
    OneStage,
    Sessions,
    Stage1,
    Statistics,
    read_estimates,
)
from fringe.io.records import MAX_DEPTH, Fields, FrozenMap, check_depth, freeze, plain

__all__ = ["CONVENTIONS", "FORMAT", "FORMAT_VERSION", "READABLE_VERSIONS", "FitResult",
           "read_fit_result", "session_lines"]

FORMAT = "fit"
_SHA256 = re.compile(r"[0-9a-f]{64}")
FORMAT_VERSION = 3
#: The line under the coefficient table of :meth:`FitResult.summary`.
EFFICIENCY_DEFINITION = ("efficiency = white-noise Cramer-Rao sigma of this record (per-sample "
                         "noise = median per-turn residual RMS) / reported sigma; 1 is the "
                         "white-noise limit, below 1 the noise or correlations cost precision, "
                         "* marks a value above 1 (see the note)")

#: Versions :meth:`FitResult.from_dict` reads (1: warnings as plain strings; 2: no
#: likelihood or runs parts; 3: the portable likelihood, ``fringe combine``).
READABLE_VERSIONS = (1, 2, 3)

CONVENTIONS = {
    # each text names its section of docs/conventions.md (C2, C4, C5, C6/C7, C8, C9, C10, C13)
    "coefficient_frame": "Sun-centred celestial equatorial frame SCCEF (J2000/ICRS "
                         "equatorial axes); docs/conventions.md, 'The coefficient frame'",
    "lab_frame": "x south, y east, z up; colatitude = 90 deg - geodetic latitude; "
                 "docs/conventions.md, 'Lab frame and colatitude'",
    "sidereal_angle": "phi = ERA(UT1) + east longitude; docs/conventions.md, 'Sidereal angle'",
    "theta": "azimuth of path 1 from south toward east, theta = pi - A (A: file azimuth from "
             "north toward east); docs/conventions.md, 'Turntable angle'",
    "beat": "path 1 minus path 2, path 2 at azimuth A1 + separation; docs/conventions.md, "
            "'Sign of the beat and of the fringe count'",
    "normalisation": "harmonics of the apparatus's observable, in its units; "
                     "harmonics.two_path_factor f maps them to the two-path signal; "
                     "docs/conventions.md, 'Normalisation: two paths'",
    "fourier_model": "S = B sin 2theta + C cos 2theta, C = C0 + Cs1 sin phi + ...; "
                     "docs/conventions.md, 'Fourier model and harmonic names'",
    "rms": "rms_mm = delta - beta + 1/2, rms_kt = beta - alpha - 1; docs/conventions.md, "
           "'RMS parameters and their combinations'",
    "uncertainties": "1 sigma",
}


@dataclass(frozen=True)
class FitResult:
    """Everything ``fringe fit`` reports (see ``docs/fit.md`` for the file).

    Attributes
    ----------
    theory, units : str
        Theory name; unit of the observable (Hz, "1" fractional, fringes).
    coefficients : mapping of str to Estimate
        The free coefficients, value and 1 sigma (coefficient units).
    fixed : mapping of str to float
        Coefficients held at a value.
    covariance : Covariance or None
        Of the free coefficients, in the order of ``coefficients``.
    harmonics : Harmonics or None
        Stage-2 C10 harmonics.
    warnings : tuple of FitWarning
    efficiency : mapping of str to float, or None
        White-noise Cramer-Rao sigma / reported sigma, per free coefficient.
    statistics : Statistics or None
    stage1 : Stage1 or None
    site, apparatus : mapping or None
        The run file's site and apparatus metadata, as recorded.
    epoch_utc : str or None
    span_s : float or None
        Span of the record, s.
    settings : mapping or None
        What the fit was asked: ``{"fit": FitSettings.to_dict(), "engine", "dut1_s"}``.
    input : FitInput or None
    software : mapping of str to str, or None
    created_utc : str or None
    amplitudes_file : str
        The per-turn amplitudes file, relative to the result file ("" for none).
    amplitudes_sha256 : str
        SHA-256 (64 hex digits) of that file as written with this result, so a reader can tell
        it from a turns file of another fit ("" in files written before it was recorded).
    nuisance : mapping of str to Estimate
        Nuisances fitted with the coefficients (unit of the observable); NaN where written
        as null.
    notes : tuple of str
    upper_limits : mapping of str to float
        E.g. ``sun_speed_kms_95`` of the medium fit (``speed_kms_95`` in files written before
        the laboratory's speed was derived: the same quantity, the Sun's speed).
    derived : Derived or None
        Quantities derived from the coefficients (the medium fit's speeds), None when absent.
    one_stage : OneStage or None
        The one-stage cross-check, when it was run.
    conventions : mapping of str to str, or None
    calibration : SignalCalibration or None
        Gate correction, scale uncertainty and weighting (run files of format version 2 that
        declare them); None when the run file declares none.
    motion : Motion or None
        The turntable motion stage 1 detected, with its block and exclusion rules (None in
        files written before motions were detected).
    sessions : Sessions or None
        The per-session 2 theta amplitudes and the chi^2 of their agreement (the result when
        the sidereal stage is skipped; None in older files).
    systematics : Systematics or None
        The systematic budget (``fringe fit --regress`` or ``--budget``); None when absent.
    blinding : Blinding or None
        The blinding state (``fringe fit --blind``, ``fringe unblind``); None when absent.
    likelihood : Likelihood or None
        The run's portable likelihood (linear fits of one run file, version 3); None in older
        files, for nonlinear theories and for joint results (whose runs carry theirs).
    runs : Runs or None
        The runs of a joint fit or a combination (``fringe fit RUN1 RUN2 ...``,
        ``fringe combine``); None for a fit of one run file.

    None marks a part a (hand-made, version-1) file leaves out; ``fringe fit`` fills every
    part. Mappings are read-only (:class:`~fringe.io.records.FrozenMap`), sequences tuples;
    use :func:`dataclasses.replace` for a changed copy.
    """

    theory: str
    units: str
    coefficients: Mapping[str, Estimate]
    fixed: Mapping[str, float]
    covariance: Covariance | None
    harmonics: Harmonics | None
    warnings: tuple[FitWarning, ...]
    efficiency: Mapping[str, float] | None
    statistics: Statistics | None
    stage1: Stage1 | None
    site: Mapping | None
    apparatus: Mapping | None
    epoch_utc: str | None
    span_s: float | None
    settings: Mapping | None
    input: FitInput | None
    software: Mapping[str, str] | None
    created_utc: str | None
    amplitudes_file: str = ""
    amplitudes_sha256: str = ""
    nuisance: Mapping[str, Estimate] = field(default_factory=FrozenMap)
    notes: tuple[str, ...] = ()
    upper_limits: Mapping[str, float] = field(default_factory=FrozenMap)
    derived: Derived | None = None
    one_stage: OneStage | None = None
    conventions: Mapping[str, str] | None = field(default_factory=lambda: freeze(CONVENTIONS))
    calibration: SignalCalibration | None = None
    motion: Motion | None = None
    sessions: Sessions | None = None
    systematics: Systematics | None = None
    blinding: Blinding | None = None
    likelihood: Likelihood | None = None
    runs: Runs | None = None

    def __post_init__(self):
        for name in ("coefficients", "fixed", "efficiency", "site", "apparatus", "settings",
                     "software", "nuisance", "upper_limits", "conventions"):
            value = getattr(self, name)
            if value is not None:
                object.__setattr__(self, name, freeze(value))
        object.__setattr__(self, "warnings", tuple(self.warnings))
        object.__setattr__(self, "notes", tuple(self.notes))

    # ------------------------------------------------------------------ JSON

    def to_dict(self) -> dict:
        """The result file's JSON (plain types; non-finite numbers as null).

        Parts that are None are left out, except ``one_stage``, written ``{}`` when it was not
        run.
        """
        out = {"fringe_format": FORMAT, "fringe_format_version": FORMAT_VERSION}
        for f in fields(self):
            value = getattr(self, f.name)
            if f.name == "one_stage" and value is None:
                value = {}
            if value is not None:
                out[f.name] = value
        return plain(out)

    @classmethod
    def from_dict(cls, d, source="fit result") -> FitResult:
        """Check every field of a result file's JSON and build the result.

        Parameters
        ----------
        d : object
            The parsed JSON (format "fit", version 1, 2 or 3).
        source : str or path
            Named first in every error (the file's path, when read from one).

        Raises
        ------
        InputFileError
            One line "SOURCE: FIELD: EXPECTED" for the first field that is missing, unknown
            or of the wrong kind. The covariance is reordered to the order of
            ``coefficients``.
        """
        f = Fields(source, d)
        check_depth(d, source)
        fmt, version = d.get("fringe_format"), d.get("fringe_format_version")
        if fmt != FORMAT:
            raise f.error("fringe_format", "'fit' (a result of fringe fit)", fmt)
        if isinstance(version, bool) or version not in READABLE_VERSIONS:
            raise f.error("fringe_format_version", ", ".join(map(str, READABLE_VERSIONS[:-1]))
                          + f" or {READABLE_VERSIONS[-1]}", version)
        f.unknown(("fringe_format", "fringe_format_version")
                  + tuple(x.name for x in fields(cls)))
        coefficients = read_estimates(f, "coefficients", nonempty=True)
        w = f.elements("warnings", required=False)
        amplitudes = d.get("amplitudes_file")
        if amplitudes is not None and not isinstance(amplitudes, str):
            raise f.error("amplitudes_file", "a file name relative to the JSON file",
                          amplitudes)
        if amplitudes:
            f.check_string("amplitudes_file", amplitudes)
        digest = d.get("amplitudes_sha256", "")
        if not (isinstance(digest, str) and (digest == "" or _SHA256.fullmatch(digest))):
            raise f.error("amplitudes_sha256", "64 lowercase hexadecimal digits (the SHA-256 "
                          "of amplitudes_file)", digest)
        return cls(
            theory=f.string("theory"), units=f.string("units"), coefficients=coefficients,
            fixed=_numbers(f, "fixed") or {},
            covariance=Covariance.read(f, "covariance", tuple(coefficients), required=False,
                                       sigmas={n: e.sigma for n, e in coefficients.items()}),
            harmonics=Harmonics.read(f, "harmonics"),
            warnings=() if w is None else tuple(FitWarning.read(w, k, version)
                                                for k in w.data),
            efficiency=_numbers(f, "efficiency", null=True),
            statistics=Statistics.read(f, "statistics"), stage1=Stage1.read(f, "stage1"),
            site=_site(f), apparatus=_apparatus(f),
            epoch_utc=f.string("epoch_utc", required=False),
            span_s=f.number("span_s", required=False, minimum=0.0),
            settings=_settings(f), input=FitInput.read(f, "input"),
            software=_strings(f, "software"),
            created_utc=f.string("created_utc", required=False),
            amplitudes_file=amplitudes or "",
            amplitudes_sha256=digest,
            nuisance=read_estimates(f, "nuisance", required=False, null=True) or {},
            notes=f.strings("notes", required=False) or (),
            upper_limits=_numbers(f, "upper_limits", null=True) or {},
            derived=Derived.read(f, "derived"),
            one_stage=OneStage.read(f, "one_stage"),
            conventions=_strings(f, "conventions"),
            calibration=SignalCalibration.read(f, "calibration"),
            motion=Motion.read(f, "motion"), sessions=Sessions.read(f, "sessions"),
            systematics=Systematics.read(f, "systematics"),
            blinding=Blinding.read(f, "blinding"),
            likelihood=Likelihood.read(f, "likelihood"), runs=Runs.read(f, "runs"))

    @classmethod
    def read(cls, path) -> FitResult:
        """The same as :func:`read_fit_result`."""
        return read_fit_result(path)

    # ------------------------------------------------------------------ views

    def correlation(self) -> np.ndarray:
        """Correlation matrix of the free coefficients (order of ``covariance.names``)."""
        m = np.array(self.covariance.matrix, float)
        s = np.sqrt(np.diag(m))
        return m / np.outer(s, s)

    def summary(self) -> str:
        """Text for a person.

        The input, the turns, the motion, the uncertainty mode, a table of the coefficients
        (fixed and nuisances too), the per-session amplitudes when they are the result, limits
        and derived speeds, the cross-check, the calibration, warnings and notes.
        """
        st, nan = self.statistics, float("nan")
        lines = [*([("*** " if self.blinding.blinded else "") + self.blinding.sentence()]
                   if self.blinding is not None else []),
                 *(joint_header_lines(self.runs, self.theory) if self.runs is not None
                   else self._run_header_lines()),
                 f"uncertainty: {st.uncertainty if st else None} (reduced chi2 "
                 f"{st.chi2_reduced if st else nan:.3f}, dof {st.dof if st else None})", "",
                 f"{'coefficient':<12}{'value':>13}{'sigma':>12}{'efficiency':>12}"]
        eff = self.efficiency or {}
        for name, v in self.coefficients.items():
            e = eff.get(name)
            mark = "-" if e is None else f"{e:.3f}" + ("*" if e > 1.0 else "")
            lines.append(f"{name:<12}{v.value:>13.4g}{v.sigma:>12.3g}{mark:>12}")
        for name, v in self.fixed.items():
            lines.append(f"{name:<12}{v:>13.4g}{'fixed':>12}")
        for name, v in self.nuisance.items():
            lines.append(f"{name:<12}{v.value:>13.4g}{v.sigma:>12.3g}{'nuisance':>12}")
        if eff:
            lines.append(EFFICIENCY_DEFINITION)
        for k, v in self.upper_limits.items():
            lines.append(f"95 % upper limit {k}: {v:.4g}")
        lines += _derived_lines(self.derived)
        if self.one_stage is not None:
            lines.append("one-stage cross-check: " + ", ".join(
                f"{n} {v.value:.3g}±{v.sigma:.2g}"
                for n, v in self.one_stage.coefficients.items()))
        if self.sessions is not None and self.harmonics is None:
            lines += session_lines(self.sessions)
        if self.calibration is not None:      # its sentences are among the notes
            for name, v in self.calibration.scale_sigma.items():
                lines.append(f"{name:<12}{'':>13}{v:>12.3g}{'scale':>12}")
        if self.systematics is not None:
            lines += _budget_lines(self.systematics)
        if self.runs is not None:
            lines += runs_table_lines(self.runs)
        caution = self.efficiency_caution()
        for w in self.warnings:
            lines.append(f"WARNING: {w.sentence}")
        for n in self.notes + ((caution,) if caution else ()):
            lines.append(f"note: {n}")
        return "\n".join(lines)

    def _run_header_lines(self) -> list[str]:
        """The summary's first lines for a fit of one run file: input, span, turns, motion."""
        s1, nan = self.stage1, float("nan")
        path = self.input.path if self.input else "?"
        span = f"{self.span_s / 86400:.2f} d" if self.span_s is not None else "? d"
        return [f"fit of {path} — theory {self.theory}, {span}, units {self.units}",
                f"turns: {s1.n_accepted if s1 else None} accepted of "
                f"{s1.n_blocks if s1 else None} ({s1.n_rejected_glitch if s1 else None} "
                f"glitch, {s1.n_rejected_partial if s1 else None} partial); turn period "
                f"{s1.turn_period_s if s1 else nan:.4g} s",
                *([f"motion: {self.motion.describe()}"] if self.motion else [])]

    def efficiency_caution(self) -> str | None:
        """A note on efficiencies above 1 (marked ``*`` in :meth:`summary`), or None.

        An efficiency above 1 means a reported sigma below this record's white-noise
        Cramer-Rao sigma, which no unbiased estimate can beat when the white level is right:
        the sigma itself is uncertain (bootstrap over few blocks) or the white level, the
        median per-turn residual RMS, overstates the noise the 2 theta amplitudes see.
        """
        high = {n: e for n, e in (self.efficiency or {}).items() if e > 1.0}
        if not high:
            return None
        names = ", ".join(f"{n} {e:.3f}" for n, e in high.items())
        st = self.statistics
        if st is not None and st.uncertainty == "bootstrap":
            days = float((self.settings or {}).get("fit", {}).get("bootstrap_days") or 0)
            n = int(self.span_s / 86400.0 / days) if days > 0 and self.span_s else None
            why = (f"the bootstrap sigma from {'about ' + str(n) if n else 'few'} blocks is "
                   "itself uncertain (by roughly 1/sqrt(2 x blocks))")
        else:
            why = ("the white level (median per-turn residual RMS) overstates the noise of the "
                   "2 theta amplitudes, or the sigma is underestimated")
        return (f"efficiency above 1 ({names}): the reported sigma is below the white-noise "
                f"limit of this record, which no estimate beats; {why}. Read it as a sigma "
                "to check, not as better than optimal")

    def __repr__(self) -> str:
        turns = (f", turns={self.stage1.n_accepted}/{self.stage1.n_blocks} accepted"
                 if self.stage1 else "")
        span = f", span={self.span_s / 86400:.3g} d" if self.span_s is not None else ""
        return (f"FitResult(theory={self.theory!r}, units={self.units!r}, "
                f"free={list(self.coefficients)}{span}{turns}, "
                f"warnings={[w.code for w in self.warnings]})")


def _budget_lines(s: Systematics) -> list[str]:
    """Summary lines of the systematic budget: statistical, systematic and total sigma."""
    lines = [f"{'budget':<12}{'statistical':>13}{'systematic':>12}{'total':>12}"]
    for name, c in s.coefficients.items():
        syst = (max(c["total"] ** 2 - c["statistical"] ** 2, 0.0)) ** 0.5
        lines.append(f"{name:<12}{c['statistical']:>13.3g}{syst:>12.3g}{c['total']:>12.3g}")
    if s.withheld:
        lines.append(f"(withheld while blinded: {', '.join(s.withheld)})")
    return lines


def _derived_lines(d: Derived | None) -> list[str]:
    """Summary lines of the derived speeds and amplitudes (none when absent)."""
    if d is None:
        return []
    out = []
    if d.lab_speed_kms is not None:
        s = d.lab_speed_kms
        out.append(f"lab speed through the medium (largest over the turns): "
                   f"{s['best']:.4g} km/s, 95 % upper limit {s['upper_95']:.4g} km/s; "
                   f"horizontal {s['horizontal_best']:.4g} km/s, "
                   f"95 % upper limit {s['horizontal_upper_95']:.4g} km/s")
    if d.sun_speed_kms is not None:
        out.append(f"Sun's speed through the medium: {d.sun_speed_kms['best']:.4g} km/s, "
                   f"95 % upper limit {d.sun_speed_kms['upper_95']:.4g} km/s")
    if d.two_theta_amplitude is not None:
        a = d.two_theta_amplitude
        out.append(f"2theta amplitude (RMS over the turns): fitted {a['fitted_rms']:.4g} "
                   f"{a['units']}, expected from the orbital velocity alone "
                   f"{a['orbital_rms']:.4g} {a['units']}; the data contain "
                   f"{a['orbital_fraction']:.3g} ± {a['orbital_fraction_sigma']:.2g} of it")
    return out


def session_lines(sessions: Sessions) -> list[str]:
    """The per-session 2 theta amplitudes as text lines (``fringe inspect``, the summary)."""
    from fringe.text_table import number, text_table

    u = sessions.units
    lines = [f"per-session 2 theta amplitudes ({u}; 1 sigma, Student t; "
             f"{sessions.n_sidereal_phases} distinct sidereal phase(s)):"]
    rows = list(sessions.sessions)
    shown = rows if len(rows) <= 40 else rows[:20] + [None] + rows[-20:]
    cells = [f"... ({len(rows) - 40} sessions not shown)" if x is None else
             [f"{x.t_start_s:.1f}", str(x.n_turns), f"{x.sidereal_phase_deg:.1f}",
              number(x.C.value, ".4g"), number(x.C.sigma, ".3g"), number(x.B.value, ".4g"),
              number(x.B.sigma, ".3g"), str(x.dof)] for x in shown]
    lines += text_table(["start [s]", "turns", "phi [deg]", "C", "sigma C", "B", "sigma B",
                         "dof"], cells, left=0)
    if sessions.dof > 0:
        lines.append(f"  agreement of the sessions: chi2 {sessions.chi2:.3g} for {sessions.dof} "
                     f"dof (p = {sessions.p_value:.3g})")
    return lines


# ---------------------------------------------------------------------- reading parts

def _numbers(f: Fields, key: str, *, null: bool = False) -> dict | None:
    """An object {NAME: number} (None when absent)."""
    s = f.sub(key, required=False)
    return None if s is None else {k: s.number(k, null=null) for k, _ in s.items()}


def _strings(f: Fields, key: str) -> dict | None:
    """An object {NAME: string} (None when absent)."""
    s = f.sub(key, required=False)
    return None if s is None else {k: s.string(k, empty=True) for k, _ in s.items()}


def _site(f: Fields) -> Mapping | None:
    s = f.sub("site", required=False)
    if s is None:
        return None
    s.string("name", required=False, empty=True)
    for k in ("latitude_deg", "longitude_deg", "height_m"):
        s.number(k, required=False)
    return f.record("site")


def _apparatus(f: Fields) -> Mapping | None:
    s = f.sub("apparatus", required=False)
    if s is None:
        return None
    s.string("kind", required=False)
    return f.record("apparatus")


def _settings(f: Fields) -> Mapping | None:
    s = f.sub("settings", required=False)
    if s is None:
        return None
    s.sub("fit", required=False)
    s.string("engine", required=False)
    s.number("dut1_s", required=False)
    return f.record("settings")


def read_fit_result(path) -> FitResult:
    """Read and check a fit result file (JSON, format "fit", version 1, 2 or 3).

    Raises :class:`~fringe.errors.InputFileError` with one line "PATH: FIELD: EXPECTED" for a
    missing or unreadable file, invalid JSON or any field :meth:`FitResult.from_dict`
    refuses. The file is only read.
    """
    path = Path(path)
    if not path.exists():
        raise missing_input(path, "a fit result (JSON) file")
    if not path.is_file():
        raise InputFileError(path, "file", "expected a fit result (JSON) file, got a directory "
                                           "or a special file")
    try:
        d = json.loads(path.read_text(encoding="utf-8"))
    except UnicodeDecodeError as exc:
        raise not_utf8(path, exc) from None
    except OSError as exc:
        raise InputFileError(path, "file", f"expected a readable JSON file "
                                           f"({exc.strerror or 'cannot be read'})") from None
    except json.JSONDecodeError as exc:
        raise InputFileError(path, "JSON", f"expected valid JSON ({exc.msg} at line "
                                           f"{exc.lineno})") from None
    except RecursionError:
        raise InputFileError(path, "JSON", f"expected objects and lists nested at most "
                                           f"{MAX_DEPTH} deep") from None
    return FitResult.from_dict(d, source=path)
