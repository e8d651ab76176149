"""Stage 1: per-turn demodulation of a rotating-apparatus record.

The record is cut into turns (blocks) at the instants the turntable angle theta = pi - A (C7)
passes its starting value, and at every time gap longer than ``max_gap_s``. Each block is fitted
by linear least squares with

    y(t) = a0 + a1 tau [+ a2 tau^2] + c1 cos theta + s1 sin theta + C cos 2 theta + B sin 2 theta
           [+ 3 theta, 4 theta terms],      tau = (t - t_mid)/(half span of the block),

using the recorded azimuth (not an assumed rate). NaN samples are left out. All blocks of a
chunk are solved in one pass: per-sample products are summed per block (``np.add.reduceat``)
into normal matrices and the batch is solved with ``np.linalg.solve``; no Python loop runs over
blocks. Auxiliary channels are demodulated with the same design.

Each block also records the (C, B) response of the fit to the slowly varying unit columns
tau^j cos 2 theta, tau^j sin 2 theta (j = 1 ... LEAK_ORDER) and tau^j (drift order < j <=
LEAK_ORDER) (``TurnTable.leak``, :func:`leak_terms`). Stage 3 uses them to model the per-turn
amplitudes of a signal that changes during the turn (sidereal and orbital motion) exactly,
instead of freezing it at the turn's mean time (which errs by about P_turn / P_sidereal of the
signal, see :func:`fringe.fit.turn_model`).

Rejection rules, counted in :class:`TurnTable`:

* **partial**: fewer than ``min_samples`` valid samples, an angular gap (largest gap in
  theta mod 2 pi among the valid samples) above ``max_angle_gap_deg``, or a singular block;
* **glitch**: residual RMS above median + ``glitch_threshold`` x 1.4826 x MAD of the residual
  RMS over all otherwise-good blocks (applied once the whole record is demodulated).

A block belongs to the range in which it *starts*; ranges read ahead until their last block is
complete, so any split of the record into ranges (local chunks or dask tasks) gives the same
blocks and the same numbers.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields

import numpy as np
from numpy.typing import NDArray

from .errors import ConfigError, FitError

DRIFT_TERMS = {"offset": 1, "linear": 2, "quadratic": 3}

#: Highest power of tau whose leakage into (C, B) is recorded per block (TurnTable.leak).
LEAK_ORDER = 3


@dataclass(frozen=True)
class DemodSettings:
    """Stage-1 settings.

    Parameters
    ----------
    drift : {"offset", "linear", "quadratic"}
        Per-block drift polynomial.
    max_harmonic : int
        Highest harmonic of theta in the block model (2, 3 or 4); 1 theta is always included.
    max_angle_gap_deg : float
        Largest allowed gap in turntable angle within a block, degrees.
    min_samples : int
        Least number of valid samples in a block.
    max_gap_s : float or None
        A time gap longer than this starts a new block, s (default: a quarter of the estimated
        turn period).
    glitch_threshold : float
        Robust rejection threshold in units of the MAD-estimated sigma (see module docstring).
    """

    drift: str = "linear"
    max_harmonic: int = 2
    max_angle_gap_deg: float = 60.0
    min_samples: int = 12
    max_gap_s: float | None = None
    glitch_threshold: float = 5.0

    def __post_init__(self):
        if self.drift not in DRIFT_TERMS:
            raise ConfigError(f"demodulation: drift: expected one of {', '.join(DRIFT_TERMS)}, "
                              f"got {self.drift!r}")
        if self.max_harmonic not in (2, 3, 4):
            raise ConfigError(f"demodulation: max_harmonic: expected 2, 3 or 4, "
                              f"got {self.max_harmonic!r}")
        if not 0 < self.max_angle_gap_deg <= 360:
            raise ConfigError("demodulation: max_angle_gap_deg: expected a value in (0, 360]")
        if self.glitch_threshold <= 0:
            raise ConfigError("demodulation: glitch_threshold: expected a positive number")

    @property
    def term_names(self) -> tuple[str, ...]:
        drift = ("a0", "a1", "a2")[:DRIFT_TERMS[self.drift]]
        harm = []
        for m in range(1, self.max_harmonic + 1):
            harm += [f"c{m}", f"s{m}"]
        return drift + tuple(harm)

    @property
    def n_terms(self) -> int:
        return len(self.term_names)

    def index(self, name: str) -> int:
        return self.term_names.index(name)

    def to_dict(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self)}


@dataclass
class TurnTable:
    """Per-block results of stage 1 (arrays of length n_blocks unless noted).

    Attributes
    ----------
    t_mid_s : mean sample time of the block, s after the epoch
    t_start_s, t_stop_s : first and last valid sample times, s
    n_valid : valid samples used
    coef : (n_blocks, p) fitted block-model coefficients (``settings.term_names``), signal units
    ninv_2 : (n_blocks, 2, 2) the (C, B) block of the inverse normal matrix (unscaled)
    residual_rms : RMS of the block residuals, signal units (dof-corrected)
    angle_gap_deg : largest angular gap
    status : 0 accepted, 1 partial, 2 glitch
    aux : dict name -> (n_blocks, p) coefficients of auxiliary channels
    leak : (n_blocks, 2, q) fitted (C, B) of the unit columns of :func:`leak_terms`, or None
    """

    t_mid_s: NDArray
    t_start_s: NDArray
    t_stop_s: NDArray
    n_valid: NDArray
    coef: NDArray
    ninv_2: NDArray
    residual_rms: NDArray
    angle_gap_deg: NDArray
    status: NDArray
    settings: DemodSettings
    aux: dict = field(default_factory=dict)
    leak: NDArray | None = None

    ACCEPTED, PARTIAL, GLITCH = 0, 1, 2

    @property
    def n_blocks(self) -> int:
        return int(self.t_mid_s.size)

    @property
    def accepted(self) -> NDArray:
        return self.status == self.ACCEPTED

    @property
    def C(self) -> NDArray:
        """cos 2 theta amplitudes, signal units."""
        return self.coef[:, self.settings.index("c2")]

    @property
    def B(self) -> NDArray:
        """sin 2 theta amplitudes, signal units."""
        return self.coef[:, self.settings.index("s2")]

    def formal_cov(self) -> NDArray:
        """Per-block formal covariance of (C, B): residual variance x ninv_2, (n, 2, 2)."""
        return self.residual_rms[:, None, None] ** 2 * self.ninv_2

    def counts(self) -> dict:
        return {"n_blocks": self.n_blocks, "n_accepted": int(np.sum(self.status == 0)),
                "n_rejected_partial": int(np.sum(self.status == 1)),
                "n_rejected_glitch": int(np.sum(self.status == 2))}

    @staticmethod
    def concatenate(tables: list[TurnTable], settings: DemodSettings) -> TurnTable:
        tables = [t for t in tables if t.n_blocks]
        if not tables:
            raise FitError("demodulation: no complete turn found in the record")
        kw = {f.name: np.concatenate([getattr(t, f.name) for t in tables])
              for f in fields(TurnTable) if f.name not in ("settings", "aux", "leak")}
        aux = {k: np.concatenate([t.aux[k] for t in tables]) for k in tables[0].aux}
        leak = (np.concatenate([t.leak for t in tables])
                if all(t.leak is not None for t in tables) else None)
        return TurnTable(settings=settings, aux=aux, leak=leak, **kw)

    def apply_glitch_rule(self) -> None:
        """Mark glitched blocks (module docstring rule) among the non-partial ones."""
        good = self.status == self.ACCEPTED
        if np.sum(good) < 5:
            return
        r = self.residual_rms[good]
        med = np.median(r)
        mad = 1.4826 * np.median(np.abs(r - med))
        limit = med + self.settings.glitch_threshold * max(mad, 1e-12 * med)
        self.status[good & (self.residual_rms > limit)] = self.GLITCH


def leak_terms(settings: DemodSettings) -> tuple[tuple[str, int], ...]:
    """The unit columns of ``TurnTable.leak``, in order.

    ("C", j) is tau^j cos 2 theta, ("B", j) is tau^j sin 2 theta (j = 1 ... LEAK_ORDER) and
    ("A", j) is tau^j for the powers above the drift polynomial (up to LEAK_ORDER); tau is the
    block's normalised time (module docstring). Lower powers are in the block model, whose
    (C, B) responses are exactly 1 (cos 2 theta -> C, sin 2 theta -> B) or 0.
    """
    nd = DRIFT_TERMS[settings.drift]
    return (tuple(("C", j) for j in range(1, LEAK_ORDER + 1))
            + tuple(("B", j) for j in range(1, LEAK_ORDER + 1))
            + tuple(("A", j) for j in range(nd, LEAK_ORDER + 1)))


def turn_boundaries(theta_rad: NDArray, theta0_rad: float, t_s: NDArray, max_gap_s: float,
                    theta_prev: float | None = None, t_prev: float | None = None) -> NDArray:
    """Boolean array: True where a new block starts at sample i (before sample i).

    A block starts where theta - theta0 crosses a multiple of 2 pi (either sense), or after a time
    gap longer than ``max_gap_s``. ``theta_prev``/``t_prev`` give the sample before the first one.
    """
    th = np.asarray(theta_rad, float)
    if theta_prev is None:
        prev_th, prev_t = np.concatenate([[th[0]], th[:-1]]), np.concatenate([[t_s[0]], t_s[:-1]])
    else:
        prev_th = np.concatenate([[theta_prev], th[:-1]])
        prev_t = np.concatenate([[t_prev], t_s[:-1]])
    psi_prev = np.mod(prev_th - theta0_rad, 2 * np.pi)
    step = np.mod(th - prev_th + np.pi, 2 * np.pi) - np.pi
    s = psi_prev + step
    out = (s >= 2 * np.pi) | (s < 0.0) | ((t_s - prev_t) > max_gap_s)
    if theta_prev is None:
        out[0] = False
    return out


def _harmonics(theta: NDArray, max_harmonic: int) -> list[NDArray]:
    z1 = np.exp(1j * theta)
    cols, z = [], z1
    for _ in range(max_harmonic):
        cols += [z.real, z.imag]
        z = z * z1
    return cols


def _padded_products(x, v, starts, counts):
    lmax = int(counts.max())
    offs = np.arange(lmax)
    idx = starts[:, None] + offs[None, :]
    pad = offs[None, :] >= counts[:, None]
    idx[pad] = 0
    xp = x[idx]
    xp[pad] = 0.0
    vp = v[idx]
    vp[pad] = 0.0
    xt = np.swapaxes(xp, 1, 2)
    return np.matmul(xt, xp), np.matmul(xt, vp)


def _block_sums(x: NDArray, v: NDArray, starts: NDArray, counts: NDArray
                ) -> tuple[NDArray, NDArray]:
    """Per-block X_bᵀ X_b and X_bᵀ V_b for contiguous blocks.

    Blocks are laid into zero-padded (n_blocks, L, .) arrays and multiplied with batched matrix
    products (BLAS), several times faster than summing per-sample outer products. Blocks of very
    unequal lengths are grouped by length (powers of two) so padding stays below 2x. A block's
    sums do not depend on its neighbours (trailing zeros add nothing), so any split of the
    record into ranges gives the same numbers.
    """
    n, p = x.shape
    nb = starts.size
    if nb == 0:
        return np.zeros((0, p, p)), np.zeros((0, p, v.shape[1]))
    if nb * int(counts.max()) <= 2 * n + 64:
        return _padded_products(x, v, starts, counts)
    normal = np.zeros((nb, p, p))
    rhs = np.zeros((nb, p, v.shape[1]))
    octave = np.ceil(np.log2(np.maximum(counts, 1))).astype(int)
    for o in np.unique(octave):
        m = octave == o
        normal[m], rhs[m] = _padded_products(x, v, starts[m], counts[m])
    return normal, rhs


def demodulate_blocks(t_s: NDArray, azimuth_rad: NDArray, y: NDArray, block_starts: NDArray,
                      settings: DemodSettings, aux: dict[str, NDArray] | None = None
                      ) -> TurnTable:
    """Fit every block of a contiguous sample range in one vectorised pass.

    Parameters
    ----------
    t_s, azimuth_rad, y : ndarray, shape (n,)
        Times (s), azimuths of path 1 (rad, C7) and signal; y may hold NaN.
    block_starts : ndarray of int
        Index of the first sample of each block (increasing, first = 0); the last block ends at n.
    settings : DemodSettings
    aux : dict, optional
        Auxiliary channels (name -> (n,) array) demodulated with the same design.
    """
    aux = aux or {}
    n = t_s.size
    nb = block_starts.size
    counts = np.diff(np.append(block_starts, n))
    bid = np.repeat(np.arange(nb), counts)
    valid = np.isfinite(y)
    for a in aux.values():
        valid &= np.isfinite(a)
    theta = np.pi - azimuth_rad

    # block time centre and half span from valid samples
    vcount = np.bincount(bid, weights=valid, minlength=nb)
    safe = np.maximum(vcount, 1)
    t_mid = np.bincount(bid, weights=np.where(valid, t_s, 0.0), minlength=nb) / safe
    t_lo = np.full(nb, np.inf)
    t_hi = np.full(nb, -np.inf)
    np.minimum.at(t_lo, bid[valid], t_s[valid])
    np.maximum.at(t_hi, bid[valid], t_s[valid])
    half = np.maximum(0.5 * (t_hi - t_lo), 1e-9)
    tau = np.where(valid, (t_s - t_mid[bid]) / half[bid], 0.0)

    nd = DRIFT_TERMS[settings.drift]
    cols = [np.ones(n), tau, tau * tau][:nd] + _harmonics(theta, settings.max_harmonic)
    x = np.stack(cols, axis=1) * valid[:, None]                      # (n, p)
    p = x.shape[1]
    starts = block_starts.astype(np.intp)
    y0 = np.where(valid, y, 0.0)
    aux_names = list(aux)
    unit = {"C": cols[nd + 2], "B": cols[nd + 3], "A": 1.0}
    tpow = {1: tau, 2: tau * tau, 3: tau * tau * tau}
    vectors = np.stack([y0] + [np.where(valid, aux[name], 0.0) for name in aux_names]
                       + [unit[kind] * tpow[j] for kind, j in leak_terms(settings)], axis=1)
    normal, rhs = _block_sums(x, vectors, starts, counts)     # (nb, p, p), (nb, p, r)

    # angular coverage: largest gap of theta mod 2 pi among valid samples of each block
    psi = np.mod(theta, 2 * np.pi)
    order = np.lexsort((psi, bid))
    ob, op, ov = bid[order], psi[order], valid[order]
    ob, op = ob[ov], op[ov]
    gap = np.zeros(nb)
    if ob.size:
        d = np.diff(op)
        same = ob[1:] == ob[:-1]
        np.maximum.at(gap, ob[1:][same], d[same])
        first = np.ones(ob.size, bool)
        first[1:] = ~same
        last = np.ones(ob.size, bool)
        last[:-1] = ~same
        wrap = op[first] + 2 * np.pi - op[last]
        np.maximum.at(gap, ob[first], wrap)
    gap_deg = np.degrees(np.where(vcount > 0, gap, 2 * np.pi))

    # solve, with rank guard
    scale = np.sqrt(np.maximum(np.einsum("bii->bi", normal), 1e-300))
    nn = normal / scale[:, :, None] / scale[:, None, :]
    ok = (vcount >= max(settings.min_samples, p + 2)) & (gap_deg <= settings.max_angle_gap_deg)
    eig_min = np.full(nb, 0.0)
    if np.any(ok):
        eig_min[ok] = np.linalg.eigvalsh(nn[ok])[:, 0]
    ok &= eig_min > 1e-8
    nn_safe = np.where(ok[:, None, None], nn, np.eye(p))
    inv = np.linalg.inv(nn_safe) / scale[:, :, None] / scale[:, None, :]
    sol = np.einsum("bij,bjk->bik", inv, rhs)                         # (nb, p, 1 + n_aux)
    coef = np.where(ok[:, None], sol[:, :, 0], np.nan)

    resid = np.where(valid, y0 - np.einsum("np,np->n", x, np.nan_to_num(coef)[bid]), 0.0)
    chi2 = np.bincount(bid, weights=resid * resid, minlength=nb)
    dof = np.maximum(vcount - p, 1)
    rms = np.where(ok, np.sqrt(chi2 / dof), np.nan)
    ic, isn = settings.index("c2"), settings.index("s2")
    ninv_2 = inv[:, [ic, isn]][:, :, [ic, isn]]
    status = np.where(ok, TurnTable.ACCEPTED, TurnTable.PARTIAL).astype(np.int8)
    aux_out = {name: np.where(ok[:, None], sol[:, :, 1 + j], np.nan)
               for j, name in enumerate(aux_names)}
    leak = sol[:, [ic, isn], 1 + len(aux_names):]
    leak = np.where(ok[:, None, None], leak, np.nan)
    return TurnTable(t_mid_s=t_mid, t_start_s=np.where(vcount > 0, t_lo, np.nan),
                     t_stop_s=np.where(vcount > 0, t_hi, np.nan), n_valid=vcount.astype(np.int64),
                     coef=coef, ninv_2=ninv_2, residual_rms=rms, angle_gap_deg=gap_deg,
                     status=status, settings=settings, aux=aux_out, leak=leak)
