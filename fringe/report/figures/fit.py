"""Figures of a fit result (matplotlib, object-oriented: no pyplot, no global backend change).

Which function for which figure:

* :func:`plot_amplitude_vs_sidereal` -- per-turn 2-theta amplitude (C or B) against the sidereal
  angle: binned means with 1-sigma error bars, the fitted model binned the same way, the curve
  of the fitted sidereal harmonics.
* :func:`plot_spectrum` -- amplitude spectrum of the per-turn C and B series in cycles per
  sidereal day, lines at 1 and 2 (and their annual sidebands when the record resolves them)
  marked (:func:`amplitude_spectrum`).
* :func:`~fringe.report.figures.limits.plot_limits` -- each coefficient's value with its 68 %
  and 95 % intervals beside earlier results; :func:`~fringe.report.figures.limits.
  plot_correlation` -- the correlation matrix (both in :mod:`fringe.report.figures.limits`).
* :func:`plot_residual_adev` -- overlapping Allan deviation of the per-turn residuals.
* :func:`report_figures` -- every figure of a report with its caption.

Every plot function takes ``ax=None`` (then it makes a new :class:`matplotlib.figure.Figure`
through :func:`fringe.report.figures.style.new_figure`) and returns the axes; saving is the
caller's job (:func:`fringe.report.figures.style.save_figure`). The numerical helpers
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
from fringe.noise.allan import overlapping_adev
from fringe.report.figures import captions
from fringe.report.figures import style as S
from fringe.report.figures.limits import (
    CORRELATION_LABELS_MAX,
    CORRELATION_NUMBERS_MAX,
    CORRELATION_SIDE_MAX_IN,
    choose_limits_scale,
    plot_correlation,
    plot_limits,
    plot_speed_limits,
)

if TYPE_CHECKING:
    from fringe.io.fit_result import FitResult

__all__ = ["ANNUAL_CYCLES_PER_SIDEREAL_DAY", "CORRELATION_LABELS_MAX", "CORRELATION_NUMBERS_MAX",
           "CORRELATION_SIDE_MAX_IN", "amplitude_spectrum", "binned_by_phase", "limit_entries",
           "new_axes", "plot_amplitude_vs_sidereal", "plot_correlation", "plot_limits",
           "plot_residual_adev", "plot_speed_limits", "plot_spectrum", "regular_grid",
           "report_figure_names", "report_figures", "sidebands_resolved",
           "speed_rows"]

#: Orbital frequency in cycles per sidereal (ERA) day: the annual sideband offset.
ANNUAL_CYCLES_PER_SIDEREAL_DAY = OMEGA_ORBIT_RAD_S / OMEGA_EARTH_RAD_S

#: Above this many turns the spectrum is computed from time-binned means (see
#: :func:`amplitude_spectrum`).
SPECTRUM_MAX_POINTS = 20_000
#: Most frequencies evaluated by :func:`amplitude_spectrum`.
SPECTRUM_MAX_FREQS = 8_000


def new_axes(width="one", ncols: int = 1, height_in: float | None = None):
    """A new styled Figure (no pyplot) and its axes: :func:`~.style.new_figure`."""
    return S.new_figure(width, height_in, ncols=ncols)


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

def _sidereal_curve(harmonics: Mapping[str, float], name: str):
    p = np.linspace(0.0, 2.0 * np.pi, 361)
    h = {k: float(harmonics.get(f"{name}{k}", 0.0)) for k in ("0", "s1", "c1", "s2", "c2")}
    curve = (h["0"] + h["s1"] * np.sin(p) + h["c1"] * np.cos(p) + h["s2"] * np.sin(2 * p)
             + h["c2"] * np.cos(2 * p))
    return np.degrees(p), curve


@S.styled
def plot_amplitude_vs_sidereal(phi_rad: ArrayLike, amplitude: ArrayLike, sigma: ArrayLike,
                               model: ArrayLike, *, name: str, units: str,
                               harmonics: Mapping[str, float] | None = None,
                               n_bins: int = 24, legend: bool = True, ax=None):
    """Per-turn amplitude ``name`` (C or B) against sidereal angle, with the fitted model.

    The values are shown in units of a power of ten of ``units`` (in the axis label).

    Parameters
    ----------
    phi_rad, amplitude, sigma, model : array_like, (n,)
        Sidereal angle (rad), per-turn amplitude, its 1-sigma, and the fitted coefficient
        model at each turn (``model_C``/``model_B``), amplitudes in ``units``.
    name : {"C", "B"}
    units : str
        Unit of the amplitudes.
    harmonics : mapping, optional
        Sidereal harmonic values (``{"C0": .., "Cs1": .., ...}``); draws their curve.
    n_bins : int
        Bins of the sidereal angle.
    legend : bool
        Draw the legend (above the axes).
    """
    if ax is None:
        ax = S.new_figure("one")
    centre, mean, err, _ = binned_by_phase(phi_rad, amplitude, sigma, n_bins)
    _, mod, _, _ = binned_by_phase(phi_rad, model, np.ones_like(np.asarray(model, float)),
                                   n_bins)
    curve = _sidereal_curve(harmonics, name) if harmonics else None
    k = S.power_of_ten(np.concatenate([np.abs(mean) + err, np.abs(mod)]))
    f = 10.0 ** -k
    deg = np.degrees(centre)
    ax.errorbar(deg, mean * f, yerr=err * f, fmt="o", color=S.COLORS[0], zorder=3,
                label=r"binned mean $\pm1\sigma$")
    ax.plot(deg, mod * f, "-", color=S.COLORS[1], lw=1.4, zorder=4,
            label="fitted model (same bins)")
    if curve is not None:
        ax.plot(curve[0], curve[1] * f, "--", color="k", lw=0.9, zorder=5,
                label="fitted sidereal harmonics")
    ax.axhline(0.0, color=S.GREY, lw=0.5, zorder=1)
    ax.set_xlim(0, 360)
    ax.set_xticks(np.arange(0, 361, 60))
    ax.set_xlabel(r"sidereal angle $\varphi$ [deg]")
    kind = {"C": r"$\cos 2\theta$", "B": r"$\sin 2\theta$"}.get(name, r"$2\theta$")
    ax.set_ylabel(S.scaled_label(f"${name}$ (amplitude of {kind})", units, k))
    if legend:
        S.legend_outside(ax, where="above", ncols=2)
    return S.finish(ax)


def sidebands_resolved(span_days: float) -> bool:
    """Whether a record of ``span_days`` separates the annual sidebands from their line.

    True when the sideband offset (1 cycle per year) exceeds 1.5 / span, 1.5 times the
    frequency resolution of the record (common practice).
    """
    return span_days > 0 and ANNUAL_CYCLES_PER_SIDEREAL_DAY > 1.5 / span_days


@S.styled
def plot_spectrum(t_s: ArrayLike, series: Mapping[str, tuple[ArrayLike, ArrayLike]], *,
                  units: str, f_max_cpsd: float = 2.5, ax=None):
    """Amplitude spectra of per-turn series (``{"C": (y, sigma), "B": (y, sigma)}``).

    Vertical lines mark 1 and 2 cycles per sidereal day (labelled above the axes); dotted lines
    their annual sidebands (+- :data:`ANNUAL_CYCLES_PER_SIDEREAL_DAY`) when
    :func:`sidebands_resolved`. Horizontal dotted lines: the mean white-noise amplitude.
    """
    if ax is None:
        ax = S.new_figure("one")
    spectra = [(label, *amplitude_spectrum(t_s, y, s, f_max_cpsd=f_max_cpsd))
               for label, (y, s) in series.items()]
    k = S.power_of_ten(np.concatenate([a for _, _, a, _ in spectra]))
    for i, (label, f, amp, noise) in enumerate(spectra):
        c = S.COLORS[i % len(S.COLORS)]
        ax.plot(f, amp / 10.0 ** k, color=c, lw=0.9, label=f"${label}$")
        ax.axhline(noise / 10.0 ** k, color=c, lw=0.8, ls=":",
                   label=f"${label}$: white-noise mean")
    t = np.asarray(t_s, float)
    span_days = float(t.max() - t.min()) / STELLAR_DAY_S if t.size else 0.0
    fa = ANNUAL_CYCLES_PER_SIDEREAL_DAY
    for line in (1.0, 2.0):
        ax.axvline(line, color="k", lw=0.6, alpha=0.7, zorder=0)
        if sidebands_resolved(span_days):
            for sb in (line - fa, line + fa):
                ax.axvline(sb, color="k", lw=0.5, ls=":", alpha=0.6, zorder=0)
    top = ax.secondary_xaxis("top")
    top.set_xticks([1.0, 2.0], [r"$\omega_\oplus$", r"$2\omega_\oplus$"])
    top.tick_params(length=0, labelsize=S.rc_params()["xtick.labelsize"])
    ax.set_xlim(0, f_max_cpsd)
    ax.set_ylim(bottom=0)
    ax.set_xlabel("frequency [cycles per sidereal day]")
    ax.set_ylabel(S.scaled_label("amplitude", units, k))
    S.legend_outside(ax, where="below", ncols=2)
    return S.finish(ax)


@S.styled
def plot_residual_adev(t_s: ArrayLike, residuals: Mapping[str, ArrayLike], turn_period_s: float,
                       *, units: str, ax=None):
    """Overlapping Allan deviation of per-turn residuals (``{"$C - C_{model}$": r, ...}``).

    The residuals are laid on the turn grid (tau0 = ``turn_period_s``; rejected or missing turns
    are NaN and excluded by :func:`fringe.noise.allan.overlapping_adev`). A dotted
    tau^(-1/2) line from the first point shows white noise; vertical lines mark half a sidereal
    day and a sidereal day (labelled above the axes). The keys of ``residuals`` are the legend
    labels (mathtext allowed).
    """
    from matplotlib.lines import Line2D

    if ax is None:
        ax = S.new_figure("one")
    tmax = 0.0
    for i, (label, r) in enumerate(residuals.items()):
        grid, _ = regular_grid(t_s, r, turn_period_s)
        res = overlapping_adev(grid, turn_period_s)
        ok = np.isfinite(res.adev)
        st = S.series_style(i)
        ax.errorbar(res.tau_s[ok], res.adev[ok], yerr=res.adev_err[ok], fmt="-",
                    marker=st["marker"], color=st["color"], label=label, zorder=3)
        if ok.any():
            t0 = res.tau_s[ok][0]
            ax.plot(res.tau_s[ok], res.adev[ok][0] * np.sqrt(t0 / res.tau_s[ok]), ":",
                    color=st["color"], lw=0.9, zorder=2)
            tmax = max(tmax, float(res.tau_s[ok][-1]))
    marks = [(tau, text) for tau, text in ((STELLAR_DAY_S / 2, r"$T_\mathrm{sid}/2$"),
                                            (STELLAR_DAY_S, r"$T_\mathrm{sid}$")) if tau <= tmax]
    for tau, _ in marks:
        ax.axvline(tau, color=S.GREY, lw=0.6, ls="--", zorder=1)
    ax.set_xscale("log")
    ax.set_yscale("log")
    if marks:
        top = ax.secondary_xaxis("top")
        top.set_xticks([m[0] for m in marks], [m[1] for m in marks])
        top.xaxis.set_minor_locator(_null_locator())
        top.tick_params(length=0, labelsize=S.rc_params()["xtick.labelsize"])
    ax.set_xlabel(r"averaging time $\tau$ [s]")
    ax.set_ylabel("Allan deviation of the residual" + S.unit_suffix(units))
    handles, labels = ax.get_legend_handles_labels()
    handles.append(Line2D([], [], color=S.GREY, ls=":", lw=0.9))
    labels.append(r"white noise, $\propto\tau^{-1/2}$")
    S.legend_outside(ax, where="below", ncols=3, handles=handles, labels=labels)
    return S.finish(ax)


def _null_locator():
    from matplotlib.ticker import NullLocator

    return NullLocator()


# --------------------------------------------------------------------- a report's figures

def report_figure_names(fit: FitResult, turns: Mapping | None) -> list[str]:
    """Names of the figures :func:`report_figures` makes for these inputs, in order."""
    names = ["amplitudes", "spectrum", "residual_adev"] if turns is not None else []
    names.append("limits")
    if len(fit.covariance.names) >= 2:
        names.append("correlation")
    return names


def limit_entries(fit: FitResult, comparison: Sequence[Mapping] = ()) -> list[dict]:
    """Rows of the limits figure: each free coefficient, then the earlier results of its name."""
    coefs = fit.coefficients
    entries = []
    for n in dict.fromkeys(list(coefs) + [e["name"] for e in comparison]):
        label = S.coefficient_label(n)
        if n in coefs:
            entries.append({"label": label + (" (this work)" if comparison else ""),
                            "value": coefs[n].value, "sigma": coefs[n].sigma, "ours": True})
        entries += [{"label": f"{label}: {S.coefficient_label(e['citation'][:32])}",
                     "value": e["value"], "sigma": e["sigma"], "ours": False}
                    for e in comparison if e["name"] == n]
    return entries


def speed_rows(fit: FitResult) -> list[dict]:
    """Rows of the speed-limit panel of a medium fit (its ``derived`` speeds, km/s); [] if none."""
    d = fit.derived
    if d is None:
        return []
    rows = []
    sun, lab = d.sun_speed_kms or {}, d.lab_speed_kms or {}
    for label, part, best, upper in (
            (r"Sun, $|v_\odot|$", sun, "best", "upper_95"),
            (r"laboratory, $|v_\mathrm{lab}|$", lab, "best", "upper_95"),
            ("laboratory, horizontal", lab, "horizontal_best", "horizontal_upper_95")):
        if np.isfinite(part.get(upper, np.nan)):
            rows.append({"label": label, "best": float(part.get(best, np.nan)),
                         "upper_95": float(part[upper])})
    return rows


def _limits_figure(fit: FitResult, comparison: Sequence[Mapping]):
    """The limits figure: (caption, Figure); medium fits add their speed limits below."""
    from fringe.theories import THEORIES

    entries = limit_entries(fit, comparison)
    cls = THEORIES.get(fit.theory)
    units = {cls.parameter_units.get(n, "1") for n in fit.coefficients} if cls else {"1"}
    unit = units.pop() if len(units) == 1 else "1"
    scale = choose_limits_scale(entries, unit)
    speeds = speed_rows(fit) if fit.theory == "medium" else []
    if not speeds:
        ax = plot_limits(entries, scale=scale, unit=unit)
        return captions.limits(bool(comparison), scale), ax.figure
    n = len(entries)
    axes = S.new_figure("one", 1.6 + 0.24 * n + 0.26 * len(speeds), nrows=2,
                        gridspec_kw={"height_ratios": [n + 1.5, len(speeds) + 1.5]})
    plot_limits(entries, scale=scale, unit=unit, ax=axes[0],
                quantity="velocity component of the Sun")
    plot_speed_limits(speeds, unit="km/s", ax=axes[1])
    return captions.limits(bool(comparison), scale, speeds=True), axes[0].figure


@S.styled
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
        axes = S.new_figure("two", ncols=2, aspect=0.82)
        for ax, n in zip(axes, ("C", "B"), strict=True):
            plot_amplitude_vs_sidereal(t["phi_rad"], t[n], t[f"sigma_{n}"], t[f"model_{n}"],
                                       name=n, units=units, harmonics=hmap, legend=False,
                                       ax=ax)
        handles, labels = axes[0].get_legend_handles_labels()
        order = sorted(range(len(labels)), key=lambda i: not labels[i].startswith("binned"))
        axes[0].figure.legend([handles[i] for i in order], [labels[i] for i in order],
                              loc="outside upper center", ncols=3)
        out.append(("amplitudes", captions.amplitudes(t["t_mid_s"].size, h is not None),
                    axes[0].figure))
        ax = plot_spectrum(t["t_mid_s"], {"C": (t["C"], t["sigma_C"]),
                                          "B": (t["B"], t["sigma_B"])}, units=units)
        span_days = float(np.ptp(t["t_mid_s"])) / STELLAR_DAY_S if t["t_mid_s"].size else 0.0
        out.append(("spectrum", captions.spectrum(sidebands_resolved(span_days)), ax.figure))
        ax = plot_residual_adev(t["t_mid_s"],
                                {r"$C - C_\mathrm{model}$": t["C"] - t["model_C"],
                                 r"$B - B_\mathrm{model}$": t["B"] - t["model_B"]},
                                t["turn_period_s"], units=units)
        out.append(("residual_adev", captions.residual_adev(t["turn_period_s"], units),
                    ax.figure))
    out.append(("limits", *_limits_figure(fit, comparison)))
    cov = fit.covariance
    if len(cov.names) >= 2:
        ax = plot_correlation(cov.names, cov.matrix)
        out.append(("correlation", captions.correlation(), ax.figure))
    return out
