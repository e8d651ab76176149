"""Figures. Every plot function takes ``ax=None`` and returns the axes; none saves a file.

* :mod:`fringe.report.figures.fit` — the figures of a fit report (amplitudes against sidereal
  angle, spectrum, limits, correlations, residual Allan deviation);
* :mod:`fringe.report.figures.quality` — the figures of ``fringe inspect``;
* :mod:`fringe.report.figures.plan` — the forecast curves;
* :mod:`fringe.report.figures.prediction` — the signal map and harmonic bars of a prediction.
"""
