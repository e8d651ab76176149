"""Captions of the report's figures (plain text, Unicode; the documents escape them).

One function per figure of :func:`fringe.report.figures.fit.report_figures`; each says what
is drawn, which interval the error bars or bars are, and what is left out and why.
"""

from __future__ import annotations

__all__ = ["amplitudes", "correlation", "limits", "residual_adev", "spectrum"]


def amplitudes(n_turns: int, has_harmonics: bool) -> str:
    """Caption of the per-turn amplitudes against the sidereal angle."""
    return ("Per-turn 2θ amplitudes C (of cos 2θ) and B (of sin 2θ) of the "
            f"{n_turns} accepted turns against the sidereal angle φ: weighted means in 15° "
            "bins (error bars ± 1σ, scaled up by the Birge ratio where the scatter exceeds "
            "the stated uncertainties), the fitted coefficient model averaged over the same "
            "turns and bins (solid line)"
            + (", and the curve of the fitted sidereal harmonics (dashed)." if has_harmonics
               else "; no curve of the sidereal harmonics: the sidereal stage was skipped "
                    "(too few sidereal phases), the per-session amplitudes stand in for it."))


def spectrum(sidebands: bool) -> str:
    """Caption of the amplitude spectrum of the per-turn amplitudes."""
    return ("Least-squares amplitude spectrum of the per-turn C and B series, frequency in "
            "cycles per sidereal day. Vertical lines: 1 and 2 cycles per sidereal day (ω⊕, "
            "2ω⊕)"
            + ("; dotted: their annual sidebands (± 1 cycle per sidereal year)" if sidebands
               else "; the annual sidebands (± 1 cycle per year) are not drawn: the record is "
                    "too short to separate them from these lines")
            + ". The spectrum of the per-turn amplitudes around zero frequency is the "
            "spectrum of the raw signal around twice the rotation frequency, shifted down by "
            "the 2θ demodulation, so these lines are the raw-signal lines 2ω_R ± ω⊕ and "
            "2ω_R ± 2ω⊕. Horizontal dotted lines: mean amplitude expected from white noise of "
            "the stated per-turn uncertainties.")


def residual_adev(turn_period_s: float, units: str) -> str:
    """Caption of the Allan deviation of the per-turn residuals."""
    return ("Overlapping Allan deviation of the per-turn residuals of C and of B (measured "
            "minus the fitted coefficient model); τ0 = turn period = "
            f"{turn_period_s:g} s (rejected and missing turns excluded, not bridged). Error "
            "bars: ADEV/√N of the independent terms. Dotted lines: white noise, ADEV ∝ 1/√τ, "
            "from the first point; dashed: half a sidereal day and a sidereal day. Unit: that "
            f"of the observable ({units}).")


def limits(has_comparison: bool, scale: str, *, speeds: bool = False) -> str:
    """Caption of the limits figure (``scale`` "symlog", "linear" or "zoom")."""
    axis = {"symlog": "symmetric logarithmic axis, linear within ± the smallest σ (shaded)",
            "linear": "linear axis",
            "zoom": "linear axis around the intervals (zero is shown only if it lies within "
                    "them: on an axis from zero the intervals would be too narrow to see)"
            }[scale]
    text = ("Each free coefficient of this work: its value (dot), 68 % interval value ± 1σ "
            "(thick bar) and 95 % interval value ± 1.96σ (thin bar with end marks), the "
            f"intervals of the coefficient table (an interval narrower than its dot is hidden "
            f"by it); {axis}")
    if has_comparison:
        text += ("; beside the user-supplied earlier results (grey; citations as given by the "
                 "user, not checked by fringe)")
    if speeds:
        text += (". Lower panel: one-sided 95 % upper limits on the speeds through the medium "
                 "derived by the fit (bar from zero to the limit; dot: best value)")
    return text + "."


def correlation() -> str:
    """Caption of the correlation matrix."""
    return ("Correlation matrix of the free coefficients (two decimals; 0.00 means below "
            "0.005 in magnitude).")
