"""Figures of a fit result (matplotlib, object-oriented: no pyplot, no global backend change).

Which function for which figure:

* :func:`plot_amplitude_vs_sidereal` -- per-turn 2-theta amplitude (C or B) against the sidereal
  angle: binned means with error bars, the fitted model binned the same way, the C10 curve.
* :func:`plot_spectrum` -- amplitude spectrum of the per-turn C and B series in cycles per
  sidereal day, lines at 1 and 2 and their annual sidebands marked (:func:`amplitude_spectrum`).
* :func:`plot_limits` -- |bound| of each coefficient (1 and 2 sigma) beside earlier results,
  log scale.
* :func:`plot_correlation` -- the correlation matrix as an image with its numbers.
* :func:`plot_residual_adev` -- overlapping Allan deviation of the per-turn residuals.

Every plot function takes ``ax=None`` (then it makes a new :class:`matplotlib.figure.Figure`)
and returns the axes; saving is the caller's job. The numerical helpers
(:func:`binned_by_phase`, :func:`amplitude_spectrum`, :func:`regular_grid`) are pure array
functions.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import ArrayLike, NDArray

from fringe.constants import OMEGA_EARTH_RAD_S, OMEGA_ORBIT_RAD_S, STELLAR_DAY_S
from fringe.errors import ConfigError
from fringe.linalg import correlation_from_covariance
from fringe.noise.allan import overlapping_adev

if TYPE_CHECKING:
    from fringe.io.fit_result import FitResult

__all__ = ["ANNUAL_CYCLES_PER_SIDEREAL_DAY", "amplitude_spectrum", "binned_by_phase",
           "new_axes", "plot_amplitude_vs_sidereal", "plot_correlation", "plot_limits",
           "plot_residual_adev", "plot_spectrum", "regular_grid", "report_figure_names",
           "report_figures"]

#: Orbital frequency in cycles per sidereal (ERA) day: the annual sideband offset.
ANNUAL_CYCLES_PER_SIDEREAL_DAY = OMEGA_ORBIT_RAD_S / OMEGA_EARTH_RAD_S

#: Above this many turns the spectrum is computed from time-binned means (see
#: :func:`amplitude_spectrum`).
SPECTRUM_MAX_POINTS = 20_000
#: Most frequencies evaluated by :func:`amplitude_spectrum`.
SPECTRUM_MAX_FREQS = 8_000


def new_axes(figsize=(6.4, 4.0), ncols: int = 1):
    """A new Figure (no pyplot) and its axes (one, or an array of ``ncols``)."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=figsize)
    axes = fig.subplots(1, ncols)
    return axes


# ------------------------------------------------------------------------------ computation

def binned_by_phase(phi_rad: ArrayLike, y: ArrayLike, sigma_y: ArrayLike, n_bins: int = 24
                    ) -> tuple[NDArray, NDArray, NDArray, NDArray]:
    """Weighted means of ``y`` in equal bins of the sidereal angle.

    The error of each mean is 1/sqrt(sum w) (w = 1/sigma^2), scaled up by sqrt(chi2/dof) of the
    scatter within the bin when that exceeds 1 (Birge ratio; common practice).

    Parameters
    ----------
    phi_rad : array_like, (n,)
        Sidereal angle (C5), rad (any range; taken mod 2 pi).
    y, sigma_y : array_like, (n,)
        Values and their 1-sigma uncertainties (> 0), same unit.
    n_bins : int

    Returns
    -------
    centre_rad, mean, err : ndarray, (n_bins,)
        Bin centres (rad) and weighted means with errors (NaN for an empty bin).
    count : ndarray of int, (n_bins,)
    """
    phi = np.mod(np.asarray(phi_rad, dtype=float), 2.0 * np.pi)
    y = np.asarray(y, dtype=float)
    w = 1.0 / np.square(np.asarray(sigma_y, dtype=float))
    k = np.minimum((phi / (2.0 * np.pi) * n_bins).astype(int), n_bins - 1)
    count = np.bincount(k, minlength=n_bins)
    sw = np.bincount(k, w, n_bins)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = np.bincount(k, w * y, n_bins) / sw
        chi2 = np.bincount(k, w * (y - mean[k]) ** 2, n_bins)
        birge = np.sqrt(np.maximum(1.0, chi2 / np.maximum(count - 1, 1)))
        err = birge / np.sqrt(sw)
    mean[count == 0] = np.nan
    err[count == 0] = np.nan
    centre = (np.arange(n_bins) + 0.5) * 2.0 * np.pi / n_bins
    return centre, mean, err, count


def _time_binned(t: NDArray, y: NDArray, w: NDArray, width: float):
    k = np.floor((t - t[0]) / width).astype(np.int64)
    _, inv = np.unique(k, return_inverse=True)
    sw = np.bincount(inv, w)
    return np.bincount(inv, w * t) / sw, np.bincount(inv, w * y) / sw, sw


def amplitude_spectrum(t_s: ArrayLike, y: ArrayLike, sigma_y: ArrayLike | None = None, *,
                       f_max_cpsd: float = 2.5, oversample: int = 5
                       ) -> tuple[NDArray, NDArray, float]:
    """Least-squares amplitude spectrum of an unevenly sampled series.

    At each frequency f, ``y`` is fitted (weights 1/sigma^2) with m + a cos 2 pi f t +
    b sin 2 pi f t and the amplitude sqrt(a^2 + b^2) is returned, so a line
    ``Cs1 sin phi + Cc1 cos phi`` appears at 1 cycle per sidereal day with height
    sqrt(Cs1^2 + Cc1^2). Frequencies run from 1/span to ``f_max_cpsd`` in steps of
    1/(oversample * span). Series longer than :data:`SPECTRUM_MAX_POINTS` are first averaged in
    time bins of 1/(20 f_max) sidereal day, which lowers an amplitude at f by the factor
    sin(x)/x with x = pi f / (20 f_max), at least 0.995 up to f_max.

    Parameters
    ----------
    t_s : array_like, (n,)
        Times, s (ascending).
    y : array_like, (n,)
        Values (any unit).
    sigma_y : array_like, (n,), optional
        1-sigma uncertainties (> 0); default equal weights.
    f_max_cpsd : float
        Highest frequency, cycles per sidereal day.
    oversample : int

    Returns
    -------
    f_cpsd : ndarray
        Frequencies, cycles per sidereal day.
    amplitude : ndarray
        Amplitudes, unit of ``y``.
    noise_mean : float
        Mean amplitude expected from white noise of the given sigmas, sqrt(pi / sum w)
        (mean of a Rayleigh variable with per-component sigma sqrt(2 / sum w)).
    """
    t = np.asarray(t_s, dtype=float) / STELLAR_DAY_S
    y = np.asarray(y, dtype=float)
    w = np.ones_like(y) if sigma_y is None else 1.0 / np.square(np.asarray(sigma_y, float))
    if t.size < 4:
        raise ConfigError(f"spectrum: expected at least 4 points, got {t.size}")
    if t.size > SPECTRUM_MAX_POINTS:
        t, y, w = _time_binned(t, y, w, 1.0 / (20.0 * f_max_cpsd))
    span = float(t[-1] - t[0])
    if not span > 0:
        raise ConfigError("spectrum: t_s: expected a positive time span")
    df = max(1.0 / (oversample * span), (f_max_cpsd - 1.0 / span) / SPECTRUM_MAX_FREQS)
    f = np.arange(1.0 / span, f_max_cpsd + 0.5 * df, df)
    t = t - t.mean()
    amp = np.empty(f.size)
    step = max(1, 1_000_000 // t.size)
    for i in range(0, f.size, step):
        x = 2.0 * np.pi * np.outer(f[i:i + step], t)
        c, s = np.cos(x), np.sin(x)
        m = np.empty((x.shape[0], 3, 3))
        m[:, 0, 0] = w.sum()
        m[:, 0, 1] = m[:, 1, 0] = c @ w
        m[:, 0, 2] = m[:, 2, 0] = s @ w
        m[:, 1, 1] = (c * c) @ w
        m[:, 2, 2] = (s * s) @ w
        m[:, 1, 2] = m[:, 2, 1] = (c * s) @ w
        rhs = np.stack([np.full(x.shape[0], w @ y), c @ (w * y), s @ (w * y)], axis=-1)
        sol = np.linalg.solve(m, rhs[..., None])[..., 0]
        amp[i:i + step] = np.hypot(sol[:, 1], sol[:, 2])
    return f, amp, float(np.sqrt(np.pi / w.sum()))


def regular_grid(t_s: ArrayLike, y: ArrayLike, step_s: float) -> tuple[NDArray, int]:
    """Place samples on a regular time grid of ``step_s``; missing slots are NaN.

    Each sample goes to slot round((t - t[0]) / step). A second sample in an occupied slot is
    dropped and counted.

    Returns
    -------
    y_grid : ndarray
        Values on the grid, NaN where no sample fell.
    n_dropped : int
    """
    t = np.asarray(t_s, dtype=float)
    y = np.asarray(y, dtype=float)
    if not step_s > 0:
        raise ConfigError(f"residual grid: step_s: expected a positive number, got {step_s!r}")
    k = np.rint((t - t.min()) / step_s).astype(np.int64)
    grid = np.full(int(k.max()) + 1, np.nan)
    uniq, first = np.unique(k, return_index=True)
    grid[uniq] = y[first]
    return grid, int(t.size - uniq.size)


# ----------------------------------------------------------------------------------- plots

def plot_amplitude_vs_sidereal(phi_rad: ArrayLike, amplitude: ArrayLike, sigma: ArrayLike,
                               model: ArrayLike, *, name: str, units: str,
                               harmonics: Mapping[str, float] | None = None,
                               n_bins: int = 24, ax=None):
    """Per-turn amplitude ``name`` (C or B) against sidereal angle, with the fitted model.

    Parameters
    ----------
    phi_rad, amplitude, sigma, model : array_like, (n,)
        Sidereal angle (rad), per-turn amplitude, its 1-sigma, and the fitted coefficient
        model at each turn (``model_C``/``model_B``), amplitudes in ``units``.
    name : {"C", "B"}
    harmonics : mapping, optional
        C10 harmonic values (``{"C0": .., "Cs1": .., ...}``); draws the C10 curve.
    """
    if ax is None:
        ax = new_axes()
    centre, mean, err, _ = binned_by_phase(phi_rad, amplitude, sigma, n_bins)
    _, mod, _, _ = binned_by_phase(phi_rad, model, np.ones_like(np.asarray(model, float)),
                                   n_bins)
    deg = np.degrees(centre)
    ax.errorbar(deg, mean, yerr=err, fmt="o", ms=4, capsize=2, color="C0",
                label=f"{name}: binned mean ± 1σ")
    ax.plot(deg, mod, "-", color="C3", lw=1.5, label="fitted model (same bins)")
    if harmonics:
        p = np.linspace(0.0, 2.0 * np.pi, 361)
        h = {k: float(harmonics.get(f"{name}{k}", 0.0)) for k in ("0", "s1", "c1", "s2", "c2")}
        curve = (h["0"] + h["s1"] * np.sin(p) + h["c1"] * np.cos(p) + h["s2"] * np.sin(2 * p)
                 + h["c2"] * np.cos(2 * p))
        ax.plot(np.degrees(p), curve, "--", color="0.4", lw=1,
                label="C10 harmonics of the fit")
    ax.axhline(0.0, color="k", lw=0.5)
    ax.set_xlim(0, 360)
    ax.set_xticks(np.arange(0, 361, 60))
    ax.set_xlabel("sidereal angle φ [deg]")
    ax.set_ylabel(f"{name} (2θ amplitude) [{units}]")
    ax.legend(fontsize=7)
    return ax


def plot_spectrum(t_s: ArrayLike, series: Mapping[str, tuple[ArrayLike, ArrayLike]], *,
                  units: str, f_max_cpsd: float = 2.5, ax=None):
    """Amplitude spectra of per-turn series (``{"C": (y, sigma), "B": (y, sigma)}``).

    Solid lines mark 1 and 2 cycles per sidereal day, dotted lines their annual sidebands
    (+- :data:`ANNUAL_CYCLES_PER_SIDEREAL_DAY`).
    """
    if ax is None:
        ax = new_axes()
    for i, (label, (y, s)) in enumerate(series.items()):
        f, amp, noise = amplitude_spectrum(t_s, y, s, f_max_cpsd=f_max_cpsd)
        ax.plot(f, amp, color=f"C{i}", lw=1, label=label)
        ax.axhline(noise, color=f"C{i}", lw=0.8, ls=":",
                   label=f"{label}: white-noise mean level")
    fa = ANNUAL_CYCLES_PER_SIDEREAL_DAY
    for line in (1.0, 2.0):
        ax.axvline(line, color="k", lw=0.8, alpha=0.6)
        for sb in (line - fa, line + fa):
            ax.axvline(sb, color="k", lw=0.6, ls=":", alpha=0.6)
    ax.set_xlim(0, f_max_cpsd)
    ax.set_ylim(bottom=0)
    ax.set_xlabel("frequency [cycles per sidereal day]")
    ax.set_ylabel(f"amplitude [{units}]")
    ax.legend(fontsize=7)
    return ax


def plot_limits(entries: Sequence[Mapping], ax=None):
    """Absolute bounds |value| + 1 sigma (thick) and + 2 sigma (thin), log scale.

    Parameters
    ----------
    entries : sequence of mapping
        ``{"label": str, "value": float, "sigma": float, "ours": bool}``, top to bottom.
    """
    if ax is None:
        ax = new_axes(figsize=(6.4, 0.6 + 0.32 * max(len(entries), 1)))
    if not entries:
        ax.text(0.5, 0.5, "no coefficients", ha="center", va="center",
                transform=ax.transAxes)
        return ax
    b1 = np.array([abs(e["value"]) + e["sigma"] for e in entries], dtype=float)
    b2 = np.array([abs(e["value"]) + 2.0 * e["sigma"] for e in entries], dtype=float)
    positive = b2[b2 > 0]
    top = positive.max() if positive.size else 1.0
    lo = (positive.min() if positive.size else 1.0) / 10.0
    y = np.arange(len(entries))[::-1]
    for yi, e, x1, x2 in zip(y, entries, b1, b2, strict=True):
        color = "C0" if e.get("ours") else "0.45"
        ax.plot([lo, max(x2, lo)], [yi, yi], color=color, lw=1.2)
        ax.plot([lo, max(x1, lo)], [yi, yi], color=color, lw=5, solid_capstyle="butt")
        if abs(e["value"]) > lo:
            ax.plot([abs(e["value"])], [yi], "|", color="k", ms=9)
    ax.set_xscale("log")
    ax.set_xlim(lo, top * 3.0)
    ax.set_yticks(y, [e["label"] for e in entries], fontsize=7)
    ax.set_ylim(-0.7, len(entries) - 0.3)
    ax.set_xlabel("|bound|: |value| + 1σ (thick), + 2σ (thin); tick: |value|")
    ax.grid(True, axis="x", which="major", lw=0.3)
    return ax


#: Largest number of coefficients whose correlations are printed in the cells (beyond it the
#: colours alone are shown: n**2 text labels make a figure slow and unreadable).
CORRELATION_NUMBERS_MAX = 16
#: Largest side of the correlation figure, inches.
CORRELATION_SIDE_MAX_IN = 12.0
#: Most tick labels along each axis of the correlation figure.
CORRELATION_LABELS_MAX = 40


def plot_correlation(names: Sequence[str], covariance: ArrayLike, ax=None):
    """Correlation matrix of the coefficients, colour image with the numbers.

    Up to :data:`CORRELATION_NUMBERS_MAX` coefficients each cell shows its number; beyond, the
    colours alone, and at most :data:`CORRELATION_LABELS_MAX` names label each axis.
    """
    n = len(names)
    if ax is None:
        ax = new_axes(figsize=(min(1.6 + 0.55 * n, CORRELATION_SIDE_MAX_IN),
                               min(1.2 + 0.5 * n, CORRELATION_SIDE_MAX_IN - 0.4)))
    rho = correlation_from_covariance(covariance, unit_diagonal=True)
    im = ax.imshow(rho, vmin=-1, vmax=1, cmap="RdBu_r")
    if n <= CORRELATION_NUMBERS_MAX:
        for i in range(n):
            for j in range(n):
                v = rho[i, j]
                ax.text(j, i, "n/a" if not np.isfinite(v) else f"{v:.2f}", ha="center",
                        va="center", fontsize=7, color="w" if abs(v) > 0.6 else "k")
    step = -(-n // CORRELATION_LABELS_MAX)
    ticks = range(0, n, step)
    ax.set_xticks(ticks, [names[k] for k in ticks], rotation=60, fontsize=7, ha="right")
    ax.set_yticks(ticks, [names[k] for k in ticks], fontsize=7)
    ax.figure.colorbar(im, ax=ax, label="correlation")
    return ax


def plot_residual_adev(t_s: ArrayLike, residuals: Mapping[str, ArrayLike], turn_period_s: float,
                       *, units: str, ax=None):
    """Overlapping Allan deviation of per-turn residuals (``{"C − model": r, ...}``).

    The residuals are laid on the turn grid (tau0 = ``turn_period_s``; rejected or missing turns
    are NaN and excluded by :func:`fringe.noise.allan.overlapping_adev`). A dotted tau^-1/2 line
    from the first point shows white noise; vertical lines mark half a sidereal day and a
    sidereal day.
    """
    if ax is None:
        ax = new_axes()
    tmax = 0.0
    for i, (label, r) in enumerate(residuals.items()):
        grid, _ = regular_grid(t_s, r, turn_period_s)
        res = overlapping_adev(grid, turn_period_s)
        ok = np.isfinite(res.adev)
        ax.errorbar(res.tau_s[ok], res.adev[ok], yerr=res.adev_err[ok], fmt="o-", ms=3,
                    capsize=2, color=f"C{i}", label=label)
        if ok.any():
            t0 = res.tau_s[ok][0]
            ax.plot(res.tau_s[ok], res.adev[ok][0] * np.sqrt(t0 / res.tau_s[ok]), ":",
                    color=f"C{i}", lw=1)
            tmax = max(tmax, float(res.tau_s[ok][-1]))
    for tau, text in ((STELLAR_DAY_S / 2, "½ sidereal day"), (STELLAR_DAY_S, "sidereal day")):
        if tau <= tmax:
            ax.axvline(tau, color="k", lw=0.6, ls="--", alpha=0.6)
            ax.text(tau, 0.98, text, rotation=90, va="top", ha="right", fontsize=6,
                    transform=ax.get_xaxis_transform())
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("averaging time τ [s]")
    ax.set_ylabel(f"Allan deviation of residual [{units}]")
    ax.legend(fontsize=7, title="dotted: τ^-1/2 (white noise)", title_fontsize=6)
    return ax


# --------------------------------------------------------------------- a report's figures

def report_figure_names(fit: FitResult, turns: Mapping | None) -> list[str]:
    """Names of the figures :func:`report_figures` makes for these inputs, in order."""
    names = ["amplitudes", "spectrum", "residual_adev"] if turns is not None else []
    names.append("limits")
    if len(fit.covariance.names) >= 2:
        names.append("correlation")
    return names


def report_figures(fit: FitResult, turns: Mapping | None, comparison: Sequence[Mapping] = ()
                   ) -> list[tuple[str, str, object]]:
    """Every figure a report shows, as ``(name, caption, Figure)``.

    Parameters
    ----------
    fit : FitResult
        The checked fit result (``units``, ``coefficients``, ``covariance``, optional
        ``harmonics``).
    turns : mapping or None
        Accepted per-turn arrays (``t_mid_s``, ``phi_rad``, ``C``, ``B``, ``sigma_C``,
        ``sigma_B``, ``model_C``, ``model_B``) and ``turn_period_s``; None omits the three
        per-turn figures.
    comparison : sequence of mapping
        Earlier results ``{"name", "value", "sigma", "citation"}`` for the limits figure.
    """
    units = fit.units
    out = []
    h = fit.harmonics
    hmap = dict(zip(h.names, h.value, strict=True)) if h is not None else None
    if turns is not None:
        t = turns
        axes = new_axes(figsize=(11.5, 4.0), ncols=2)
        for ax, n in zip(axes, ("C", "B"), strict=True):
            plot_amplitude_vs_sidereal(t["phi_rad"], t[n], t[f"sigma_{n}"], t[f"model_{n}"],
                                       name=n, units=units, harmonics=hmap, ax=ax)
        out.append(("amplitudes", "Per-turn 2θ amplitudes C (of cos 2θ) and B (of sin 2θ) of "
                    f"the {t['t_mid_s'].size} accepted turns against the sidereal angle φ: "
                    "weighted means in 15° bins (± 1σ, scaled up by the Birge ratio where the "
                    "scatter exceeds the stated uncertainties), the fitted coefficient model "
                    "(model_C, model_B) averaged over the same turns and bins (line)"
                    + (", and the curve of the fitted C10 harmonics (dashed)." if h is not None
                       else "; no C10 curve: the sidereal stage was skipped (too few sidereal "
                            "phases), the per-session amplitudes stand in for it."),
                    axes[0].figure))
        ax = plot_spectrum(t["t_mid_s"], {"C": (t["C"], t["sigma_C"]),
                                          "B": (t["B"], t["sigma_B"])}, units=units)
        out.append(("spectrum", "Least-squares amplitude spectrum of the per-turn C and B "
                    "series, frequency in cycles per sidereal day. Solid lines: 1 and 2 cycles "
                    "per sidereal day (ω⊕, 2ω⊕); dotted: their annual sidebands (± 1 cycle per "
                    "sidereal year). The spectrum of the per-turn amplitudes around zero "
                    "frequency is equivalent to the spectrum of the raw signal around 2ω_R "
                    "(demodulation at 2θ shifts 2ω_R to zero), so these lines are the "
                    "raw-signal lines 2ω_R ± ω⊕, 2ω_R ± 2ω⊕ and their sidebands. Horizontal "
                    "dotted lines: mean amplitude expected from white noise of the stated "
                    "per-turn uncertainties.", ax.figure))
        ax = plot_residual_adev(t["t_mid_s"], {"C − model_C": t["C"] - t["model_C"],
                                               "B − model_B": t["B"] - t["model_B"]},
                                t["turn_period_s"], units=units)
        out.append(("residual_adev", "Overlapping Allan deviation of the per-turn residuals "
                    f"C − model_C and B − model_B; τ0 = turn period = {t['turn_period_s']:g} s "
                    "(rejected and missing turns excluded, not bridged). Error bars: ADEV/√N of "
                    f"the independent terms. Unit: that of the observable ({units}).",
                    ax.figure))
    coefs = fit.coefficients
    entries = []
    for n in dict.fromkeys(list(coefs) + [e["name"] for e in comparison]):
        if n in coefs:
            entries.append({"label": f"{n} (this work)", "value": coefs[n].value,
                            "sigma": coefs[n].sigma, "ours": True})
        entries += [{"label": f"{n}: {e['citation'][:40]}", "value": e["value"],
                     "sigma": e["sigma"], "ours": False} for e in comparison if e["name"] == n]
    ax = plot_limits(entries)
    out.append(("limits", "Absolute bounds |value| + 1σ (thick bar) and |value| + 2σ (thin "
                "bar) of each free coefficient of this work (blue)"
                + (" beside the user-supplied earlier results (grey; citations as given by the "
                   "user, not checked by fringe)" if comparison else "")
                + "; log scale. The tick marks |value|.", ax.figure))
    cov = fit.covariance
    if len(cov.names) >= 2:
        ax = plot_correlation(cov.names, cov.matrix)
        out.append(("correlation", "Correlation matrix of the free coefficients.", ax.figure))
    return out
