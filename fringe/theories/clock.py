"""Direction-dependent clock (matter sector): a symmetric traceless SCCEF tensor c.

The fractional shift of a transition with quantization axis q (unit, lab axes) is
q . c_lab . q with c_lab = R c Rᵀ (docs/references.md [R-clock-projection]); the apparatus
multiplies it by the transition's sensitivity in Hz per unit coefficient. Matter-sector boost
terms are not included: give the tensor in the frame in which it is to be bounded.

Coefficients ``cq_XY cq_XZ cq_YZ cq_XXmYY cq_ZZ`` (dimensionless), with XX = (XXmYY - ZZ)/2,
YY = -(XXmYY + ZZ)/2 as for the ke_* names.
"""

from __future__ import annotations

from typing import ClassVar

import numpy as np

from fringe.conventions import traceless_from_components
from fringe.theories.base import Theory, rotate_to_lab

CLOCK_NAMES = ("cq_XY", "cq_XZ", "cq_YZ", "cq_XXmYY", "cq_ZZ")


def unit_clock_tensor(name: str) -> np.ndarray:
    """SCCEF tensor of a unit value of one clock coefficient, (3, 3)."""
    comps = dict.fromkeys(("xy", "xz", "yz", "xx_minus_yy", "zz"), 0.0)
    comps[{"cq_XY": "xy", "cq_XZ": "xz", "cq_YZ": "yz", "cq_XXmYY": "xx_minus_yy",
           "cq_ZZ": "zz"}[name]] = 1.0
    return traceless_from_components(**comps)


class DirectionalClock(Theory):
    """Orientation-dependent clock transition (symmetric traceless tensor, SCCEF)."""

    name: ClassVar[str] = "clock"
    sector: ClassVar[str] = "matter"
    parameter_names: ClassVar[tuple[str, ...]] = CLOCK_NAMES
    parameter_units: ClassVar[dict[str, str]] = {n: "1" for n in CLOCK_NAMES}
    description: ClassVar[str] = "direction-dependent clock, quantization-axis projection"

    def response(self, state, names=None):
        """Lab response tensors T (n, k, 3, 3) and isotropic shifts s (n, k, all zero).

        T_k is the unit SCCEF tensor of clock coefficient k rotated to the lab axes of ``state``
        (dimensionless); a clock coefficient gives no isotropic shift, so s is zero.

        Parameters
        ----------
        state : FrameState
            Frame quantities at the n samples (:class:`fringe.frames.FrameState`).
        names : sequence of str, optional
            Coefficients to include, in this order (default: all ``parameter_names``).

        Returns
        -------
        t : (n, k, 3, 3) ndarray
            Lab response tensor of each coefficient (dimensionless).
        s : (n, k) ndarray
            Isotropic shift of each coefficient (dimensionless).
        """
        names = tuple(names) if names is not None else self.parameter_names
        self.check_params({n: 0.0 for n in names})
        basis = np.stack([unit_clock_tensor(n) for n in names])
        t = rotate_to_lab(basis, state)
        return t, np.zeros((len(state), len(names)))
