"""The statistics of a study's campaigns: pulls, coverage with binomial bands, sigma, efficiency.

:func:`coefficient_table` reduces the records of one row of campaigns to, per coefficient:

* ``pull_mean``, ``pull_std`` of the pulls z = (estimate - reference) / sigma, with their
  standard errors std/sqrt(N) and std/sqrt(2 (N - 1)) (normal sampling theory);
* ``coverage_68`` and ``coverage_95``: the fraction of campaigns with |z| <= 1 and |z| <= 1.96,
  each beside its expected value p = 2 Phi(k) - 1 (0.6827 and 0.9500) and the binomial
  standard deviation sqrt(p (1 - p) / N) of that fraction for N campaigns, and z-score
  (fraction - p) / that deviation;
* ``sigma_median`` (the median reported sigma), ``sigma_forecast`` (the plan's Fisher forecast
  for the scenario's noise model, :func:`fringe.plan.forecast`), ``scatter`` (the standard
  deviation of estimate - reference);
* ``efficiency_coloured`` = sigma_forecast / sigma_median (the forecast is the bound for the
  scenario's own noise model, coloured or white: its per-turn amplitude variance is
  S_y(2 / T_R) / T_R), and ``efficiency_white``, the median of each fit's own white-noise
  Cramer-Rao ratio (``FitResult.efficiency``).

The reference is the injected truth ("coverage") or zero ("null", "scramble").
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["P68", "P95", "binomial_sigma", "coefficient_table", "pulls"]

P68 = math.erf(1.0 / math.sqrt(2.0))        # 2 Phi(1) - 1 = 0.682689 (normal distribution)
P95 = math.erf(1.96 / math.sqrt(2.0))       # 2 Phi(1.96) - 1 = 0.950004


def binomial_sigma(p: float, n: int) -> float:
    """Standard deviation sqrt(p (1 - p) / n) of a fraction of n trials of probability p."""
    return math.sqrt(p * (1.0 - p) / n)


def pulls(records: list, names, against_zero: bool = False) -> np.ndarray:
    """(N, k) pulls (estimate - truth) / sigma (or estimate / sigma) of successful records."""
    return np.array([[(r["value"][n] - (0.0 if against_zero else r["truth"].get(n, 0.0)))
                      / r["sigma"][n] for n in names] for r in records]).reshape(-1, len(names))


def _coverage(z: np.ndarray, k: float, p: float) -> dict:
    n = z.size
    frac = float(np.mean(np.abs(z) <= k))
    sd = binomial_sigma(p, n)
    return {"value": frac, "expected": p, "binomial_sigma": sd, "z": (frac - p) / sd}


def _one(records: list, name: str, z: np.ndarray, against_zero: bool,
         forecast: float | None) -> dict:
    n = z.size
    ref = [0.0 if against_zero else r["truth"].get(name, 0.0) for r in records]
    resid = np.array([r["value"][name] for r in records]) - np.array(ref)
    sig = np.array([r["sigma"][name] for r in records])
    eff = [r["efficiency"][name] for r in records if name in (r.get("efficiency") or {})]
    std = float(np.std(z, ddof=1))
    med = float(np.median(sig))
    return {"n": n,
            "pull_mean": {"value": float(np.mean(z)), "uncertainty": std / math.sqrt(n)},
            "pull_std": {"value": std, "uncertainty": std / math.sqrt(2.0 * (n - 1))},
            "coverage_68": _coverage(z, 1.0, P68), "coverage_95": _coverage(z, 1.96, P95),
            "sigma_median": med, "sigma_forecast": forecast,
            "scatter": float(np.std(resid, ddof=1)),
            "efficiency_coloured": None if forecast is None else forecast / med,
            "efficiency_white": float(np.median(eff)) if eff else None}


def coefficient_table(records: list, names, forecast: dict | None = None,
                      against_zero: bool = False) -> dict:
    """Per coefficient of ``names``, the statistics of the module docstring (needs N >= 2).

    Parameters
    ----------
    records : list of dict
        Successful campaign records (``value``, ``sigma``, ``truth``, ``efficiency``).
    names : sequence of str
    forecast : dict, optional
        Forecast sigma of each coefficient (same units as the estimates).
    against_zero : bool
        Take the pulls against zero (null and scramble studies).

    Returns
    -------
    dict
        name -> statistics; empty when fewer than two records.
    """
    if len(records) < 2:
        return {}
    z = pulls(records, names, against_zero)
    fc = forecast or {}
    return {n: _one(records, n, z[:, j], against_zero, fc.get(n)) for j, n in enumerate(names)}


def mean_mahalanobis(records: list, names, against_zero: bool = False) -> float | None:
    """Mean over campaigns of d^T Cov^-1 d / k, d = estimate - reference (expected 1)."""
    if not records:
        return None
    out = []
    for r in records:
        idx = [r["cov_names"].index(n) for n in names]
        cov = np.array(r["cov"])[np.ix_(idx, idx)]
        d = np.array([r["value"][n] - (0.0 if against_zero else r["truth"].get(n, 0.0))
                      for n in names])
        out.append(float(d @ np.linalg.solve(cov, d)))
    return float(np.mean(out)) / len(names)
