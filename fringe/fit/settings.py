"""Settings of stages 2-3.

Free and fixed coefficients, uncertainty mode, nuisances, and the default free set.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from fringe.errors import ConfigError
from fringe.experiment.basis import Setup

#: Registry of the ways stage 3 forms the coefficient covariance (also the CLI's choices).
UNCERTAINTY_MODES = ("reduced-chi2", "bootstrap", "formal")


@dataclass(frozen=True)
class FitSettings:
    """Settings of stages 2-3 (see module docstring).

    Parameters
    ----------
    theory : str
    free : tuple of str or None
        Free coefficients (None: the theory's default set).
    fixed : dict
        Coefficients held at given values.
    uncertainty : {"reduced-chi2", "bootstrap", "formal"}
    lab_b0 : bool
        Fit a constant B offset (lab-fixed 2 theta systematic).
    lab_c0 : bool
        Fit a constant C offset (not allowed with ke_ZZ free).
    regress : tuple of str
        Auxiliary channels whose 2 theta amplitudes are regressed out.
    bootstrap_days : float
        Length of the resampled blocks of turns, days.
    n_bootstrap : int
    seed : int
    """

    theory: str = "sme"
    free: tuple | None = None
    fixed: dict = field(default_factory=dict)
    uncertainty: str = "reduced-chi2"
    lab_b0: bool = True
    lab_c0: bool = False
    regress: tuple = ()
    bootstrap_days: float = 1.0
    n_bootstrap: int = 200
    seed: int = 12345

    def __post_init__(self):
        if self.uncertainty not in UNCERTAINTY_MODES:
            raise ConfigError("FitSettings.uncertainty: expected one of "
                              f"{', '.join(UNCERTAINTY_MODES)}, got {self.uncertainty!r}")

    def to_dict(self) -> dict:
        """The settings as plain JSON-ready data."""
        return {"theory": self.theory, "free": list(self.free) if self.free else None,
                "fixed": dict(self.fixed), "uncertainty": self.uncertainty,
                "lab_b0": self.lab_b0, "lab_c0": self.lab_c0, "regress": list(self.regress),
                "bootstrap_days": self.bootstrap_days, "n_bootstrap": self.n_bootstrap,
                "seed": self.seed}


def default_free(setup: Setup, span_days: float) -> tuple[str, ...]:
    """The default free coefficients of a theory for a record of ``span_days``.

    See :meth:`fringe.theories.base.Theory.default_free`.
    """
    return setup.theory.default_free(span_days, setup.apparatus)
