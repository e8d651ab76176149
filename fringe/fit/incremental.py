"""Stages 2-3 of a growing campaign, from accumulated normal equations (``fringe watch``).

A campaign arrives as run files (say one a day). :class:`IncrementalFit` runs stage 1 on each
new piece only and keeps, instead of the turns, the sums that stages 2-3 are made of
(:mod:`fringe.fit.passes`): every per-turn (C, B) pair enters both weighted least-squares fits
linearly through its design rows (:mod:`fringe.fit.turn_model`), so the fit of all turns so far
needs only

* the three weighted Gram matrices, right-hand sides and data sums y P y of stage 3
  (:class:`fringe.fit.solver.NormalParts` plus three numbers: chi^2 at any solution is
  y P y - 2 hᵀx + xᵀ N x, family by family, so the chi^2 rescaling of C and B rows is exact),
  and those of stage 2 (the ten C10 harmonics);
* the Gram matrices of the C rows weighted 1/S_cc and of the B rows weighted 1/S_bb (the
  mean r_c^2 / S_cc and r_b^2 / S_bb at the first solution, which set the two row scales);
* the Gram matrix with unit per-sample level (the Cramér-Rao reference, scaled by the median
  residual RMS at the end);
* the cross product of the harmonic rows with the design rows (the harmonics the fitted
  coefficients predict, for the B0 / C0 diagnostics);
* the count of accepted turns per sidereal hour;
* for bootstrap uncertainties, the stage-3 Gram matrices and right-hand sides of each block of
  ``FitSettings.bootstrap_days`` (counted from the first accepted turn, as the whole-record fit
  counts them), resampled at the end exactly as :func:`fringe.fit.solver.bootstrap_cov` does
  (same seed, same blocks; their number grows with the campaign, one k x k matrix a day).

The matrices are kept for a superset of the coefficients (the theory's largest default set, or
``FitSettings.free``) plus the nuisances (lab_B0, lab_C0, aux_CHANNEL); a fit of fewer free
coefficients takes the sub-blocks, which are exactly its own normal equations. So the default
free set may grow with the span, as in ``fringe fit``.

Two rules of the whole-record fit look at every turn: the glitch rule (median + threshold x
MAD of the residual RMS of all accepted turns) and the noise level of each turn (the running
median of NOISE_WINDOW_TURNS accepted turns, which also looks ahead). Both are kept exact: the
status and residual RMS of every turn (9 bytes a turn) and the level each accepted turn entered
the sums with (8 bytes) are kept; after each piece the glitch rule is applied again to all turns
and the levels are recomputed from the first turn that changed (normally the last half window
of the previous piece); every turn whose level changed leaves the sums with its old weight and
enters with the new one, from its stored design rows. The design rows are stored once per piece
(never rewritten), so an update reads and writes only the pieces whose turns changed.

Exact, then (to rounding): the coefficients, covariance, chi^2, row scales, harmonics,
nuisances, efficiency and diagnostics of one fit of all the pieces as one record, provided the
pieces cut the record at turn boundaries (a turn cut in two is two partial turns). Not
supported here (one-line error): fixed coefficients, rms_kt (its
offset fit takes a polynomial drift over the whole record) and nonlinear theories (medium).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from fringe.demodulate.sessions import sidereal_bins
from fringe.errors import ConfigError, FitError
from fringe.fit.passes import (
    NOISE_WINDOW_TURNS,
    PassesResult,
    _harmonics,
    harmonic_basis,
)
from fringe.fit.settings import FitSettings, default_free
from fringe.fit.solver import NormalParts, PairWeights, solve

#: Registry of the uncertainty modes the incremental fit keeps exact (also the CLI's choices).
INCREMENTAL_UNCERTAINTY_MODES = ("reduced-chi2", "formal", "bootstrap")

#: Span (days) at which the candidate coefficients are taken (the theory's largest default set).
CANDIDATE_SPAN_DAYS = 1e6

_FAMILIES = ("cc", "x", "bb")


def sums_zero(k: int) -> dict[str, NDArray]:
    """All-zero accumulators for k design columns (module docstring)."""
    z = np.zeros
    return {"harm_g": z((3, 10, 10)), "harm_h": z((3, 10)), "harm_s": z(3),
            "des_g": z((3, k, k)), "des_h": z((3, k)), "des_s": z(3), "cr_g": z((3, k, k)),
            "rc_g": z((k, k)), "rc_h": z(k), "rc_s": z(1), "rb_g": z((k, k)), "rb_h": z(k),
            "rb_s": z(1), "cross": z((10, k)), "bins": z(24), "n": z(1)}


def _pair_parts(jc, jb, c, b, w: PairWeights) -> tuple[NDArray, NDArray, NDArray]:
    """Gram matrices (3, k, k), right-hand sides (3, k) and data sums (3,) of one set of rows."""
    p00, p01, p11 = w.p00[:, None], w.p01[:, None], w.p11[:, None]
    cross = (jc * p01).T @ jb
    g = np.stack([(jc * p00).T @ jc, cross + cross.T, (jb * p11).T @ jb])
    h = np.stack([jc.T @ (w.p00 * c), jc.T @ (w.p01 * b) + jb.T @ (w.p01 * c),
                  jb.T @ (w.p11 * b)])
    s = np.array([np.sum(w.p00 * c * c), 2.0 * np.sum(w.p01 * c * b), np.sum(w.p11 * b * b)])
    return g, h, s


def add_contribution(sums: dict, rows: dict, level: NDArray, sign: float) -> None:
    """Add (sign +1) or remove (-1) the turns ``rows`` with noise levels ``level`` (in place).

    ``rows``: c, b (m,), jc, jb (m, k), phi (m,) rad and ninv (m, 2, 2) of m accepted turns.
    """
    if not level.size:
        return
    w = PairWeights.from_cov(level[:, None, None] ** 2 * rows["ninv"])
    c, b, jc, jb = rows["c"], rows["b"], rows["jc"], rows["jb"]
    f = harmonic_basis(rows["phi"])
    z = np.zeros_like(f)
    for key, got in (("harm", _pair_parts(np.hstack([f, z]), np.hstack([z, f]), c, b, w)),
                     ("des", _pair_parts(jc, jb, c, b, w))):
        for part, value in zip(("g", "h", "s"), got):
            sums[f"{key}_{part}"] += sign * value
    unit = PairWeights.from_cov(rows["ninv"])
    sums["cr_g"] += sign * _pair_parts(jc, jb, c, b, unit)[0]
    det = w.p00 * w.p11 - w.p01 ** 2
    for key, q, j, y in (("rc", det / w.p11, jc, c), ("rb", det / w.p00, jb, b)):
        sums[f"{key}_g"] += sign * ((j * q[:, None]).T @ j)
        sums[f"{key}_h"] += sign * (j.T @ (q * y))
        sums[f"{key}_s"] += sign * np.sum(q * y * y)
    sums["cross"] += sign * np.vstack([f.T @ (jc * w.p00[:, None] + jb * w.p01[:, None]),
                                       f.T @ (jc * w.p01[:, None] + jb * w.p11[:, None])])
    np.add.at(sums["bins"], sidereal_bins(rows["phi"]), sign)
    sums["n"] += sign * level.size


def add_groups(sums: dict, rows: dict, level: NDArray, sign: float, days: float) -> None:
    """Add (sign +1) or remove (-1) the turns to the bootstrap groups' sums (in place).

    A group is ``days`` of turns counted from ``sums["grp_t0"]`` (the first accepted turn's
    mean time, s; set by the first call), as :func:`fringe.fit.passes.run_passes` groups them.
    ``rows`` as :func:`add_contribution`, with ``t`` (m,) the turns' mean times, s.
    """
    if not level.size or sums["grp_t0"][0] == -np.inf:      # -inf: to be rebuilt
        return
    if np.isnan(sums["grp_t0"][0]):
        sums["grp_t0"][0] = rows["t"][0]
    gid = np.floor((rows["t"] - sums["grp_t0"][0]) / (86400.0 * days)).astype(int)
    if gid.min() < 0:
        raise ValueError("bootstrap group before the first turn")   # the caller rebuilds
    need = int(gid.max()) + 1
    if need > sums["grp_n"].size:
        extra = need - sums["grp_n"].size
        for key in ("grp_g", "grp_h", "grp_n"):
            pad = np.zeros((extra,) + sums[key].shape[1:])
            sums[key] = np.concatenate([sums[key], pad])
    w = PairWeights.from_cov(level[:, None, None] ** 2 * rows["ninv"])
    for g in np.unique(gid):
        m = gid == g
        sub = PairWeights(w.p00[m], w.p01[m], w.p11[m])
        got = _pair_parts(rows["jc"][m], rows["jb"][m], rows["c"][m], rows["b"][m], sub)
        sums["grp_g"][g] += sign * got[0]
        sums["grp_h"][g] += sign * got[1]
        sums["grp_n"][g] += sign * np.count_nonzero(m)


def groups_zero(k: int) -> dict[str, NDArray]:
    """Empty bootstrap-group sums for k design columns."""
    return {"grp_g": np.zeros((0, 3, k, k)), "grp_h": np.zeros((0, 3, k)),
            "grp_n": np.zeros(0), "grp_t0": np.full(1, np.nan)}


def group_parts(sums: dict, idx: NDArray) -> list[NormalParts]:
    """The normal-equation parts of each non-empty bootstrap group, columns ``idx``."""
    out = []
    for g in np.flatnonzero(np.round(sums["grp_n"]) > 0):
        gg, hh = sums["grp_g"][g][:, idx][:, :, idx], sums["grp_h"][g][:, idx]
        out.append(NormalParts(gg[0], gg[1], gg[2], hh[0], hh[1], hh[2]))
    return out


def _parts(sums: dict, key: str, idx: NDArray | None = None) -> NormalParts:
    g, h = sums[f"{key}_g"], sums.get(f"{key}_h", np.zeros(sums[f"{key}_g"].shape[:2]))
    if idx is not None:
        g, h = g[:, idx][:, :, idx], h[:, idx]
    return NormalParts(g[0], g[1], g[2], h[0], h[1], h[2])


def _chi2(parts: NormalParts, s: NDArray, x: NDArray, d_c: float = 1.0,
          d_b: float = 1.0) -> float:
    """chi^2 = sum over the families of (y P y - 2 hᵀx + xᵀ G x) / scale (solver docstring)."""
    out = 0.0
    for (g, h), si, d in zip(((parts.g_cc, parts.h_c), (parts.g_x, parts.h_x),
                              (parts.g_bb, parts.h_b)), s, (d_c ** 2, d_c * d_b, d_b ** 2)):
        out += (si - 2.0 * h @ x + x @ g @ x) / d
    return float(out)


def _row_scale(sums: dict, key: str, idx: NDArray, x: NDArray) -> float:
    g, h = sums[f"{key}_g"][np.ix_(idx, idx)], sums[f"{key}_h"][idx]
    return float(sums[f"{key}_s"][0] - 2.0 * h @ x + x @ g @ x)


def passes_from_sums(sums: dict, idx: NDArray, k_free: int, settings: FitSettings,
                     sigma_white: float) -> PassesResult:
    """What :func:`fringe.fit.passes.run_passes` gives, from the accumulated sums.

    ``idx``: the design columns of this fit (free coefficients first, then nuisances) among the
    accumulated ones; ``k_free`` of them are coefficients.
    """
    n = int(round(float(sums["n"][0])))
    harm = _parts(sums, "harm")
    x_h, inv_h = solve(*harm.combine())
    harmonics = _harmonics(x_h, inv_h, _chi2(harm, sums["harm_s"], x_h), n, settings)
    parts = _parts(sums, "des", idx)
    out = PassesResult(harmonics=harmonics, n=n)
    out.x, out.cov_formal = solve(*parts.combine())
    _, cov_unit = solve(*_parts(sums, "cr", idx).combine())
    out.cov_cr = cov_unit * sigma_white ** 2
    if settings.uncertainty != "formal":
        out.r_c = _row_scale(sums, "rc", idx, out.x) / n
        out.r_b = _row_scale(sums, "rb", idx, out.x) / n
        if not (out.r_c > 0 and out.r_b > 0):
            raise FitError("stage 3: the residuals of C or B vanish; cannot scale the weights "
                           "by the scatter (use uncertainty formal for noise-free data)")
        out.x, out.cov_formal = solve(*parts.combine(np.sqrt(out.r_c), np.sqrt(out.r_b)))
    out.chi2 = _chi2(parts, sums["des_s"], out.x, np.sqrt(out.r_c), np.sqrt(out.r_b))
    if settings.uncertainty == "bootstrap":
        out.group_parts = group_parts(sums, idx)
    h_pred = sums["cross"][:, idx[:k_free]] @ out.x[:k_free]
    harmonics["predicted"] = solve(harm.combine()[0], h_pred)[0].tolist()
    return out


def noise_levels_from(rms_accepted: NDArray, start: int, size: int) -> NDArray:
    """Noise levels of the accepted turns from position ``start`` on (exact running median).

    Equal to :func:`fringe.fit.passes.noise_level` of all of them, sliced, while reading only
    half a window before ``start``.
    """
    from scipy.ndimage import median_filter

    lo = max(0, start - size // 2)
    return median_filter(rms_accepted[lo:], size=size, mode="nearest")[start - lo:]


def window_size(n_accepted: int) -> int:
    """The running median's window for ``n_accepted`` turns, as :func:`noise_level` sets it."""
    n = n_accepted
    return min(NOISE_WINDOW_TURNS, n if n % 2 else max(n - 1, 1))


def epoch_offset_s(first_utc: str, utc: str) -> float:
    """Seconds from the first piece's epoch to this piece's (UTC quasi-JD difference x 86400)."""
    from fringe.frames import Epoch

    if first_utc.strip() == utc.strip():
        return 0.0
    a, b = Epoch(first_utc).utc_jd, Epoch(utc).utc_jd
    return ((b[0] - a[0]) + (b[1] - a[1])) * 86400.0


def check_settings(setup, settings: FitSettings) -> tuple[str, ...]:
    """The candidate coefficients; ConfigError for what the incremental fit does not do."""
    if not setup.theory.linear:
        raise ConfigError(f"theory {setup.theory.name}: the incremental fit needs a linear "
                          "theory (fit the medium with fringe fit)")
    if settings.uncertainty not in INCREMENTAL_UNCERTAINTY_MODES:
        raise ConfigError(f"uncertainty {settings.uncertainty}: not available incrementally "
                          f"(use {' or '.join(INCREMENTAL_UNCERTAINTY_MODES)}, or fringe fit on "
                          "the joined record)")
    if settings.fixed:
        raise ConfigError("fixed coefficients: not available incrementally (free fewer "
                          "coefficients instead)")
    names = tuple(settings.free) if settings.free is not None else \
        default_free(setup, CANDIDATE_SPAN_DAYS)
    setup.theory.check_params({n: 0.0 for n in names}, source="free")
    if "rms_kt" in names:
        raise ConfigError("free rms_kt: not available incrementally (its offset fit takes a "
                          "polynomial drift over the whole record); free the 2 theta "
                          "coefficients only")
    return names
