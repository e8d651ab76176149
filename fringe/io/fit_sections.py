"""The parts of a fit result (:class:`~fringe.io.fit_result.FitResult`).

Each is a frozen record with ``to_dict()`` (the JSON of the result file, ``docs/fit.md``) and a
validating ``read()``.

* :class:`Estimate`: a value with its 1-sigma uncertainty (coefficients, nuisances);
* :class:`Covariance`: names and their covariance matrix (a tuple of rows);
* :class:`Harmonics`: the stage-2 C10 harmonics C0 ... Bc2;
* :class:`Stage1`: the per-turn demodulation's counts, turn period and noise level;
* :class:`Statistics`: reduced chi^2, degrees of freedom, the uncertainty mode;
* :class:`FitInput`: the run file fitted (path, SHA-256, samples);
* :class:`OneStage`: the one-stage cross-check;
* :class:`FitWarning`: a warning the fit raised, as a named record;
* :class:`Derived`: quantities derived from the coefficients (the medium fit's speeds);
* :class:`Motion`: the turntable motion stage 1 detected, and its block and exclusion rules;
* :class:`Sessions`: the per-session 2 theta amplitudes and their agreement.

``read(fields, key)`` takes a :class:`~fringe.io.records.Fields` view of the enclosing object
and raises :class:`~fringe.errors.InputFileError` naming the file and the dotted field. Numbers
are kept as the file wrote them (an int stays an int); JSON null, where allowed, is NaN.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from fringe.io.records import Fields, FrozenMap, freeze

__all__ = ["Covariance", "Derived", "Estimate", "FitInput", "FitWarning", "Harmonics",
           "Motion", "OneStage", "Session", "Sessions", "Stage1", "Statistics",
           "check_covariance", "read_estimates"]


def _set(obj, name: str, value) -> None:
    object.__setattr__(obj, name, value)


def _omit_none(d: dict) -> dict:
    return {k: v for k, v in d.items() if v is not None}


#: Tolerances of :func:`check_covariance` (relative; a matrix written by ``fringe fit`` meets
#: them to ~1e-15, one rounded by hand to 7 significant digits still does).
COVARIANCE_RTOL = 1e-6
#: Largest relative difference of sqrt(diagonal) from the stated sigma.
SIGMA_RTOL = 1e-3


def _covariance_problem(m: np.ndarray, names, sigmas) -> str | None:
    """What is wrong with the covariance ``m`` (rows of ``names``), or None."""
    d = np.diag(m)
    for i, n in enumerate(names):
        if d[i] < 0:
            return f"a non-negative variance of {n}, got {d[i]!r}"
        s = sigmas.get(n) if sigmas is not None else None
        if s is not None and math.isfinite(s):
            r = math.sqrt(d[i])
            if abs(r - s) > SIGMA_RTOL * max(r, s):
                return (f"a variance of {n} equal to its sigma squared ({s!r}**2), got "
                        f"{d[i]!r}")
    scale = np.sqrt(np.outer(d, d))
    asym = np.abs(m - m.T) > COVARIANCE_RTOL * scale
    if asym.any():
        i, j = np.argwhere(asym)[0]
        return (f"a symmetric matrix, got {m[i, j]!r} for ({names[i]}, {names[j]}) and "
                f"{m[j, i]!r} for ({names[j]}, {names[i]})")
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = np.where(scale > 0, m / np.where(scale > 0, scale, 1.0), 0.0)
    bad = (np.abs(rho) > 1 + COVARIANCE_RTOL) | ((scale == 0) & (m != 0))
    if bad.any():
        i, j = np.argwhere(bad)[0]
        return (f"correlations within [-1, 1], got {m[i, j]!r} for ({names[i]}, {names[j]}) "
                f"with variances {d[i]!r} and {d[j]!r}")
    keep = d > 0
    if keep.sum() > 2:
        r = rho[np.ix_(keep, keep)]
        low = float(np.linalg.eigvalsh((r + r.T) / 2)[0])
        if low < -COVARIANCE_RTOL * len(r):
            return (f"a positive semi-definite matrix, got a correlation matrix with "
                    f"eigenvalue {low:.3g}")
    return None


def check_covariance(f: Fields, key: str, matrix, names, sigmas=None) -> None:
    """Refuse a covariance matrix that no fit can give.

    Parameters
    ----------
    f : Fields
        The enclosing object (named in the error).
    key : str
        The field of the matrix.
    matrix : sequence of sequences of float
        Rows in the order of ``names`` (finite numbers, already checked).
    names : sequence of str
        The quantities of the rows.
    sigmas : mapping of str to float, optional
        Stated 1-sigma uncertainties; sqrt of each diagonal element must match its sigma to
        :data:`SIGMA_RTOL` (NaN sigmas are not compared).

    The matrix must have non-negative variances, be symmetric and positive semi-definite to
    :data:`COVARIANCE_RTOL` (relative), with correlations within [-1, 1].
    """
    m = np.array(matrix, dtype=float).reshape(len(names), len(names))
    bad = _covariance_problem(m, tuple(names), sigmas)
    if bad is not None:
        raise f.error(key, bad)


@dataclass(frozen=True)
class Estimate:
    """A value and its 1-sigma uncertainty, in the unit of the quantity."""

    value: float
    sigma: float

    @property
    def finite(self) -> bool:
        """Both numbers finite (a nuisance may have been written as null)."""
        return math.isfinite(self.value) and math.isfinite(self.sigma)

    def to_dict(self) -> dict:
        """The record as plain JSON-ready data (the inverse of :meth:`read`)."""
        return {"value": self.value, "sigma": self.sigma}

    @classmethod
    def read(cls, f: Fields, key: str, *, null: bool = False) -> Estimate:
        """Read and check the record at ``key`` of ``f``; InputFileError names a bad field."""
        e = f.sub(key)
        e.unknown(("value", "sigma"))
        return cls(e.number("value", null=null),
                   e.number("sigma", null=null, minimum=0.0))


def read_estimates(f: Fields, key: str, *, required: bool = True, nonempty: bool = False,
                   null: bool = False) -> FrozenMap | None:
    """An object {NAME: {value, sigma}} at ``key`` as a FrozenMap of :class:`Estimate`."""
    e = f.sub(key, required=required)
    if e is None:
        return None
    if nonempty and not e.data:
        raise f.error(key, "a non-empty object {NAME: {value, sigma}}", e.data)
    return FrozenMap((name, Estimate.read(e, name, null=null)) for name, _ in e.items())


@dataclass(frozen=True)
class Covariance:
    """Covariance of named quantities.

    ``matrix[i][j]`` is that of ``names[i]`` and ``names[j]`` (a tuple of rows; :meth:`array`
    gives a numpy copy).
    """

    names: tuple[str, ...]
    matrix: tuple[tuple[float, ...], ...]

    def __post_init__(self):
        m = self.matrix.tolist() if isinstance(self.matrix, np.ndarray) else self.matrix
        _set(self, "names", tuple(self.names))
        _set(self, "matrix", tuple(tuple(row) for row in m))

    def array(self) -> np.ndarray:
        """The matrix as a new float array, (n, n)."""
        return np.array(self.matrix, dtype=float)

    @classmethod
    def diagonal(cls, estimates: Mapping[str, Estimate]) -> Covariance:
        """Zero correlations: sigma^2 on the diagonal."""
        names = tuple(estimates)
        return cls(names, tuple(tuple(estimates[a].sigma ** 2 if a == b else 0.0
                                      for b in names) for a in names))

    def to_dict(self) -> dict:
        """The record as plain JSON-ready data (the inverse of :meth:`read`)."""
        return {"names": list(self.names), "matrix": [list(r) for r in self.matrix]}

    @classmethod
    def read(cls, f: Fields, key: str, order: tuple[str, ...], *, required: bool = True,
             sigmas: Mapping[str, float] | None = None) -> Covariance | None:
        """Read, check (:func:`check_covariance`) and reorder to ``order``.

        The names must be those of ``order``; ``sigmas`` (name to 1 sigma) are compared with
        the diagonal.
        """
        c = f.sub(key, required=required)
        if c is None:
            return None
        c.unknown(("names", "matrix"))
        names = c.strings("names")
        if sorted(names) != sorted(order) or len(set(names)) != len(names):
            raise c.error("names", f"the names of the free coefficients {list(order)}",
                          list(names))
        m = c.matrix("matrix", len(names))
        check_covariance(c, "matrix", m, names, sigmas)
        idx = [names.index(n) for n in order]
        return cls(order, tuple(tuple(m[i][j] for j in idx) for i in idx))


@dataclass(frozen=True)
class Harmonics:
    """The stage-2 C10 harmonics (C0, Cs1, ..., Bc2) of the apparatus's observable, in its units.

    ``observable`` says what was fitted (e.g. the fringe count of a Michelson); with
    ``two_path_factor`` = (Re f, Im f), h_observable = f h_two_path for each pair h = C - i B
    (:meth:`fringe.experiment.apparatus.Apparatus.two_path_factor`, convention C9), so
    C_S = Re(h/f) and B_S = -Im(h/f) give the two-path harmonics. ``covariance`` (rows in the
    order of ``names``), ``chi2_reduced``, ``units``, ``observable`` and ``two_path_factor`` are
    None when a file does not state them.
    """

    names: tuple[str, ...]
    value: tuple[float, ...]
    sigma: tuple[float, ...]
    covariance: tuple[tuple[float, ...], ...] | None = None
    chi2_reduced: float | None = None
    units: str | None = None
    observable: str | None = None
    two_path_factor: tuple[float, float] | None = None

    def __post_init__(self):
        for name in ("names", "value", "sigma"):
            _set(self, name, tuple(getattr(self, name)))
        if self.covariance is not None:
            _set(self, "covariance", tuple(tuple(r) for r in self.covariance))
        if self.two_path_factor is not None:
            _set(self, "two_path_factor", tuple(float(x) for x in self.two_path_factor))

    def to_dict(self) -> dict:
        """The ``harmonics`` object of the result file (None parts left out)."""
        return _omit_none({"names": list(self.names), "value": list(self.value),
                           "sigma": list(self.sigma),
                           "covariance": None if self.covariance is None
                           else [list(r) for r in self.covariance],
                           "chi2_reduced": self.chi2_reduced, "units": self.units,
                           "observable": self.observable,
                           "two_path_factor": None if self.two_path_factor is None
                           else list(self.two_path_factor)})

    @classmethod
    def read(cls, f: Fields, key: str) -> Harmonics | None:
        """Read and check the record at ``key`` of ``f``; InputFileError names a bad field."""
        h = f.sub(key, required=False)
        if h is None:
            return None
        h.unknown(("names", "value", "sigma", "covariance", "chi2_reduced", "units",
                   "observable", "two_path_factor"))
        names = h.strings("names")
        if len(set(names)) != len(names):
            raise h.error("names", "distinct names", list(names))
        sigma = h.numbers("sigma", length=len(names), minimum=0.0)
        cov = h.matrix("covariance", len(names), required=False)
        if cov is not None:
            check_covariance(h, "covariance", cov, names, dict(zip(names, sigma)))
        return cls(names, h.numbers("value", length=len(names)), sigma, cov,
                   h.number("chi2_reduced", required=False, null=True),
                   h.string("units", required=False), h.string("observable", required=False),
                   h.numbers("two_path_factor", length=2, required=False))


#: Fields of ``stage1`` other than the per-status counts.
_STAGE1_FIELDS = ("n_blocks", "turn_period_s", "residual_rms", "white_noise_per_sample",
                  "settings", "glitch_rule")


@dataclass(frozen=True)
class Stage1:
    """The per-turn demodulation (stage 1) as the fit reports it.

    Attributes
    ----------
    n_blocks : int
        Turns (blocks) cut from the record.
    counts : mapping of str to int
        Turns per outcome, ``n_accepted`` and ``n_rejected_<reason>`` (partial, glitch), in the
        order written.
    turn_period_s : float
        Median turn period, s.
    residual_rms, white_noise_per_sample : float
        Median residual RMS of the accepted turns (the white per-sample level), signal units.
    settings : mapping or None
        The demodulation settings (``DemodSettings.to_dict()``).
    glitch_rule : str or None
        The glitch rejection rule in words.
    """

    n_blocks: int
    counts: Mapping[str, int]
    turn_period_s: float
    residual_rms: float
    white_noise_per_sample: float
    settings: Mapping | None = None
    glitch_rule: str | None = None

    def __post_init__(self):
        _set(self, "counts", FrozenMap(self.counts))
        if self.settings is not None:
            _set(self, "settings", freeze(self.settings))

    @property
    def n_accepted(self) -> int:
        """Number of accepted turns."""
        return self.counts["n_accepted"]

    @property
    def n_rejected_partial(self) -> int | None:
        """Turns rejected as partial (None when the file does not state it)."""
        return self.counts.get("n_rejected_partial")

    @property
    def n_rejected_glitch(self) -> int | None:
        """Turns rejected for a glitch (None when the file does not state it)."""
        return self.counts.get("n_rejected_glitch")

    def to_dict(self) -> dict:
        """The record as plain JSON-ready data (the inverse of :meth:`read`)."""
        return _omit_none({"n_blocks": self.n_blocks, **self.counts,
                           "turn_period_s": self.turn_period_s,
                           "residual_rms": self.residual_rms,
                           "white_noise_per_sample": self.white_noise_per_sample,
                           "settings": self.settings, "glitch_rule": self.glitch_rule})

    @classmethod
    def read(cls, f: Fields, key: str) -> Stage1 | None:
        """Read and check the record at ``key`` of ``f``; InputFileError names a bad field."""
        s = f.sub(key, required=False)
        if s is None:
            return None
        counts = {}
        for k, _ in s.items():
            if k == "n_accepted" or k.startswith("n_rejected_"):
                counts[k] = s.integer(k)
        s.unknown(tuple(counts) + _STAGE1_FIELDS)
        n = s.integer("n_blocks")
        s.integer("n_accepted")                     # required
        if sum(counts.values()) > n:
            raise s.error("n_blocks", f"at least the sum of the counts ({sum(counts.values())})",
                          n)
        return cls(n, counts, s.number("turn_period_s", positive=True),
                   s.number("residual_rms", null=True, minimum=0.0),
                   s.number("white_noise_per_sample", null=True, minimum=0.0),
                   s.record("settings", required=False),
                   s.string("glitch_rule", required=False))


@dataclass(frozen=True)
class Statistics:
    """Goodness of fit of stage 3.

    Reduced chi^2 (NaN: undefined), degrees of freedom, the uncertainty mode, the accepted
    turns fitted (None when a file does not state it).
    """

    chi2_reduced: float
    dof: int
    uncertainty: str
    n_turns_used: int | None = None

    def to_dict(self) -> dict:
        """The record as plain JSON-ready data (the inverse of :meth:`read`)."""
        return _omit_none({"chi2_reduced": self.chi2_reduced, "dof": self.dof,
                           "uncertainty": self.uncertainty, "n_turns_used": self.n_turns_used})

    @classmethod
    def read(cls, f: Fields, key: str) -> Statistics | None:
        """Read and check the record at ``key`` of ``f``; InputFileError names a bad field."""
        s = f.sub(key, required=False)
        if s is None:
            return None
        s.unknown(("chi2_reduced", "dof", "uncertainty", "n_turns_used"))
        return cls(s.number("chi2_reduced", null=True), s.integer("dof"),
                   s.string("uncertainty"), s.integer("n_turns_used", required=False))


@dataclass(frozen=True)
class FitInput:
    """The run file fitted.

    Its path as given, SHA-256 (hex) and number of samples (None when a file does not state
    it).
    """

    path: str
    sha256: str
    n_samples: int | None = None

    def to_dict(self) -> dict:
        """The record as plain JSON-ready data (the inverse of :meth:`read`)."""
        return _omit_none({"path": self.path, "sha256": self.sha256,
                           "n_samples": self.n_samples})

    @classmethod
    def read(cls, f: Fields, key: str) -> FitInput | None:
        """Read and check the record at ``key`` of ``f``; InputFileError names a bad field."""
        s = f.sub(key, required=False)
        if s is None:
            return None
        s.unknown(("path", "sha256", "n_samples"))
        return cls(s.string("path"), s.string("sha256"), s.integer("n_samples", required=False))


@dataclass(frozen=True)
class OneStage:
    """The one-stage cross-check (:func:`fringe.fit.onestage.one_stage_fit`).

    Coefficients and nuisances, the coefficients' covariance, reduced chi^2 against the
    stage-1 white level (NaN: undefined), the unit-weight noise RMS (signal units), dof,
    samples and turns used.
    """

    coefficients: Mapping[str, Estimate]
    nuisance: Mapping[str, Estimate]
    covariance: Covariance
    chi2_reduced: float
    noise_rms: float
    dof: int
    n_samples: int
    n_turns_used: int

    def __post_init__(self):
        _set(self, "coefficients", FrozenMap(self.coefficients))
        _set(self, "nuisance", FrozenMap(self.nuisance))

    @classmethod
    def from_fit(cls, d: Mapping) -> OneStage:
        """From the dict :func:`~fringe.fit.onestage.one_stage_fit` returns (no checks)."""
        def est(m):
            return {n: Estimate(e["value"], e["sigma"]) for n, e in m.items()}
        return cls(est(d["coefficients"]), est(d["nuisance"]), Covariance(**d["covariance"]),
                   d["chi2_reduced"], d["noise_rms"], d["dof"], d["n_samples"],
                   d["n_turns_used"])

    def to_dict(self) -> dict:
        """The record as plain JSON-ready data (the inverse of :meth:`read`)."""
        return {"coefficients": {n: e.to_dict() for n, e in self.coefficients.items()},
                "nuisance": {n: e.to_dict() for n, e in self.nuisance.items()},
                "covariance": self.covariance.to_dict(), "chi2_reduced": self.chi2_reduced,
                "noise_rms": self.noise_rms, "dof": self.dof, "n_samples": self.n_samples,
                "n_turns_used": self.n_turns_used}

    @classmethod
    def read(cls, f: Fields, key: str) -> OneStage | None:
        """None when absent or ``{}`` (the fit ran without the cross-check)."""
        s = f.sub(key, required=False)
        if s is None or not s.data:
            return None
        s.unknown(("coefficients", "nuisance", "covariance", "chi2_reduced", "noise_rms",
                   "dof", "n_samples", "n_turns_used"))
        coefs = read_estimates(s, "coefficients", nonempty=True, null=True)
        return cls(coefs, read_estimates(s, "nuisance", null=True),
                   Covariance.read(s, "covariance", tuple(coefs),
                                   sigmas={n: e.sigma for n, e in coefs.items()}),
                   s.number("chi2_reduced", null=True),
                   s.number("noise_rms", null=True, minimum=0.0), s.integer("dof"),
                   s.integer("n_samples"), s.integer("n_turns_used"))


@dataclass(frozen=True)
class FitWarning:
    """A warning the fit raised.

    A short stable ``code`` (e.g. ``"b0-lab-fixed"``), the ``sentence`` a person reads, and
    the numbers of the sentence unrounded (``values``: name to number, unit as in the
    sentence). ``str()`` gives the sentence. ``coefficients`` names the free coefficients
    whose estimate the warning puts in doubt (empty: the warning concerns the record as a
    whole); a report's headline bound leaves those out.

    Codes: ``b0-lab-fixed`` (lab_B0 inconsistent with zero, or B0 with the B0 the fitted
    coefficients predict; names the coefficients C0 alone carries, when free),
    ``c0-lab-fixed`` (likewise lab_C0 or C0, only while ke_ZZ is not free),
    ``near-degenerate`` (correlations above 0.95; names the coefficients of the pairs),
    ``harmonics-chi2`` (the reduced chi^2 of the stage-2 harmonic fit far from one),
    ``simulated-noise-free`` (a simulated record without noise), ``utc-before-1960``,
    ``leap-table-range``, ``ephemeris-range`` (the record's times outside a reliable span,
    :func:`fringe.frames.time_span_cautions`), ``sidereal-phases-few`` (the accepted turns sit
    at fewer distinct sidereal phases than the sidereal stage needs: stage 2 skipped, the
    per-session amplitudes are the result), ``small-sample`` (1 sigma from few degrees of
    freedom, widened by Student t); ``unnamed`` for a plain-text warning of a version-1 result
    file.
    """

    code: str
    sentence: str
    values: Mapping[str, float] = field(default_factory=FrozenMap)
    coefficients: tuple[str, ...] = ()

    def __post_init__(self):
        _set(self, "values", FrozenMap(self.values))
        _set(self, "coefficients", tuple(self.coefficients))

    def __str__(self) -> str:
        return self.sentence

    def to_dict(self) -> dict:
        """The JSON object (``coefficients`` only when the warning names some)."""
        out = {"code": self.code, "message": self.sentence, "values": dict(self.values)}
        if self.coefficients:
            out["coefficients"] = list(self.coefficients)
        return out

    @classmethod
    def read(cls, f: Fields, key: str, version: int) -> FitWarning:
        """The entry ``key`` of the warnings (a string in version 1, an object in 2)."""
        if version == 1:
            if not isinstance(f.data[key], str):
                raise f.error(key, "a string (version-1 warning)", f.data[key])
            return cls("unnamed", f.check_string(key, f.data[key]))
        w = f.sub(key)
        w.unknown(("code", "message", "values", "coefficients"))
        values = w.sub("values")
        return cls(w.string("code"), w.string("message"),
                   {k: values.number(k, null=True) for k, _ in values.items()},
                   w.strings("coefficients", required=False) or ())


#: The parts of :class:`Derived` and the numbers each holds (all required when the part is).
DERIVED_PARTS = {
    "sun_speed_kms": ("best", "upper_95"),
    "lab_speed_kms": ("best", "upper_95", "horizontal_best", "horizontal_upper_95"),
    "two_theta_amplitude": ("fitted_rms", "fitted_max", "orbital_rms", "orbital_max",
                            "orbital_fraction", "orbital_fraction_sigma"),
}


@dataclass(frozen=True)
class Derived:
    """Quantities derived from the fitted coefficients (written by the medium fit).

    Each part is None when absent, else a read-only mapping of the numbers of
    :data:`DERIVED_PARTS` (NaN where written as null):

    * ``sun_speed_kms``: |v_sun|, the Sun's speed through the medium, km/s: ``best`` and the
      one-sided 95 % likelihood-ratio ``upper_95``;
    * ``lab_speed_kms``: the laboratory's speed through the medium, km/s, as the largest over
      the accepted turns' mean times (``best``, ``upper_95``) and the same for its horizontal
      part (``horizontal_best``, ``horizontal_upper_95``);
    * ``two_theta_amplitude``: RMS and largest 2 theta amplitude sqrt(C^2 + B^2) over the turns,
      of the fitted signal (``fitted_*``) and of a medium at rest with the Sun (``orbital_rms``,
      ``orbital_max``: orbital and rotation velocity alone), with ``units`` the observable's;
      ``orbital_fraction`` and its 1-sigma ``orbital_fraction_sigma``: the least-squares factor
      of that expectation found in the per-turn data (1 for a medium at rest with the Sun).

    The definitions are in docs/fit.md and :mod:`fringe.fit.medium_limits`.
    """

    sun_speed_kms: Mapping[str, float] | None = None
    lab_speed_kms: Mapping[str, float] | None = None
    two_theta_amplitude: Mapping | None = None

    def __post_init__(self):
        for name in DERIVED_PARTS:
            if getattr(self, name) is not None:
                _set(self, name, FrozenMap(getattr(self, name)))

    def to_dict(self) -> dict:
        """The ``derived`` object of the result file (absent parts left out)."""
        return {k: dict(getattr(self, k)) for k in DERIVED_PARTS if getattr(self, k) is not None}

    @classmethod
    def read(cls, f: Fields, key: str) -> Derived | None:
        """None when absent (files written before the field existed)."""
        s = f.sub(key, required=False)
        if s is None:
            return None
        s.unknown(tuple(DERIVED_PARTS))
        parts = {}
        for name, numbers in DERIVED_PARTS.items():
            p = s.sub(name, required=False)
            if p is None:
                continue
            extra = ("units",) if name == "two_theta_amplitude" else ()
            p.unknown(numbers + extra)
            parts[name] = {k: p.number(k, null=True, minimum=None if k == "orbital_fraction"
                                       else 0.0) for k in numbers}
            if extra:
                parts[name]["units"] = p.string("units")
        return cls(**parts)


#: Fields of ``motion``: name -> True when required.
_MOTION_FIELDS = {"kind": True, "sense": True, "turn_period_s": True, "block_rule": True,
                  "excluded_samples_rule": True, "dwell_fraction": True, "sweep_deg": False,
                  "step_deg": False, "marks_per_turn": False}


@dataclass(frozen=True)
class Motion:
    """The turntable motion stage 1 found in the recorded azimuth.

    Made by :func:`fringe.demodulate.motion.detect_motion`.

    Attributes
    ----------
    kind : {"continuous", "reversing", "swinging", "stepped"}
    sense : {"ccw", "cw", "alternating"}
        Counter-clockwise or clockwise seen from above (C6), or reversing.
    turn_period_s : float
        Time per full turn of travel (rests included), s.
    block_rule : str
        What a block ("turn") is for this motion, in words.
    excluded_samples_rule : str
        Which samples the block fits leave out ("" for none), in words.
    dwell_fraction : float
        Fraction of the sample intervals with the table at rest.
    sweep_deg : float or None
        Median angle of a leg between reversals (reversing, swinging), degrees.
    step_deg, marks_per_turn : float or None
        Median step between rest positions, degrees, and 360 / step (stepped).
    """

    kind: str
    sense: str
    turn_period_s: float
    block_rule: str
    excluded_samples_rule: str
    dwell_fraction: float
    sweep_deg: float | None = None
    step_deg: float | None = None
    marks_per_turn: float | None = None

    @property
    def reverses(self) -> bool:
        """True when the sense alternates (blocks are legs between reversals)."""
        return self.sense == "alternating"

    def describe(self) -> str:
        """One line for a person: kind, sense, period and the motion's own numbers."""
        parts = [f"{self.kind} ({self.sense})", f"{self.turn_period_s:.4g} s per turn of travel"]
        if self.sweep_deg is not None:
            parts.append(f"legs of {self.sweep_deg:.4g} deg")
        if self.step_deg is not None:
            parts.append(f"steps of {self.step_deg:.4g} deg ({self.marks_per_turn:.3g} marks "
                         "per turn)")
        if self.dwell_fraction > 0:
            parts.append(f"at rest {100 * self.dwell_fraction:.3g} % of the time")
        return ", ".join(parts)

    def to_dict(self) -> dict:
        """The record in the plain JSON types of the result file."""
        return _omit_none({name: getattr(self, name) for name in _MOTION_FIELDS})

    @classmethod
    def read(cls, f: Fields, key: str) -> Motion | None:
        """Read and check the field ``key`` of ``f`` (:class:`~fringe.io.records.Fields`)."""
        m = f.sub(key, required=False)
        if m is None:
            return None
        m.unknown(tuple(_MOTION_FIELDS))
        kind = m.string("kind")
        if kind not in ("continuous", "reversing", "swinging", "stepped"):
            raise m.error("kind", "one of continuous, reversing, swinging, stepped", kind)
        sense = m.string("sense")
        if sense not in ("ccw", "cw", "alternating"):
            raise m.error("sense", "one of ccw, cw, alternating", sense)
        return cls(kind, sense, m.number("turn_period_s", positive=True),
                   m.string("block_rule"), m.string("excluded_samples_rule", empty=True),
                   m.number("dwell_fraction", minimum=0.0),
                   *(m.number(k, required=False, positive=True)
                     for k in ("sweep_deg", "step_deg", "marks_per_turn")))


_SESSION_FIELDS = ("t_start_s", "t_stop_s", "n_turns", "sidereal_phase_deg", "C", "B",
                   "correlation", "dof", "t_factor")


@dataclass(frozen=True)
class Session:
    """One session's mean 2 theta amplitudes (:mod:`fringe.demodulate.sessions`).

    Attributes
    ----------
    t_start_s, t_stop_s : float
        First and last accepted turn's sample times, s after the epoch.
    n_turns : int
        Accepted turns in the session.
    sidereal_phase_deg : float
        Sidereal angle phi (C5) at the session's mean time, degrees.
    C, B : Estimate
        Weighted mean amplitudes and their 1 sigma (Student-t widened), signal units.
    correlation : float
        Correlation of C and B.
    dof : int
        Degrees of freedom of the session's scatter (of the turn's residuals for one turn).
    t_factor : float
        Factor applied to the standard errors for 68.27 % intervals (Student t, ``dof``).
    """

    t_start_s: float
    t_stop_s: float
    n_turns: int
    sidereal_phase_deg: float
    C: Estimate
    B: Estimate
    correlation: float
    dof: int
    t_factor: float

    def to_dict(self) -> dict:
        """The record in the plain JSON types of the result file."""
        out = {k: getattr(self, k) for k in _SESSION_FIELDS}
        out["C"], out["B"] = self.C.to_dict(), self.B.to_dict()
        return out

    @classmethod
    def read(cls, f: Fields, key: str) -> Session:
        """Read and check the field ``key`` of ``f`` (:class:`~fringe.io.records.Fields`)."""
        s = f.sub(key)
        s.unknown(_SESSION_FIELDS)
        return cls(s.number("t_start_s"), s.number("t_stop_s"), s.integer("n_turns", minimum=1),
                   s.number("sidereal_phase_deg"), Estimate.read(s, "C"),
                   Estimate.read(s, "B"), s.number("correlation"), s.integer("dof"),
                   s.number("t_factor", positive=True))


@dataclass(frozen=True)
class Sessions:
    """The per-session 2 theta amplitudes and the chi^2 of their agreement.

    Attributes
    ----------
    sessions : tuple of Session
    chi2, dof : float, int
        chi^2 of the sessions' (C, B) about their weighted mean, and 2 (number of sessions - 1);
        NaN and 0 for one session.
    p_value : float
        Probability of a chi^2 at least this large (NaN for one session).
    n_sidereal_phases : int
        Distinct sidereal phases of the accepted turns (occupied sidereal hours).
    rule : str
        How the sessions and their uncertainties are formed, in words.
    units : str
    """

    sessions: tuple[Session, ...]
    chi2: float
    dof: int
    p_value: float
    n_sidereal_phases: int
    rule: str
    units: str

    def __post_init__(self):
        _set(self, "sessions", tuple(self.sessions))

    def to_dict(self) -> dict:
        """The record in the plain JSON types of the result file."""
        return {"sessions": [x.to_dict() for x in self.sessions], "chi2": self.chi2,
                "dof": self.dof, "p_value": self.p_value,
                "n_sidereal_phases": self.n_sidereal_phases, "rule": self.rule,
                "units": self.units}

    @classmethod
    def read(cls, f: Fields, key: str) -> Sessions | None:
        """Read and check the field ``key`` of ``f`` (:class:`~fringe.io.records.Fields`)."""
        s = f.sub(key, required=False)
        if s is None:
            return None
        s.unknown(("sessions", "chi2", "dof", "p_value", "n_sidereal_phases", "rule", "units"))
        rows = s.elements("sessions")
        return cls(tuple(Session.read(rows, k) for k in rows.data),
                   s.number("chi2", null=True), s.integer("dof"),
                   s.number("p_value", null=True), s.integer("n_sidereal_phases"),
                   s.string("rule"), s.string("units"))
