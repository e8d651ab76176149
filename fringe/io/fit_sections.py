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
* :class:`FitWarning`: a warning the fit raised, as a named record.

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

__all__ = ["Covariance", "Estimate", "FitInput", "FitWarning", "Harmonics", "OneStage",
           "Stage1", "Statistics", "check_covariance", "read_estimates"]


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
    """The stage-2 C10 harmonics (C0, Cs1, ..., Bc2), unit of the observable.

    ``covariance`` (rows in the order of ``names``), ``chi2_reduced`` and ``units`` are None
    when a file does not state them.
    """

    names: tuple[str, ...]
    value: tuple[float, ...]
    sigma: tuple[float, ...]
    covariance: tuple[tuple[float, ...], ...] | None = None
    chi2_reduced: float | None = None
    units: str | None = None

    def __post_init__(self):
        for name in ("names", "value", "sigma"):
            _set(self, name, tuple(getattr(self, name)))
        if self.covariance is not None:
            _set(self, "covariance", tuple(tuple(r) for r in self.covariance))

    def to_dict(self) -> dict:
        """The record as plain JSON-ready data (the inverse of :meth:`read`)."""
        return _omit_none({"names": list(self.names), "value": list(self.value),
                           "sigma": list(self.sigma),
                           "covariance": None if self.covariance is None
                           else [list(r) for r in self.covariance],
                           "chi2_reduced": self.chi2_reduced, "units": self.units})

    @classmethod
    def read(cls, f: Fields, key: str) -> Harmonics | None:
        """Read and check the record at ``key`` of ``f``; InputFileError names a bad field."""
        h = f.sub(key, required=False)
        if h is None:
            return None
        h.unknown(("names", "value", "sigma", "covariance", "chi2_reduced", "units"))
        names = h.strings("names")
        if len(set(names)) != len(names):
            raise h.error("names", "distinct names", list(names))
        sigma = h.numbers("sigma", length=len(names), minimum=0.0)
        cov = h.matrix("covariance", len(names), required=False)
        if cov is not None:
            check_covariance(h, "covariance", cov, names, dict(zip(names, sigma)))
        return cls(names, h.numbers("value", length=len(names)), sigma, cov,
                   h.number("chi2_reduced", required=False, null=True),
                   h.string("units", required=False))


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
    sentence). ``str()`` gives the sentence.

    Codes: ``b0-lab-fixed`` (B0 or lab_B0 inconsistent with zero), ``c0-lab-fixed`` (C0
    inconsistent with zero, ke_ZZ free), ``near-degenerate`` (correlations above 0.95);
    ``unnamed`` for a plain-text warning of a version-1 result file.
    """

    code: str
    sentence: str
    values: Mapping[str, float] = field(default_factory=FrozenMap)

    def __post_init__(self):
        _set(self, "values", FrozenMap(self.values))

    def __str__(self) -> str:
        return self.sentence

    def to_dict(self) -> dict:
        """The record as plain JSON-ready data (the inverse of :meth:`read`)."""
        return {"code": self.code, "message": self.sentence, "values": dict(self.values)}

    @classmethod
    def read(cls, f: Fields, key: str, version: int) -> FitWarning:
        """The entry ``key`` of the warnings (a string in version 1, an object in 2)."""
        if version == 1:
            if not isinstance(f.data[key], str):
                raise f.error(key, "a string (version-1 warning)", f.data[key])
            return cls("unnamed", f.check_string(key, f.data[key]))
        w = f.sub(key)
        w.unknown(("code", "message", "values"))
        values = w.sub("values")
        return cls(w.string("code"), w.string("message"),
                   {k: values.number(k, null=True) for k, _ in values.items()})
