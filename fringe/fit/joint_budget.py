"""The systematic budget of a joint result: the runs' own terms and terms declared on it.

The joint value is x = (Σ F_r)⁻¹ Σ F_r ĉ_r (:mod:`fringe.fit.joint`: F_r the information of
run r about the coefficients, ĉ_r the run's own solution), so a change e of run r's estimate
changes the joint value by W_r e, with W_r = (Σ F)⁻¹ F_r the run's weight matrix (k × k; its
diagonal is the ``weight`` of the runs table). Each term of a run's ``systematics`` part is
carried so:

* ``declared-coefficient`` (size s on coefficient j): e = s u_j, the joint term is
  |W_r[:, j]| s — exact.
* ``scale`` (relative size ρ, a run's calibration or a declared scale): e = ρ ĉ_r, the joint term
  |W_r ĉ_r| ρ — exact; it becomes kind ``run-scale`` (a fixed size: the joint value does not
  rescale it).
* ``declared-harmonic``: the run's result stores the term's signed effect on every coefficient
  (``direction``), d; the joint term is |W_r d| — exact. A result written before
  ``direction`` existed gives the bound below.
* ``aux-channel-noise`` (the noise of a channel's projection, not one direction): bounded by
  Σ_j |W_r[k, j]| s_j, s_j its size on coefficient j (an upper bound, exact when one
  coefficient carries the term).
* ``aux-channel`` (a fitted coupling's uncertainty) is inside the run's likelihood, hence inside
  the joint σ; the joint ``statistical`` is the joint σ itself and these terms are not listed
  again.

Terms of different runs are taken as independent (the runs are, :mod:`fringe.fit.joint`); a term
common to several runs (one calibration standard) would need a shared nuisance and is not
modelled. Terms declared for the joint result (``--budget FILE`` of a joint fit or of
``fringe combine``) are coefficient terms (as given) and scale terms (relative × |joint value|);
a harmonic term belongs to one run and is refused.
"""

from __future__ import annotations

import numpy as np

from fringe.errors import ConfigError
from fringe.io.budget_file import Budget
from fringe.io.fit_budget import Systematics

__all__ = ["JOINT_CORRELATIONS", "joint_systematics"]

#: How the joint budget treats correlated terms (recorded in the result).
JOINT_CORRELATIONS = (
    "runs' terms carried through each run's weight matrix, independent between runs; a "
    "channel's noise term bounded by the absolute weights; auxiliary couplings inside the "
    "joint statistical σ; declared terms "
    "independent of the others, scale terms fully correlated between coefficients")


def _run_terms(label: str, path: str, sysm: Systematics, names, own: np.ndarray,
               w: np.ndarray) -> tuple[list[dict], dict[str, np.ndarray]]:
    """One run's terms (name -> joint size per coefficient) and their descriptions."""
    terms, sizes = [], {}
    for t in sysm.terms:
        kind = t["kind"]
        if kind == "aux-channel":
            continue
        name = f"{label}: {t['name']}"
        per = np.array([float(sysm.coefficients.get(n, {}).get("terms", {}).get(t["name"])
                              or 0.0) for n in names])
        if kind == "scale":
            size = np.abs(w @ (float(t["relative"]) * own))
            kind = "run-scale"
        elif kind == "declared-coefficient":
            size = np.abs(w) @ per          # one nonzero entry: exact
        elif kind == "declared-harmonic" and all(
                t["name"] in sysm.coefficients.get(n, {}).get("direction", {}) for n in names):
            size = np.abs(w @ np.array([float(sysm.coefficients[n]["direction"][t["name"]])
                                        for n in names]))
        else:
            size = np.abs(w) @ per          # signs not stored: an upper bound
        terms.append({"name": name, "kind": kind, "source": f"{label} ({path}): "
                      f"{t.get('source', '')}", "note": t.get("note", "")})
        sizes[name] = size
    return terms, sizes


def joint_systematics(runs, names, values, cov, budget: Budget | None,
                      units: dict[str, str]) -> Systematics | None:
    """The ``systematics`` part of a joint result, or None when no run and no file has terms.

    Parameters
    ----------
    runs : list of (label, path, Systematics or None, own values (k,), weight matrix (k, k))
        Each run's budget, its own solution in the order of ``names`` and W_r.
    names : sequence of str
        The joint coefficients.
    values : array (k,)
        The joint values (coefficient units).
    cov : array (k, k)
        The joint covariance.
    budget : Budget or None
        Terms declared on the joint coefficients.
    units : dict
        Each coefficient's units (for the declared terms' check).

    Raises
    ------
    ConfigError
        A declared harmonic term, a term on a coefficient the joint result does not hold, or
        other units than the coefficient's.
    """
    names = list(names)
    terms, sizes = [], {}
    for label, path, sysm, own, w in runs:
        if sysm is None:
            continue
        t, s = _run_terms(label, path, sysm, names, np.asarray(own, float),
                          np.asarray(w, float))
        terms += t
        sizes.update(s)
    for i, t in enumerate(budget.terms if budget else ()):
        where = f"{budget.path}: term[{i}]"
        if t.coefficient is None:
            raise ConfigError(f"{where}.harmonic: expected a coefficient term for a joint "
                              "result (a harmonic belongs to one run: fit that run with its "
                              "budget, then combine the results)")
        if t.coefficient not in names:
            raise ConfigError(f"{where}.coefficient: expected a coefficient of the joint "
                              f"result ({', '.join(names)}), got {t.coefficient!r}")
        want = units.get(t.coefficient, "1")
        if t.units != want:
            raise ConfigError(f"{where}.units: expected {want!r} (the units of "
                              f"{t.coefficient}), got {t.units!r}")
        terms.append({"name": t.name, "kind": "declared-coefficient",
                      "source": f"declared on {t.coefficient} ({budget.path})", "note": t.note})
        sizes[t.name] = np.array([t.size if n == t.coefficient else 0.0 for n in names])
    for s in (budget.scales if budget else ()):
        terms.append({"name": s.name, "kind": "scale", "source": f"declared scale "
                      f"({budget.path})", "relative": float(s.relative), "note": s.note})
    if not terms:
        return None
    sigma = np.sqrt(np.diag(np.asarray(cov, float)))
    coefs = {n: {"statistical": float(sigma[j]), "fit_sigma": float(sigma[j]),
                 "terms": {k: float(v[j]) for k, v in sizes.items()}, "shift": {},
                 "total": 0.0} for j, n in enumerate(names)}
    out = Systematics(coefs, terms, {}, {}, JOINT_CORRELATIONS,
                      {"path": budget.path, "sha256": budget.sha256} if budget else None)
    return out.with_scales({n: float(values[j]) for j, n in enumerate(names)})
