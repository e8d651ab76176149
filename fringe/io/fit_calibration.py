"""The fit result's ``calibration`` part: what the fit took from the readings' calibration.

:class:`SignalCalibration` records, for a run file of format version 2, the counter's gate and
the factors by which the fit divided the per-turn 1 theta and 2 theta amplitudes (stage 1,
:mod:`fringe.demodulate.gate`), the relative standard uncertainty of the instrument-units scale
factor and what it makes of each coefficient (a common, fully correlated scale uncertainty,
stated beside the statistical sigma and not folded into it), and whether the samples were
weighted. A result without this part (every version-1 run file) had none of these.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

from fringe.io.records import Fields, FrozenMap, freeze

__all__ = ["SignalCalibration", "scale_sigmas"]

_KEYS = ("gate_s", "gate_kind", "gate_factor_1theta", "gate_factor_2theta", "turn_period_s",
         "scale_factor", "scale_rel_sigma", "instrument_units", "scale_sigma", "weighted")


@dataclass(frozen=True)
class SignalCalibration:
    """Gate correction, scale uncertainty and weighting of a fit (``docs/fit.md``).

    Attributes
    ----------
    gate_s : float or None
        The counter's gate time, s (None: no gate declared, no correction).
    gate_kind : str or None
        ``"plain"`` or ``"overlapping"``.
    gate_factor_1theta, gate_factor_2theta : float or None
        Gate factor H at 1 and 2 times the table's angular rate for the median turn period;
        each turn's amplitudes were divided by H at that turn's own mean rate.
    turn_period_s : float or None
        The median turn period the factors above are quoted at, s.
    scale_factor : float or None
        Signal units per instrument unit applied at import.
    scale_rel_sigma : float or None
        Relative standard uncertainty of ``scale_factor``.
    instrument_units : str or None
        Units of the readings before scaling.
    scale_sigma : mapping of str to float
        ``scale_rel_sigma`` x abs(value) per coefficient (coefficient units): the scale part
        of the uncertainty, common to all coefficients, not included in their sigma.
    weighted : bool
        The samples carried weights (``samples/weight``).
    """

    gate_s: float | None = None
    gate_kind: str | None = None
    gate_factor_1theta: float | None = None
    gate_factor_2theta: float | None = None
    turn_period_s: float | None = None
    scale_factor: float | None = None
    scale_rel_sigma: float | None = None
    instrument_units: str | None = None
    scale_sigma: Mapping[str, float] = field(default_factory=FrozenMap)
    weighted: bool = False

    def __post_init__(self):
        object.__setattr__(self, "scale_sigma", freeze(dict(self.scale_sigma)))

    def to_dict(self) -> dict:
        """Plain JSON: the fields that are set."""
        out = {k: getattr(self, k) for k in _KEYS if getattr(self, k) is not None}
        out["scale_sigma"] = dict(self.scale_sigma)
        return out

    def sentences(self) -> list[str]:
        """What a person reads about the correction and the scale uncertainty."""
        out = []
        if self.gate_s is not None:
            out.append(f"gate averaging ({self.gate_kind} gate of {self.gate_s:g} s) corrected: "
                       f"per-turn 2 theta amplitudes divided by {self.gate_factor_2theta:.4f}, "
                       f"1 theta by {self.gate_factor_1theta:.4f} (at the median turn period "
                       f"{self.turn_period_s:.4g} s; each turn at its own rate)")
        if self.scale_rel_sigma is not None:
            out.append(f"scale: readings in {self.instrument_units} times {self.scale_factor:g}; "
                       f"relative scale uncertainty {self.scale_rel_sigma:.3g} common to all "
                       "coefficients (scale_sigma), not included in sigma")
        if self.weighted:
            out.append("samples weighted by samples/weight in the per-turn fits")
        return out

    @classmethod
    def read(cls, f: Fields, key: str) -> SignalCalibration | None:
        """Read and check the part (None when absent)."""
        s = f.sub(key, required=False)
        if s is None:
            return None
        s.unknown(_KEYS)
        gate_s = s.number("gate_s", required=False, positive=True)
        kind = s.string("gate_kind", required=gate_s is not None)
        if kind is not None and kind not in ("plain", "overlapping"):
            raise s.error("gate_kind", "'plain' or 'overlapping'", kind)
        factors = {k: s.number(k, required=gate_s is not None, positive=True)
                   for k in ("gate_factor_1theta", "gate_factor_2theta", "turn_period_s")}
        rel = s.number("scale_rel_sigma", required=False, minimum=0.0)
        sig = s.sub("scale_sigma", required=False)
        weighted = s.data.get("weighted", False)
        if not isinstance(weighted, bool):
            raise s.error("weighted", "true or false", weighted)
        return cls(gate_s=gate_s, gate_kind=kind, **factors,
                   scale_factor=s.number("scale_factor", required=rel is not None),
                   scale_rel_sigma=rel,
                   instrument_units=s.string("instrument_units", required=rel is not None),
                   scale_sigma={} if sig is None else {
                       k: sig.number(k, null=True, minimum=0.0) for k, _ in sig.items()},
                   weighted=weighted)


def scale_sigmas(values: Mapping[str, float], rel: float) -> dict[str, float]:
    """``rel`` x abs(value) for each coefficient (NaN stays NaN)."""
    return {k: rel * abs(float(v)) if math.isfinite(v) else math.nan for k, v in values.items()}
