"""Two optional parts of the fit result for combining runs: ``likelihood`` and ``runs``.

* :class:`Likelihood` (every linear fit of one run file, format version 3): the run's portable
  likelihood. Stage 3 is a weighted least-squares fit, so its likelihood is Gaussian in the
  stage-3 columns (the free coefficients, then the run's nuisances lab_B0, lab_C0,
  aux_CHANNEL): the solution and the covariance as reported (with the run's own chi^2
  scaling, Student-t factor or bootstrap) are all a later combination needs, without the raw
  data. With them the result keeps the run's own chi^2 and dof, the C and B row scales, and,
  for a reader who works with harmonics, the map from unit coefficients to the run's C10
  harmonics at its epoch.
* :class:`Runs` (the result of a joint fit or of ``fringe combine``): each run with its file's
  hash, site, apparatus, its own sigma, its share of each coefficient's information, its
  nuisances at the joint solution and its likelihood (so a joint result can be combined
  again), and the chi^2 of the runs' agreement.

A result file without these parts reads as before (None). ``docs/fit.md`` documents both.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from fringe.io.fit_sections import Estimate, check_covariance, read_estimates
from fringe.io.records import Fields, FrozenMap, freeze, plain

__all__ = ["JOINT_METHODS", "Likelihood", "RunEntry", "Runs", "joint_header_lines",
           "runs_table_lines"]

#: How a result with ``runs`` was made: ``fringe fit`` of several run files, ``fringe combine``.
JOINT_METHODS = ("joint fit", "combination")

_LIK_KEYS = ("columns", "n_coefficients", "value", "covariance", "chi2", "dof", "uncertainty",
             "row_scales", "harmonic_map")
_RUN_KEYS = ("label", "path", "sha256", "site", "apparatus", "epoch_utc", "span_s", "units",
             "n_turns", "uncertainty", "chi2_reduced", "dof", "delta_chi2", "alone",
             "information_fraction", "weight", "nuisance", "likelihood")


@dataclass(frozen=True)
class Likelihood:
    """The Gaussian likelihood of one run's stage-3 columns (see module docstring).

    Attributes
    ----------
    columns : tuple of str
        The free coefficients (the first ``n_coefficients``), then the run's nuisances.
    n_coefficients : int
    value : tuple of float
        The run's solution, one per column (coefficient units; nuisances in the unit of the
        run's observable).
    covariance : tuple of tuples
        Of the columns, as reported (scaled by the run's reduced chi^2 or bootstrapped).
    chi2, dof : float, int
        The run's stage-3 chi^2 at its solution (with the row scales) and its dof.
    uncertainty : str
        How the covariance was formed (``FitSettings.uncertainty``).
    row_scales : tuple of float
        (r_c, r_b): the reduced chi^2 of the C and B rows that rescaled the weights (1, 1 for
        formal).
    harmonic_map : mapping or None
        ``{"names": the ten C10 harmonics, "matrix": 10 x n_coefficients}``: each harmonic of
        the observable per unit coefficient at the record's epoch (for reading; the
        combination uses the stage-3 likelihood, which also follows the annual velocity).
    """

    columns: tuple[str, ...]
    n_coefficients: int
    value: tuple[float, ...]
    covariance: tuple[tuple[float, ...], ...]
    chi2: float
    dof: int
    uncertainty: str
    row_scales: tuple[float, float] = (1.0, 1.0)
    harmonic_map: Mapping | None = None

    def __post_init__(self):
        object.__setattr__(self, "columns", tuple(self.columns))
        object.__setattr__(self, "value", tuple(float(v) for v in self.value))
        m = np.asarray(self.covariance, float)
        object.__setattr__(self, "covariance", tuple(tuple(float(x) for x in r) for r in m))
        object.__setattr__(self, "row_scales", tuple(float(x) for x in self.row_scales))
        if self.harmonic_map is not None:
            object.__setattr__(self, "harmonic_map", freeze(self.harmonic_map))

    @property
    def coefficients(self) -> tuple[str, ...]:
        """The free coefficients (the first columns)."""
        return self.columns[:self.n_coefficients]

    @property
    def nuisances(self) -> tuple[str, ...]:
        """The run's nuisance columns."""
        return self.columns[self.n_coefficients:]

    def arrays(self) -> tuple[np.ndarray, np.ndarray]:
        """(value (m,), covariance (m, m)) as new float arrays."""
        return np.array(self.value, float), np.array(self.covariance, float)

    def to_dict(self) -> dict:
        """The record as plain JSON-ready data (the inverse of :meth:`read`)."""
        out = {"columns": list(self.columns), "n_coefficients": self.n_coefficients,
               "value": list(self.value), "covariance": [list(r) for r in self.covariance],
               "chi2": self.chi2, "dof": self.dof, "uncertainty": self.uncertainty,
               "row_scales": list(self.row_scales)}
        if self.harmonic_map is not None:
            out["harmonic_map"] = plain(self.harmonic_map)
        return out

    @classmethod
    def read(cls, f: Fields, key: str) -> Likelihood | None:
        """Read and check the record at ``key`` of ``f``; InputFileError names a bad field."""
        s = f.sub(key, required=False)
        if s is None:
            return None
        s.unknown(_LIK_KEYS)
        columns = s.strings("columns")
        if not columns or len(set(columns)) != len(columns):
            raise s.error("columns", "a non-empty list of distinct names", list(columns))
        k = s.integer("n_coefficients", minimum=1)
        if k > len(columns):
            raise s.error("n_coefficients", f"at most the {len(columns)} columns", k)
        value = s.numbers("value", length=len(columns))
        cov = s.matrix("covariance", len(columns))
        check_covariance(s, "covariance", cov, columns)
        scales = s.numbers("row_scales", length=2, minimum=0.0)
        hmap = s.sub("harmonic_map", required=False)
        if hmap is not None:
            hmap.unknown(("names", "matrix"))
            names = hmap.strings("names")
            rows = hmap.take("matrix", True, f"a {len(names)} x {k} matrix of numbers")
            if not (isinstance(rows, list) and len(rows) == len(names) and all(
                    isinstance(r, list) and len(r) == k for r in rows)):
                raise hmap.error("matrix", f"a {len(names)} x {k} matrix of numbers")
            for i, r in enumerate(rows):
                for j, x in enumerate(r):
                    hmap.check_number(f"matrix[{i}][{j}]", x)
        return cls(columns, k, value, cov, s.number("chi2", minimum=0.0),
                   s.integer("dof", minimum=1), s.string("uncertainty"), scales,
                   s.record("harmonic_map", required=False))


@dataclass(frozen=True)
class RunEntry:
    """One run of a joint result (see :class:`Runs`).

    Attributes
    ----------
    label : str
        "run 1", "run 2", ... in the order of the result.
    path, sha256 : str
        The run file as given and its SHA-256 (the run's identity).
    site, apparatus : mapping
        As recorded in the run file.
    epoch_utc : str
    span_s : float
    units : str
        Unit of the run's observable (its nuisances are in it).
    n_turns : int
        Accepted turns.
    uncertainty : str
    chi2_reduced, dof : float, int
        The run's own stage-3 reduced chi^2 and dof (its scaling).
    delta_chi2 : float
        (x - x_run)ᵀ F_run (x - x_run) at the joint solution x, with F_run the run's
        information on the coefficients (its nuisances profiled): how far the joint values are
        from the run's own, in the run's uncertainties.
    alone : mapping of str to Estimate
        The run's own values and sigma of the coefficients.
    information_fraction : mapping of str to float
        The run's share of each coefficient's Fisher information: diagonal element of F_run
        over that of the sum of all runs' (sums to 1 over the runs).
    weight : mapping of str to float
        The diagonal of F^-1 F_run: the weight of the run's own value in the joint value
        (sums to 1 over the runs; may be negative where coefficients correlate).
    nuisance : mapping of str to Estimate
        The run's nuisances at the joint solution.
    likelihood : Likelihood
    """

    label: str
    path: str
    sha256: str
    site: Mapping
    apparatus: Mapping
    epoch_utc: str
    span_s: float
    units: str
    n_turns: int
    uncertainty: str
    chi2_reduced: float
    dof: int
    delta_chi2: float
    alone: Mapping[str, Estimate]
    information_fraction: Mapping[str, float]
    weight: Mapping[str, float]
    nuisance: Mapping[str, Estimate]
    likelihood: Likelihood

    def __post_init__(self):
        for name in ("site", "apparatus", "alone", "information_fraction", "weight",
                     "nuisance"):
            object.__setattr__(self, name, freeze(getattr(self, name)))

    def to_dict(self) -> dict:
        """The record as plain JSON-ready data (the inverse of :meth:`read`)."""
        return {k: plain(getattr(self, k)) for k in _RUN_KEYS}

    @classmethod
    def read(cls, s: Fields) -> RunEntry:
        """Read and check one element of ``runs.runs``."""
        s.unknown(_RUN_KEYS)
        lik = Likelihood.read(s, "likelihood")
        if lik is None:
            raise s.error("likelihood", "the run's likelihood (a JSON object)")

        def numbers(key):
            sub = s.sub(key)
            return {n: sub.number(n) for n, _ in sub.items()}

        return cls(s.string("label"), s.string("path"), s.string("sha256"), s.record("site"),
                   s.record("apparatus"), s.string("epoch_utc"),
                   s.number("span_s", minimum=0.0), s.string("units"),
                   s.integer("n_turns"), s.string("uncertainty"),
                   s.number("chi2_reduced", null=True), s.integer("dof", minimum=1),
                   s.number("delta_chi2", minimum=0.0), read_estimates(s, "alone"),
                   numbers("information_fraction"), numbers("weight"),
                   read_estimates(s, "nuisance", null=True), lik)


@dataclass(frozen=True)
class Runs:
    """The runs of a joint fit or a combination and their agreement.

    Attributes
    ----------
    method : str
        One of :data:`JOINT_METHODS`.
    runs : tuple of RunEntry
    agreement : mapping
        ``{"chi2", "dof", "p_value"}``: the sum of the runs' ``delta_chi2``, with (runs - 1) x
        coefficients degrees of freedom, and its upper-tail probability (runs that agree
        within their uncertainties give p not far below 1/2; a small p says that they
        disagree beyond them).
    """

    method: str
    runs: tuple[RunEntry, ...]
    agreement: Mapping = field(default_factory=FrozenMap)

    def __post_init__(self):
        object.__setattr__(self, "runs", tuple(self.runs))
        object.__setattr__(self, "agreement", freeze(self.agreement))

    def to_dict(self) -> dict:
        """The record as plain JSON-ready data (the inverse of :meth:`read`)."""
        return {"method": self.method, "runs": [r.to_dict() for r in self.runs],
                "agreement": plain(self.agreement)}

    @classmethod
    def read(cls, f: Fields, key: str) -> Runs | None:
        """Read and check the record at ``key`` of ``f``; InputFileError names a bad field."""
        s = f.sub(key, required=False)
        if s is None:
            return None
        s.unknown(("method", "runs", "agreement"))
        method = s.string("method")
        if method not in JOINT_METHODS:
            raise s.error("method", " or ".join(repr(m) for m in JOINT_METHODS), method)
        el = s.elements("runs")
        if len(el.data) < 1:
            raise s.error("runs", "a non-empty list of runs", [])
        runs = tuple(RunEntry.read(el.sub(k)) for k in el.data)
        a = s.sub("agreement")
        a.unknown(("chi2", "dof", "p_value"))
        agreement = {"chi2": a.number("chi2", minimum=0.0), "dof": a.integer("dof"),
                     "p_value": a.number("p_value", null=True)}
        return cls(method, runs, agreement)


def _site_text(site: Mapping) -> str:
    name = site.get("name") or "?"
    lat = site.get("latitude_deg")
    return f"{name} ({lat:+.2f} deg)" if isinstance(lat, (int, float)) else str(name)


def joint_header_lines(runs: Runs, theory: str) -> list[str]:
    """The first lines of a joint result's summary: what was combined, how, the agreement."""
    n_turns = sum(r.n_turns for r in runs.runs)
    kinds = sorted({str(r.apparatus.get("kind", "?")) for r in runs.runs})
    sites = sorted({str(r.site.get("name", "?")) for r in runs.runs})
    a = runs.agreement
    p = a.get("p_value")
    return [f"{runs.method} of {len(runs.runs)} runs — theory {theory}, {n_turns} accepted "
            f"turns, {len(sites)} site(s), apparatus {', '.join(kinds)}",
            f"agreement of the runs: chi2 {a.get('chi2', float('nan')):.3g} for "
            f"{a.get('dof')} dof (p = {p:.3g})" if isinstance(p, float) and math.isfinite(p)
            else "agreement of the runs: not tested (one run)"]


def runs_table_lines(runs: Runs) -> list[str]:
    """The runs as text lines: file, site, apparatus, own reduced chi^2, delta chi^2, shares."""
    from fringe.text_table import text_table

    names = list(runs.runs[0].information_fraction) if runs.runs else []
    head = ["run", "file", "site", "apparatus", "turns", "chi2/dof", "delta chi2"] + \
        [f"info {n}" for n in names]
    cells = [[r.label, r.path, _site_text(r.site), str(r.apparatus.get("kind", "?")),
              str(r.n_turns), f"{r.chi2_reduced:.3f}", f"{r.delta_chi2:.3g}"]
             + [f"{r.information_fraction.get(n, float('nan')):.3f}" for n in names]
             for r in runs.runs]
    lines = ["runs (info: the run's share of each coefficient's Fisher information; delta "
             "chi2: the joint values in the run's own uncertainties):"]
    lines += text_table(head, cells, left=4)
    lines.append(f"{'sigma alone':<12}" + "".join(
        f"  {n} " + " / ".join(f"{r.alone[n].sigma:.3g}" for r in runs.runs)
        for n in names if all(n in r.alone for r in runs.runs)))
    for r in runs.runs:
        if r.nuisance:
            lines.append(f"{r.label} nuisances at the joint solution ({r.units}): " + ", ".join(
                f"{n} {e.value:.4g} ± {e.sigma:.3g}" for n, e in r.nuisance.items()))
    return lines
