"""One-stage cross-check: one global linear least squares of every sample.

Where the two-stage fit (:mod:`fringe.demodulate`, then :mod:`fringe.fit`) first reduces each
turn to its 2 theta amplitudes (C_i, B_i), this module fits all samples y_n at once with

    y_n = sum_k p_k g_k(t_n, A_n) + sum_j q_j h_j(n) + sum_l u_{b,l} L_l(n)        (n in block b)

* g_k: the basis signal of free coefficient k (:func:`fringe.experiment.basis.basis`, with the
  recorded azimuth A_n of each sample; exact, no frozen-frame or 8-angle approximation);
* h_j: the global nuisances of stage 3, a constant 2 theta column along the apparatus's
  two-path B0 when ``settings.lab_b0`` (``lab_B0``; sin 2 theta for paths 90 deg apart), one
  along its two-path C0 when ``settings.lab_c0`` (``lab_C0``; cos 2 theta) and, for
  each ``settings.regress`` channel ch, the 2 theta part of that channel in each turn
  (C_ch,b cos 2 theta + B_ch,b sin 2 theta, from the stage-1 table; ``aux_ch``);
* L_l: the per-turn nuisances of stage 1, i.e. every term of the block model except cos 2 theta
  and sin 2 theta (drift polynomial in the same normalised time tau, the 1 theta pair and, if
  configured, the 3 theta and 4 theta pairs).

The per-turn nuisances u_b are eliminated exactly, turn by turn, with the Schur complement of
the block-bordered normal matrix:

    N = sum_b (G_bᵀ G_b - G_bᵀ L_b (L_bᵀ L_b)^-1 L_bᵀ G_b),
    r = sum_b (G_bᵀ y_b - G_bᵀ L_b (L_bᵀ L_b)^-1 L_bᵀ y_b),      p = N^-1 r,

where G_b holds the global columns (g_k and h_j) of turn b. The residual sum of squares is
chi^2 = sum_b (y_bᵀ y_b - y_bᵀ L_b (L_bᵀ L_b)^-1 L_bᵀ y_b) - rᵀ p, with
dof = n_samples - n_turns x n_local - n_global; the covariance is (chi^2 / dof) N^-1 (white
per-sample noise of the level the residuals show). Before the sums, y and the columns of G are
centred per turn on their means; the constant is in the span of L, so this changes nothing but
the rounding.

The record is read range by range (:func:`fringe.demodulate.engine.range_samples_and_blocks`,
the same segmentation as stage 1). Only turns that stage 1 accepted take part: each turn's mean
time and valid-sample count are recomputed exactly as stage 1 does and matched to the accepted
rows of the turn table. NaN samples (and samples where a regressed channel is NaN) are left out.
Sums are formed with ``np.add.reduceat`` of per-sample products and the per-turn systems are
solved in one batched ``np.linalg.solve``; there is no Python loop over turns.

For white noise this estimate is the Gauss-Markov (minimum-variance linear) estimate for the
model. The per-turn (C, B) estimates of stage 1 carry all the information on the 2 theta model
inside a turn, so the two-stage fit differs from this one only through its per-turn weights
(each turn's own residual variance, which costs a factor (nu - 2)/(nu - 4) in variance for nu
dof per turn) and through the signal's small change within a turn outside the span of the block
model (~P_turn / P_sidereal of the signal): the two agree to a small fraction of sigma. Use this
as a cross-check (:func:`fringe.fit.run.fit_run` with ``one_stage=True``), not as the primary
result: it needs a second pass over the record and evaluates the basis at every sample.

Units: times in s, azimuths in rad, the signal and the nuisances in the record's signal units,
coefficients in the theory's units.

References
----------
Bjorck, Numerical Methods for Least Squares Problems (SIAM, 1996), section 6.3 (block angular
least-squares problems, elimination of the local variables), from memory.
"""

from __future__ import annotations

import logging

import numpy as np
from numpy.typing import NDArray

from fringe.demodulate.engine import RANGE_SAMPLES, RecordInfo, range_samples_and_blocks, ranges
from fringe.demodulate.settings import DRIFT_TERMS, DemodSettings
from fringe.demodulate.turns import TurnTable
from fringe.errors import ConfigError, FitError
from fringe.experiment.basis import CHUNK_SAMPLES, Setup, basis, signal
from fringe.linalg import SingularMatrixError, invert_normal

logger = logging.getLogger(__name__)

__all__ = ["one_stage_fit"]


def _global_labels(names: tuple[str, ...], settings) -> list[str]:
    from fringe.fit.passes import design_labels

    return design_labels(names, settings)


def _chunked(func, n: int, *arrays):
    """Evaluate ``func`` on CHUNK_SAMPLES-long slices of ``arrays`` and concatenate (axis 0)."""
    parts = [func(*(a[i:i + CHUNK_SAMPLES] for a in arrays)) for i in range(0, n, CHUNK_SAMPLES)]
    return np.concatenate(parts, axis=0)


def _segment_sums(x: NDArray, starts: NDArray) -> NDArray:
    return np.add.reduceat(x, starts, axis=0)


def _match_turns(t_mid: NDArray, n_valid: NDArray, table: TurnTable, dt_s: float
                 ) -> tuple[NDArray, NDArray]:
    """Rows of ``table`` (accepted only) for turns with mean times ``t_mid``; -1 if none.

    A turn matches an accepted row when its mean time agrees to a quarter of the sample
    interval and its valid-sample count is the same.
    """
    acc = np.flatnonzero(table.accepted)
    t_acc = table.t_mid_s[acc]
    rows = np.full(t_mid.size, -1, np.intp)
    if acc.size == 0 or t_mid.size == 0:
        return rows, np.zeros(t_mid.size, bool)
    pos = np.searchsorted(t_acc, t_mid)
    right = np.clip(pos, 0, t_acc.size - 1)
    left = np.clip(pos - 1, 0, t_acc.size - 1)
    near = np.where(np.abs(t_acc[left] - t_mid) <= np.abs(t_acc[right] - t_mid), left, right)
    ok = (np.abs(t_acc[near] - t_mid) <= 0.25 * dt_s) & (table.n_valid[acc[near]] == n_valid)
    rows[ok] = acc[near[ok]]
    return rows, ok


def _range_sums(info: RecordInfo, demod: DemodSettings, setup: Setup, table: TurnTable,
                names: tuple[str, ...], settings, start: int, stop: int,
                dt_s: float) -> dict | None:
    """Schur-reduced normal equations of the accepted turns starting in samples [start, stop)."""
    got = range_samples_and_blocks(info, start, stop)
    if got is None:
        return None
    data, block_starts = got
    t, az, y = data["time"], data["azimuth"], data["signal"]
    if "moving" in data:                   # stepped: samples while moving left out, as stage 1
        y = np.where(data["moving"], np.nan, y)
    n = t.size
    nb = block_starts.size
    bid = np.repeat(np.arange(nb), np.diff(np.append(block_starts, n)))
    valid = np.isfinite(y)
    for ch in info.aux_channels:
        valid &= np.isfinite(data[ch])
    # turn mean time and valid count, computed as stage 1 does (for the match)
    vcount = np.bincount(bid, weights=valid, minlength=nb)
    t_mid = np.bincount(bid, weights=np.where(valid, t, 0.0), minlength=nb) / np.maximum(vcount,
                                                                                         1)
    rows, matched = _match_turns(t_mid, vcount.astype(np.int64), table, dt_s)
    use_block = matched & (vcount > 0)
    keep = valid & use_block[bid]
    if not np.any(keep):
        return {"n": 0, "turns": 0, "rows": np.zeros(0, np.intp)}

    # compress to the kept samples of the used turns (turn order is preserved)
    t, az, y, bk = t[keep], az[keep], y[keep], bid[keep]
    used = np.flatnonzero(use_block)
    new_id = np.full(nb, -1, np.intp)
    new_id[used] = np.arange(used.size)
    b = new_id[bk]
    starts = np.flatnonzero(np.r_[True, b[1:] != b[:-1]])
    cnt = np.diff(np.append(starts, b.size)).astype(float)
    rows = rows[used]

    # local (per-turn) columns: the stage-1 block model without the 2 theta pair
    tm = t_mid[used][b]
    lo = np.minimum.reduceat(t, starts)
    hi = np.maximum.reduceat(t, starts)
    half = np.maximum(0.5 * (hi - lo), 1e-9)[b]
    tau = (t - tm) / half
    theta = np.pi - az
    z1 = np.exp(1j * theta)
    z2 = z1 * z1
    local = [np.ones(t.size), tau, tau * tau][:DRIFT_TERMS[demod.drift]] + [z1.real, z1.imag]
    zk = z2
    for _ in range(3, demod.max_harmonic + 1):
        zk = zk * z1
        local += [zk.real, zk.imag]
    lmat = np.stack(local, axis=1)                                       # (n, m)

    # global columns: basis signals, then the stage-3 nuisances
    gcols = [_chunked(lambda tt, aa: basis(setup, tt, aa, names), t.size, t, az)]
    offsets = setup.apparatus.offset_directions(setup.units)     # (C, B) of lab_B0, lab_C0
    for on, key in ((settings.lab_b0, "lab_B0"), (settings.lab_c0, "lab_C0")):
        if on:
            gcols.append((offsets[key][0] * z2.real + offsets[key][1] * z2.imag)[:, None])
    ic, isn = table.settings.index("c2"), table.settings.index("s2")
    for ch in settings.regress:
        aux = table.aux[ch][rows]
        gcols.append((aux[b, ic] * z2.real + aux[b, isn] * z2.imag)[:, None])
    gmat = np.concatenate(gcols, axis=1)                                 # (n, k)
    if settings.fixed:
        y = y - _chunked(lambda tt, aa: signal(setup, settings.fixed, tt, aa), t.size, t, az)

    # centre per turn (the constant is a local column)
    y = y - (_segment_sums(y, starts) / cnt)[b]
    gmat = gmat - (_segment_sums(gmat, starts) / cnt[:, None])[b]

    m, k = lmat.shape[1], gmat.shape[1]
    iu = np.triu_indices(m)
    ll_sum = _segment_sums(lmat[:, iu[0]] * lmat[:, iu[1]], starts)
    ll = np.empty((starts.size, m, m))
    ll[:, iu[0], iu[1]] = ll_sum
    ll[:, iu[1], iu[0]] = ll_sum
    lg = np.stack([_segment_sums(lmat[:, i:i + 1] * gmat, starts) for i in range(m)], axis=1)
    ly = _segment_sums(lmat * y[:, None], starts)                        # (nb, m)
    rhs = np.concatenate([lg, ly[:, :, None]], axis=2)                   # (nb, m, k + 1)
    try:
        sol = np.linalg.solve(ll, rhs)
    except np.linalg.LinAlgError:
        raise FitError(f"{info.path}: one-stage fit: singular per-turn nuisance system in "
                       f"samples {start}-{stop} (stage 1 accepted a degenerate turn)") from None
    normal = gmat.T @ gmat - np.einsum("bmk,bml->kl", lg, sol[:, :, :k])
    proj = gmat.T @ y - np.einsum("bmk,bm->k", lg, sol[:, :, k])
    yy = float(y @ y - np.einsum("bm,bm->", ly, sol[:, :, k]))
    return {"n": int(t.size), "turns": int(starts.size), "m": m, "normal": normal,
            "proj": proj, "yy": yy, "rows": rows}


def one_stage_fit(info: RecordInfo, demod: DemodSettings, setup: Setup, table: TurnTable,
                  names, settings, *, range_samples: int = RANGE_SAMPLES) -> dict:
    """Global least squares of all samples with per-turn nuisances eliminated (module docstring).

    Parameters
    ----------
    info : RecordInfo
        From :func:`fringe.demodulate.engine.run_stage1` (same path, reference angle and gap rule).
    demod : DemodSettings
        Stage-1 settings (drift polynomial, highest harmonic).
    setup : Setup
        Site, epoch, apparatus and theory of the record; the theory must be linear.
    table : TurnTable
        The stage-1 table of the same record (its ``status`` selects the turns).
    names : sequence of str
        Free coefficients (as fitted by stage 3).
    settings : FitSettings
        Uses ``fixed``, ``lab_b0``, ``lab_c0`` and ``regress``.
    range_samples : int
        Samples per range of the pass over the record (the result does not depend on it beyond
        rounding).

    Returns
    -------
    dict
        Plain JSON types: ``coefficients`` {name: {"value", "sigma"}} (coefficient units),
        ``nuisance`` {label: {"value", "sigma"}} (signal units per unit column),
        ``covariance`` {"names", "matrix"} of the free coefficients (scaled by the observed
        per-sample variance), ``noise_rms`` (per-sample noise level chi^2/dof of the
        unit-weight fit, square-rooted; signal units), ``chi2_reduced`` (noise_rms^2 over the
        squared stage-1 white level, the median per-turn residual RMS; about 1 for white
        noise), ``dof``, ``n_samples`` and ``n_turns_used``.

    Raises
    ------
    ConfigError
        Nonlinear theory, or ``lab_c0`` with ke_ZZ free.
    FitError
        The table does not match the record, or the global normal matrix is singular.
    """
    names = tuple(names)
    if not setup.theory.linear:
        raise ConfigError(f"one-stage fit: theory '{setup.theory.name}' is nonlinear; the "
                          "one-stage cross-check is for linear theories")
    if not names:
        raise ConfigError("one-stage fit: names: expected at least one free coefficient")
    if int(range_samples) < 1:
        raise ConfigError("one-stage fit: range_samples: expected a positive integer")
    labels = _global_labels(names, settings)
    k = len(labels)
    dt_s = _sample_interval(table)
    normal, proj = np.zeros((k, k)), np.zeros(k)
    yy, n_samples, n_turns, m = 0.0, 0, 0, 0
    seen = []
    for a, b in ranges(info.n_samples, int(range_samples)):
        part = _range_sums(info, demod, setup, table, names, settings, a, b, dt_s)
        if part is None or part["n"] == 0:
            continue
        normal += part["normal"]
        proj += part["proj"]
        yy += part["yy"]
        n_samples += part["n"]
        n_turns += part["turns"]
        m = part["m"]
        seen.append(part["rows"])
    rows = np.concatenate(seen) if seen else np.zeros(0, np.intp)
    n_acc = int(np.sum(table.accepted))
    if rows.size != n_acc or np.unique(rows).size != n_acc:
        raise FitError(f"{info.path}: one-stage fit: matched {np.unique(rows).size} of {n_acc} "
                       "accepted turns; the turn table does not belong to this record (or was made "
                       "with other stage-1 settings)")
    dof = n_samples - n_turns * m - k
    if dof < 1:
        raise FitError(f"{info.path}: one-stage fit: no degrees of freedom left")
    try:
        inv = invert_normal(normal, null="raise")
    except SingularMatrixError:
        raise FitError(f"{info.path}: one-stage fit: singular normal matrix (a free coefficient "
                       "or nuisance has no signal in this record)") from None
    x = inv @ proj
    chi2 = max(yy - float(proj @ x), 0.0)
    var = chi2 / dof
    cov = var * inv
    sigma_white = float(np.median(table.residual_rms[table.accepted]))
    sig = np.sqrt(np.diag(cov))
    ng = len(names)
    logger.info("one-stage fit: %d samples, %d turns, dof %d", n_samples, n_turns, dof)
    return {"coefficients": {n: {"value": float(x[i]), "sigma": float(sig[i])}
                             for i, n in enumerate(names)},
            "nuisance": {lab: {"value": float(x[i]), "sigma": float(sig[i])}
                         for i, lab in enumerate(labels) if i >= ng},
            "covariance": {"names": list(names), "matrix": cov[:ng, :ng].tolist()},
            "chi2_reduced": float(var / sigma_white ** 2) if sigma_white > 0 else float("nan"),
            "noise_rms": float(np.sqrt(var)), "dof": int(dof),
            "n_samples": int(n_samples), "n_turns_used": int(n_turns)}


def _sample_interval(table: TurnTable) -> float:
    """Typical sample interval from the accepted turns of the table, s."""
    sel = table.accepted & (table.n_valid > 1)
    if not np.any(sel):
        raise FitError("one-stage fit: no accepted turn in the stage-1 table")
    span = table.t_stop_s[sel] - table.t_start_s[sel]
    return float(np.median(span / (table.n_valid[sel] - 1)))
