"""Stages 2 and 3 of a linear theory as passes over the turn table, a segment at a time.

The per-turn rows of both stages (sidereal angle, amplitudes, weights and, for stage 3, the
design of :func:`design_columns`) are built once, in pass 1, from each segment of the
:class:`~fringe.demodulate.turn_store.TurnStore`, and kept in a :class:`RowCache`: in memory for
a record of one segment, in the fit's scratch files otherwise (so the peak memory is one
segment's, for any record length). The passes:

1. per segment: build the rows, accumulate the normal-equation parts of stage 2 (harmonics),
   of stage 3, of the Cramer-Rao reference (white per-sample noise) and, for the bootstrap,
   of each group of turns (:func:`fringe.fit.solver.normal_parts`); then solve;
2. over the cache: chi^2 of both stages at the first solutions, and the reduced chi^2 of the C
   and B rows that rescale them (:func:`fringe.fit.solver.residual_chi2`); refit from the parts;
3. over the cache: chi^2 at the final solution, the fitted model of every turn and the
   stage-2 harmonics of the coefficients' model alone (``harmonics["predicted"]``: the fitted
   and fixed coefficients without the nuisances, fitted like the data), which the diagnostics
   compare the data's harmonics with.

The weights are s_i^2 x ninv_i (:func:`noise_level`), the same as the in-memory fits use.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from fringe.conventions import HARMONIC_NAMES
from fringe.demodulate.turn_store import (
    Scratch,
    TurnStore,
    load_arrays,
    save_arrays,
    segment_bounds,
)
from fringe.errors import ConfigError, FitError
from fringe.fit.solver import NormalParts, PairWeights, fitted, normal_parts, residual_chi2, solve
from fringe.fit.turn_model import turn_model
from fringe.frames import sidereal_angle_rad

#: Turns in the running median that sets each turn's noise level (odd).
NOISE_WINDOW_TURNS = 101


def noise_level(residual_rms: NDArray) -> NDArray:
    """Per-turn noise level s_i (signal units).

    The running median of the accepted turns' residual RMS over NOISE_WINDOW_TURNS turns: a
    local per-sample level that follows slow changes of the noise but not each turn's own
    scatter (weighting by a turn's own residual variance, with nu ~ 40 degrees of freedom,
    would inflate the estimator's variance by (nu - 2)/(nu - 4) and correlate weights with
    the data).
    """
    from scipy.ndimage import median_filter

    rms = np.asarray(residual_rms, float)
    size = min(NOISE_WINDOW_TURNS, rms.size if rms.size % 2 else max(rms.size - 1, 1))
    return median_filter(rms, size=size, mode="nearest")


def segment_noise_levels(status: NDArray, residual_rms: NDArray, segment_turns: int):
    """Yield :func:`noise_level` of each segment's accepted turns, ``segment_turns`` rows at a time.

    Each segment is filtered with at least half a window of accepted turns on each side (or up
    to the record's end), so the values equal those of the whole-record filter while only a
    segment's worth is in memory.
    """
    from scipy.ndimage import median_filter

    good = status == 0
    n_acc = int(np.count_nonzero(good))
    size = min(NOISE_WINDOW_TURNS, n_acc if n_acc % 2 else max(n_acc - 1, 1))
    half, n = size // 2, status.size
    for lo, hi in segment_bounds(n, segment_turns):
        start, end, reach = lo, hi, 2 * half + 16
        while start > 0 and np.count_nonzero(good[start:lo]) < half:
            start, reach = max(0, lo - reach), 2 * reach
        reach = 2 * half + 16
        while end < n and np.count_nonzero(good[hi:end]) < half:
            end, reach = min(n, hi + reach), 2 * reach
        window = residual_rms[start:end][good[start:end]]
        left = int(np.count_nonzero(good[start:lo]))
        inside = int(np.count_nonzero(good[lo:hi]))
        yield median_filter(window, size=size, mode="nearest")[left:left + inside]


def harmonic_basis(phi_rad: NDArray) -> NDArray:
    """Columns 1, sin phi, cos phi, sin 2 phi, cos 2 phi of the C10 harmonics, (n, 5)."""
    sin1, cos1 = np.sin(phi_rad), np.cos(phi_rad)
    return np.stack([np.ones_like(phi_rad), sin1, cos1, 2 * sin1 * cos1,
                     cos1 * cos1 - sin1 * sin1], axis=1)


def _harmonic_rows(f_all, c, b):
    def rows(sl):
        f = f_all[sl]
        z = np.zeros_like(f)
        return np.concatenate([f, z], axis=1), np.concatenate([z, f], axis=1), c[sl], b[sl]

    return rows


def _design_rows(jc, jb, c, b):
    def rows(sl):
        return jc[sl], jb[sl], c[sl], b[sl]

    return rows


def design_labels(names: tuple[str, ...], settings) -> list[str]:
    """Labels of the stage-3 columns, shared with the one-stage fit.

    The free coefficients, then the nuisances (lab_B0, lab_C0, aux_CHANNEL) that ``settings``
    (a :class:`fringe.fit.FitSettings`) asks for.
    """
    labels = list(names)
    if settings.lab_b0:
        labels.append("lab_B0")
    if settings.lab_c0:
        if "ke_ZZ" in names:
            raise ConfigError("FitSettings.lab_c0: a constant C offset is degenerate with "
                              "ke_ZZ; fix ke_ZZ or drop FitSettings.lab_c0")
        labels.append("lab_C0")
    return labels + [f"aux_{ch}" for ch in settings.regress]


def design_columns(setup, t, names, table, sel, settings) -> tuple[NDArray, NDArray]:
    """Per-turn design (jc, jb) of the free coefficients and the nuisance columns.

    Columns as :func:`design_labels`, for the rows ``sel`` of ``table`` (mean times t); jc and
    jb each have shape (n, number of labels). ``lab_B0`` and ``lab_C0`` are constant offsets
    along the two-path B0 and C0 of the apparatus
    (:meth:`fringe.experiment.apparatus.Apparatus.offset_directions`): a constant B and C for
    paths 90 deg apart; for other separations lab_B0 stays orthogonal to what ke_ZZ produces.
    """
    labels = design_labels(names, settings)
    k, kk = len(names), len(labels)
    jc, jb = np.empty((t.size, kk)), np.empty((t.size, kk))
    turn_model(setup, t, names, table=table, sel=sel, mean=False, out=(jc, jb))
    ic, isn = table.settings.index("c2"), table.settings.index("s2")
    col = k
    offsets = setup.apparatus.offset_directions(setup.units)     # two-path B0, C0 directions
    if settings.lab_b0:
        jc[:, col], jb[:, col] = offsets["lab_B0"]
        col += 1
    if settings.lab_c0:
        jc[:, col], jb[:, col] = offsets["lab_C0"]
        col += 1
    for ch in settings.regress:
        jc[:, col], jb[:, col] = table.aux[ch][sel, ic], table.aux[ch][sel, isn]
        col += 1
    return jc, jb


class RowCache:
    """Per-segment arrays (name -> array), in memory or in scratch files."""

    def __init__(self, scratch: Scratch | None = None):
        self._memory: list[dict] | None = [] if scratch is None else None
        self._scratch = scratch
        self._names: list[set] = []
        self.n_segments = 0

    def append(self, arrays: dict) -> None:
        """Store the arrays of the next segment."""
        self._names.append(set(arrays))
        if self._memory is not None:
            self._memory.append(dict(arrays))
        else:
            save_arrays(self._scratch, f"rows-{self.n_segments}", arrays)
        self.n_segments += 1

    def update(self, i: int, arrays: dict) -> None:
        """Add or replace arrays of segment ``i``."""
        self._names[i] |= set(arrays)
        if self._memory is not None:
            self._memory[i].update(arrays)
        else:
            save_arrays(self._scratch, f"rows-{i}", arrays)

    def get(self, i: int, names: tuple[str, ...]) -> dict:
        """The arrays ``names`` of segment ``i`` (those stored)."""
        names = [k for k in names if k in self._names[i]]
        if self._memory is not None:
            return {k: self._memory[i][k] for k in names}
        return load_arrays(self._scratch, f"rows-{i}", names)


@dataclass
class PassesResult:
    """What the passes give (see module docstring); arrays are small (k x k)."""

    harmonics: dict
    x: NDArray | None = None
    cov_formal: NDArray | None = None
    cov_cr: NDArray | None = None
    chi2: float = 0.0
    n: int = 0
    r_c: float = 1.0
    r_b: float = 1.0
    group_parts: list | None = None
    cache: RowCache | None = None


def _weights(cache_rows: dict) -> PairWeights:
    return PairWeights(cache_rows["p00"], cache_rows["p01"], cache_rows["p11"])


def run_passes(setup, store: TurnStore, settings, free: tuple[str, ...] | None,
               scratch: Scratch | None = None, sidereal: bool = True) -> PassesResult:
    """The three passes (module docstring) for stage 2 and, with ``free``, stage 3.

    ``free`` None: stage 2 only (the medium fit runs on the whole table instead). ``sidereal``
    False skips stage 2 (too few sidereal phases, :mod:`fringe.demodulate.sessions`): the
    harmonics are then None.
    """
    levels = segment_noise_levels(store.status, store.residual_rms, store.segment_turns)
    sigma_white = store.median_accepted_rms()
    on_disk = store.on_disk and len(store.bounds()) > 1
    cache = RowCache(scratch if on_disk else None)
    kk = len(design_labels(free, settings)) if free is not None else 0
    sums = _Sums(kk)
    bootstrap = free is not None and settings.uncertainty == "bootstrap"
    done = 0                                   # accepted turns before this segment
    # one segment's harmonic basis (<= SEGMENT_TURNS x 5) is kept for passes 2 and 3
    keep_basis = len(store.bounds()) == 1 and not on_disk
    for (_, tab), level in zip(store.segments(), levels):
        rows = _first_pass_rows(setup, tab, level, settings, free, kk, sigma_white, sums,
                                keep_basis)
        cache.append(rows)
        done += rows["c"].size
        del tab, level, rows           # not alive while the next segment is read
    n = done
    x_h, inv_h = solve(*sums.harm.combine()) if sidereal else (None, None)
    out = PassesResult(harmonics={}, n=n, cache=cache)
    parts = sums.parts
    if free is not None:
        out.x, out.cov_formal = solve(*parts.combine())
        _, out.cov_cr = solve(*sums.parts_cr.combine())
        out.group_parts = ([sums.groups[g] for g in sorted(sums.groups)] if bootstrap
                           else None)
    # pass 2: chi^2 at the first solutions; row scales of stage 3
    chi2_h = rc2 = rb2 = 0.0
    for i in range(cache.n_segments):
        r = cache.get(i, ROW_NAMES)
        if "phi" not in r:
            continue
        w = _weights(r)
        if sidereal:
            chi2_h += residual_chi2(_harmonic_rows(_basis_of(r), r["c"], r["b"]), w, x_h)[0]
        if free is not None and settings.uncertainty != "formal":
            _, mc, mb = residual_chi2(_design_rows(r["jc"], r["jb"], r.get("c3", r["c"]),
                                                   r.get("b3", r["b"])), w, out.x)
            rc2, rb2 = rc2 + mc * w.size, rb2 + mb * w.size
        del r
    out.harmonics = _harmonics(x_h, inv_h, chi2_h, n, settings) if sidereal else None
    if free is None:
        return out
    if settings.uncertainty != "formal":
        # Coloured noise inflates the C and B scatter differently (a turn's curvature leaks
        # into the component even about its middle); one chi^2 factor for both would
        # understate sigma of C-only coefficients (ke_ZZ). Scale each row family by its own
        # reduced chi^2 and refit (same Gram matrices, rescaled).
        out.r_c, out.r_b = rc2 / n, rb2 / n
        if not (out.r_c > 0 and out.r_b > 0):
            raise FitError("stage 3: the residuals of C or B vanish; cannot scale the weights "
                           "by the scatter (use FitSettings.uncertainty formal for noise-free "
                           "data)")
        out.x, out.cov_formal = solve(*parts.combine(np.sqrt(out.r_c), np.sqrt(out.r_b)))
    # pass 3: chi^2 at the final solution, the fitted model and the harmonics it predicts
    d_c, d_b = np.sqrt(out.r_c), np.sqrt(out.r_b)
    predicted = NormalParts.zeros(10)
    for i in range(cache.n_segments):
        r = cache.get(i, ROW_NAMES)
        if "jc" not in r:
            continue
        provider = _design_rows(r["jc"], r["jb"], r.get("c3", r["c"]), r.get("b3", r["b"]))
        w = _weights(r)
        out.chi2 += residual_chi2(provider, w, out.x, d_c, d_b)[0]
        mc, mb = fitted(provider, w.size, out.x)
        cache.update(i, {"model_c": mc, "model_b": mb})
        pc, pb = _coefficient_model(r, out.x[:len(free)])
        predicted.add(normal_parts(_harmonic_rows(_basis_of(r), pc, pb), w, 10))
        del r, provider
    if out.harmonics is not None:          # None: stage 2 skipped (too few sidereal phases)
        out.harmonics["predicted"] = solve(*predicted.combine())[0].tolist()
    return out


#: The per-turn rows passes 2 and 3 read from the cache ("f": the harmonic basis, when kept).
ROW_NAMES = ("phi", "f", "c", "b", "c3", "b3", "jc", "jb", "p00", "p01", "p11")


def _basis_of(rows: dict) -> NDArray:
    """The harmonic basis of a segment's rows: kept from pass 1, or built from phi."""
    return rows["f"] if "f" in rows else harmonic_basis(rows["phi"])


def _coefficient_model(rows: dict, x: NDArray) -> tuple[NDArray, NDArray]:
    """Per-turn (C, B) of the fitted coefficients ``x`` plus the fixed ones, no nuisances."""
    k = x.size
    pc, pb = rows["jc"][:, :k] @ x, rows["jb"][:, :k] @ x
    if "c3" in rows:                       # the fixed coefficients' model was subtracted
        pc, pb = pc + rows["c"] - rows["c3"], pb + rows["b"] - rows["b3"]
    return pc, pb


def _harmonics(x_h, inv_h, chi2_h, n, settings) -> dict:
    """The stage-2 harmonics, their covariance scaled by the reduced chi^2.

    From fewer than SMALL_SAMPLE_DOF degrees of freedom the covariance is also widened by the
    Student-t factor.
    """
    from fringe.demodulate.sessions import student_factor

    dof = max(2 * n - 10, 1)
    red_h = chi2_h / dof
    cov_h = inv_h * max(red_h, 0.0)
    if settings.uncertainty == "reduced-chi2" and dof < SMALL_SAMPLE_DOF:
        cov_h = cov_h * student_factor(dof) ** 2
    return {"names": list(HARMONIC_NAMES), "value": x_h.tolist(),
            "sigma": np.sqrt(np.diag(cov_h)).tolist(), "covariance": cov_h.tolist(),
            "chi2_reduced": red_h}


#: Below this many residual degrees of freedom the scatter-scaled 1 sigma of stages 2 and 3 is
#: widened by the Student-t factor (:func:`fringe.demodulate.sessions.student_factor`; at 100 dof
#: the factor is 1.0050, left out above).
SMALL_SAMPLE_DOF = 100


class _Sums:
    """Normal-equation parts summed over the segments in pass 1."""

    def __init__(self, k: int):
        self.harm = NormalParts.zeros(10)
        self.parts = NormalParts.zeros(k)
        self.parts_cr = NormalParts.zeros(k)
        self.groups: dict[int, NormalParts] = {}
        self.t_first: float | None = None


def _first_pass_rows(setup, tab, level, settings, free, kk, sigma_white, sums: _Sums,
                     keep_basis: bool = False) -> dict:
    """Rows of one segment's accepted turns (for the cache), their parts added to ``sums``.

    ``keep_basis``: the harmonic basis is kept in the rows ("f") for passes 2 and 3.
    """
    sel = tab.accepted
    t = tab.t_mid_s[sel]
    rows = {"c": tab.C[sel], "b": tab.B[sel]}
    if not t.size:
        return rows
    w = PairWeights.from_cov(level[:, None, None] ** 2 * tab.ninv_2[sel])
    rows.update(p00=w.p00, p01=w.p01, p11=w.p11,
                phi=sidereal_angle_rad(setup.epoch, t, setup.site.east_longitude_rad))
    f = harmonic_basis(rows["phi"])
    if keep_basis:
        rows["f"] = f
    sums.harm.add(normal_parts(_harmonic_rows(f, rows["c"], rows["b"]), w, 10))
    if free is None:
        return rows
    c3, b3 = rows["c"], rows["b"]
    if settings.fixed:
        _, fc, fb = turn_model(setup, t, params=settings.fixed, table=tab, sel=sel, mean=False)
        c3, b3 = c3 - fc, b3 - fb
        rows.update(c3=c3, b3=b3)
    jc, jb = design_columns(setup, t, free, tab, sel, settings)
    rows.update(jc=jc, jb=jb)
    provider = _design_rows(jc, jb, c3, b3)
    sums.parts.add(normal_parts(provider, w, kk))
    w_cr = PairWeights.from_cov(tab.ninv_2[sel], scale=sigma_white ** 2)
    sums.parts_cr.add(normal_parts(provider, w_cr, kk))
    if settings.uncertainty == "bootstrap":
        sums.t_first = t[0] if sums.t_first is None else sums.t_first
        _add_groups(sums.groups, provider, w, kk, t, sums.t_first, settings.bootstrap_days)
    return rows


def _add_groups(groups, provider, w, k, t, t_first, days):
    """Add this segment's turns to the bootstrap groups (days of turns since t_first)."""
    gid = np.floor((t - t_first) / (86400.0 * days)).astype(int)
    edges = np.concatenate([[0], np.flatnonzero(np.diff(gid)) + 1, [t.size]])
    for lo, hi in zip(edges[:-1], edges[1:]):
        part = normal_parts(provider, w, k, slice(int(lo), int(hi)))
        g = int(gid[lo])
        if g in groups:
            groups[g].add(part)
        else:
            groups[g] = part
