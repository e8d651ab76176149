"""The systematic budget of a linear fit: auxiliary channels, declared terms, scale terms.

:func:`systematics_of` builds the result's ``systematics`` part (:class:`~fringe.io.fit_budget
.Systematics`) after stages 2-3, from the fit's covariance of every stage-3 column and the row
cache of the per-turn design (:mod:`fringe.fit.passes`):

* **Auxiliary channels** (``FitSettings.regress``). Each channel's per-turn 2 theta amplitudes
  (demodulated by stage 1 like the signal) are a column of the stage-3 design with its fitted
  coupling a_j. By the omitted-variable formula of least squares (docs/references.md
  [R-stat-omitted-variable]) the coefficients of the fit without the channel's columns differ
  from those with them by exactly P a, with P = N_oo^-1 N_oJ = -V_oJ V_JJ^-1 (N the normal
  matrix, V = N^-1 the fit's covariance, J the channels' columns, o the others): P is the
  channel's 2 theta content propagated through the coefficient map, and P a the shift the
  regression removed (``shift``). Its uncertainty has two parts: the coupling's, |P_kj|
  sigma_j (term ``aux:CHANNEL``; already inside the fit's sigma, so it is split out of it:
  ``statistical`` = sqrt(sigma_fit^2 - [V_oJ V_JJ^-1 V_Jo]_kk), the sigma of the fit without
  the channels), and the channel's own noise, a_j x the sigma of P from the scatter of the
  channel's amplitudes about their projection (term ``aux-noise:CHANNEL``; not in the fit's
  sigma). The channel's own C10 harmonics (a weighted fit of its per-turn amplitudes, as
  stage 2 fits the signal's) are recorded for the reader.
* **Declared terms** of a budget file (:mod:`fringe.io.budget_file`): a size on a coefficient
  enters that coefficient as given; a size on a harmonic is the per-turn template of that
  harmonic (1, sin phi, ... of C10 in C or B) projected on the coefficients through the same
  design, times the size.
* **Scale terms**: a relative size times abs(value) for every coefficient: the run file's
  calibration (``calibration.scale_rel_sigma``, the same number as ``calibration.scale_sigma``)
  and each declared ``[[scale]]``.

Correlations: the coupling terms of several channels are combined with their covariance
(``aux_joint_variance``); every other term is taken as independent of the others and of the
statistics and added in quadrature. A scale term is fully correlated between coefficients (one
factor scales them all), which matters when coefficients are combined; it is recorded with
kind ``scale`` so that a combination can treat it so.
"""

from __future__ import annotations

import numpy as np

from fringe.conventions import HARMONIC_NAMES
from fringe.errors import ConfigError
from fringe.fit.passes import harmonic_basis
from fringe.fit.solver import PairWeights, normal_parts, residual_chi2, solve
from fringe.io.budget_file import Budget
from fringe.io.fit_budget import Systematics

__all__ = ["CORRELATIONS", "check_budget", "systematics_of"]

#: How the budget treats correlated terms (recorded in the result).
CORRELATIONS = ("auxiliary couplings: combined with their fitted covariance "
                "(aux_joint_variance); every other term independent of the others and of the "
                "statistics (quadrature); scale terms fully correlated between coefficients")

_ROWS = ("phi", "jc", "jb", "p00", "p01", "p11")


def check_budget(budget: Budget, names, units: dict[str, str], observable_units: str) -> None:
    """Refuse (ConfigError) a declared term on a coefficient that is not free, or wrong units.

    ``names``: the free coefficients; ``units``: each coefficient's units; the harmonic terms
    are in ``observable_units``.
    """
    for i, t in enumerate(budget.terms):
        where = f"{budget.path}: term[{i}]"
        if t.coefficient is not None:
            if t.coefficient not in names:
                raise ConfigError(f"{where}.coefficient: expected a free coefficient of this "
                                  f"fit ({', '.join(names)}), got {t.coefficient!r}")
            want = units.get(t.coefficient, "1")
        else:
            want = observable_units
        if t.units != want:
            raise ConfigError(f"{where}.units: expected {want!r} (the units of "
                              f"{t.coefficient or t.harmonic}), got {t.units!r}")


def _segments(cache):
    for i in range(cache.n_segments):
        r = cache.get(i, _ROWS)
        if "jc" in r:
            yield r, PairWeights(r["p00"], r["p01"], r["p11"])


def _fit_template(cache, columns, template, k_out):
    """Weighted LS of a per-turn template (tc, tb) on design ``columns`` over the cache.

    ``template(rows)`` gives the per-turn (C, B) template of a segment; ``columns(rows)`` the
    design (jc, jb). Returns (solution, formal inverse, reduced chi^2 of the template's
    residuals).
    """
    from fringe.fit.solver import NormalParts

    parts, n = NormalParts.zeros(k_out), 0
    for r, w in _segments(cache):
        jc, jb = columns(r)
        tc, tb = template(r)
        parts.add(normal_parts(lambda sl, a=jc, b=jb, c=tc, d=tb: (a[sl], b[sl], c[sl], d[sl]),
                               w, k_out))
        n += w.size
    x, inv = solve(*parts.combine())
    chi2 = 0.0
    for r, w in _segments(cache):
        jc, jb = columns(r)
        tc, tb = template(r)
        chi2 += residual_chi2(lambda sl, a=jc, b=jb, c=tc, d=tb: (a[sl], b[sl], c[sl], d[sl]),
                              w, x)[0]
    return x, inv, chi2 / max(2 * n - k_out, 1)


def _aux_part(res, cache, k, labels, units_of):
    """Per channel: shift, coupling sigma and noise sigma per coefficient; the joint variance."""
    V = np.asarray(res.cov_all, float)
    J = [i for i, lab in enumerate(labels) if lab.startswith("aux_")]
    if not J:
        return {}, np.zeros(k), {}
    o = [i for i in range(len(labels)) if i not in J]
    vjj_inv = np.linalg.inv(V[np.ix_(J, J)])
    P = -V[np.ix_(o, J)] @ vjj_inv                    # (len(o), nJ): o's response per unit a
    joint = np.einsum("kj,jl,kl->k", V[np.ix_(o[:k], J)], vjj_inv, V[np.ix_(o[:k], J)])
    out, channels = {}, {}
    for col, j in enumerate(J):
        ch = labels[j][len("aux_"):]
        a = res.nuisance[labels[j]]
        shift = P[:k, col] * a["value"]
        s_coupling = np.abs(P[:k, col]) * a["sigma"]
        _, inv, red = _fit_template(cache, lambda r: (r["jc"][:, o], r["jb"][:, o]),
                                    lambda r, j=j: (r["jc"][:, j], r["jb"][:, j]), len(o))
        s_noise = abs(a["value"]) * np.sqrt(np.maximum(np.diag(inv)[:k] * red, 0.0))
        h, h_inv, h_red = _fit_template(cache, lambda r: _harm_design(r["phi"]),
                                        lambda r, j=j: (r["jc"][:, j], r["jb"][:, j]), 10)
        channels[ch] = {"units": units_of.get(ch, "?"),
                        "coupling": {"value": a["value"], "sigma": a["sigma"]},
                        "harmonics": {"names": list(HARMONIC_NAMES), "value": h.tolist(),
                                      "sigma": np.sqrt(np.diag(h_inv) * h_red).tolist()}}
        out[ch] = (shift, s_coupling, s_noise)
    return out, joint, channels


def _harm_design(phi):
    f = harmonic_basis(phi)
    z = np.zeros_like(f)
    return np.concatenate([f, z], axis=1), np.concatenate([z, f], axis=1)


def _harmonic_projection(cache, nlab: int, k: int, harmonic: str) -> np.ndarray:
    """Coefficients (first k of the design) per unit of one C10 harmonic's per-turn template."""
    i = HARMONIC_NAMES.index(harmonic)

    def template(r):
        col = harmonic_basis(r["phi"])[:, i % 5]
        zero = np.zeros_like(col)
        return (col, zero) if i < 5 else (zero, col)

    x, _, _ = _fit_template(cache, lambda r: (r["jc"], r["jb"]), template, nlab)
    return x[:k]


def systematics_of(res, cache, budget: Budget | None, scale_rel: float | None,
                   aux_units: dict[str, str]) -> Systematics | None:
    """The ``systematics`` part of a linear fit's result (module docstring), or None.

    Parameters
    ----------
    res : CoefficientFit
        With ``cov_all`` and ``labels_all`` (linear fits).
    cache : RowCache
        The per-turn design of the fit (:class:`fringe.fit.passes.RowCache`).
    budget : Budget or None
        The declared terms.
    scale_rel : float or None
        The run file's relative scale uncertainty (``calibration.scale_rel_sigma``).
    aux_units : dict
        Units of each auxiliary channel.
    """
    labels = list(res.labels_all or [])
    # the coefficients of the stage-3 design (rms_kt, fitted from the per-turn offsets after
    # it, has no column there and no budget)
    names = [n for n in res.names if n in labels]
    k = len(names)
    aux, joint, channels = _aux_part(res, cache, k, labels, aux_units)
    if not aux and budget is None:
        return None
    terms, sig, shifts = [], {n: {} for n in names}, {n: {} for n in names}
    direction: dict[str, dict[str, float]] = {n: {} for n in names}
    for ch, (shift, s_c, s_n) in aux.items():
        terms += [{"name": f"aux:{ch}", "kind": "aux-channel", "source": f"coupling to "
                   f"auxiliary channel {ch} (FitSettings.regress), its uncertainty",
                   "note": ""},
                  {"name": f"aux-noise:{ch}", "kind": "aux-channel-noise", "source": "the "
                   f"noise of channel {ch}'s own 2 theta amplitudes times the coupling",
                   "note": ""}]
        for i, n in enumerate(names):
            sig[n][f"aux:{ch}"], sig[n][f"aux-noise:{ch}"] = float(s_c[i]), float(s_n[i])
            shifts[n][f"aux:{ch}"] = float(shift[i])
    for t in (budget.terms if budget else ()):
        if t.coefficient is not None:
            size = {n: (t.size if n == t.coefficient else 0.0) for n in names}
            kind, src = "declared-coefficient", f"declared on {t.coefficient} ({budget.path})"
        else:
            p = _harmonic_projection(cache, len(labels), k, t.harmonic) * t.size
            size = {n: float(abs(p[i])) for i, n in enumerate(names)}
            for i, n in enumerate(names):
                direction[n][t.name] = float(p[i])
            kind, src = "declared-harmonic", f"declared on harmonic {t.harmonic} ({budget.path})"
        terms.append({"name": t.name, "kind": kind, "source": src, "note": t.note})
        for n in names:
            sig[n][t.name] = size[n]
    scales = ([("calibration scale", scale_rel, "run file's relative scale uncertainty "
                "(calibration.scale_rel_sigma)")] if scale_rel else [])
    scales += [(s.name, s.relative, f"declared scale ({budget.path})") for s in
               (budget.scales if budget else ())]
    for name, rel, src in scales:
        terms.append({"name": name, "kind": "scale", "source": src, "relative": float(rel),
                      "note": ""})
    fit_sigma = np.sqrt(np.diag(np.asarray(res.cov_all, float)))[:k]
    coefs = {}
    for i, n in enumerate(names):
        stat = float(np.sqrt(max(fit_sigma[i] ** 2 - joint[i], 0.0)))
        coefs[n] = {"statistical": stat, "fit_sigma": float(fit_sigma[i]), "terms": sig[n],
                    "shift": shifts[n], "total": 0.0,
                    **({"direction": direction[n]} if direction[n] else {})}
    out = Systematics(coefs, terms, channels,
                      {n: float(joint[i]) for i, n in enumerate(names)} if aux else {},
                      CORRELATIONS,
                      {"path": budget.path, "sha256": budget.sha256} if budget else None)
    return out.with_scales({n: float(v) for n, v in zip(res.names, res.value)})

