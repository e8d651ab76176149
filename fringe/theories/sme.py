"""SME nonbirefringent photon sector: ke_* (kappa_e-), ko_* (kappa_o+), ktr (kappa_tr).

The nine coefficients are carried by one symmetric, eta-traceless tensor k^{mu nu}
(docs/references.md [R-SME-dictionary]):
k^{00} = (3/2) ktr,  k^{jk} = -ke^{jk} + (1/2) ktr delta^{jk},  k^{0l} = -w^l
with w = (ko_YZ, -ko_XZ, ko_XY) (C11). To first order in the coefficients the photon moves on the
effective metric eta + k, so the two-way fractional speed change along a unit lab direction n is

    delta(n) = -1/2 (k'^{00} + n^j n^k k'^{jk}),

where k' = L k Lᵀ is k seen by the lab: L = diag(1, R) Lambda(beta), the exact observer Lorentz
boost to the lab velocity beta (SCCEF axes) followed by the rotation R into lab axes (C12). No
truncated table is used: boost-suppressed ko terms and O(beta^2) ktr terms come out exactly.
In the response form of :mod:`fringe.theories.base`, T = -1/2 traceless(k'_spatial) and
s = -(2/3) k'^{00} = -ktr'.

References
----------
Kostelecky & Mewes, PRD 66, 056005 (2002), arXiv:hep-ph/0205211; Mattingly, Living Rev. Relativ.
8, 5 (2005), arXiv:gr-qc/0502097 (section "Cavity experiments"); Hohensee et al., PRD 82, 076001
(2010), arXiv:1006.1376 (ktr made visible by the boost).
"""

from __future__ import annotations

from functools import lru_cache
from typing import ClassVar

import numpy as np
from numpy.typing import NDArray

from fringe.frames import FrameState
from fringe.frames import boost_matrix as boost_matrix  # the observer boost, defined there
from fringe.theories.base import Theory

KE_NAMES = ("ke_XY", "ke_XZ", "ke_YZ", "ke_XXmYY", "ke_ZZ")
KO_NAMES = ("ko_XY", "ko_XZ", "ko_YZ")
SME_NAMES = KE_NAMES + KO_NAMES + ("ktr",)

#: Span from which ko_* join the default SME free set, days (half a sidereal year: the annual
#: modulation that separates ko_* from ke_* is then sampled over half a cycle; a year or more
#: separates them fully). Common practice.
KO_DEFAULT_SPAN_DAYS = 182.6


def unit_k_tensor(name: str) -> NDArray:
    """The 4x4 tensor k^{mu nu} (SCCEF) of a unit value of one SME coefficient."""
    k = np.zeros((4, 4))
    sp = k[1:, 1:]
    if name == "ke_XY":
        sp[0, 1] = sp[1, 0] = -1.0
    elif name == "ke_XZ":
        sp[0, 2] = sp[2, 0] = -1.0
    elif name == "ke_YZ":
        sp[1, 2] = sp[2, 1] = -1.0
    elif name == "ke_XXmYY":          # XX = +1/2, YY = -1/2 (traceless, ZZ = 0)
        sp[0, 0], sp[1, 1] = -0.5, 0.5
    elif name == "ke_ZZ":             # ZZ = 1, XX = YY = -1/2
        sp[0, 0], sp[1, 1], sp[2, 2] = 0.5, 0.5, -1.0
    elif name in KO_NAMES:
        w = {"ko_XY": (0.0, 0.0, 1.0), "ko_XZ": (0.0, -1.0, 0.0),
             "ko_YZ": (1.0, 0.0, 0.0)}[name]
        k[0, 1:] = k[1:, 0] = -np.array(w)
    elif name == "ktr":
        k[0, 0] = 1.5
        sp[...] = 0.5 * np.eye(3)
    else:
        raise KeyError(name)
    return k


@lru_cache(maxsize=32)
def _unit_basis(names: tuple[str, ...]) -> NDArray:
    """The unit tensors of ``names`` flattened, (k, 16), read-only (one per name tuple)."""
    out = np.stack([unit_k_tensor(n) for n in names]).reshape(len(names), 16)
    out.flags.writeable = False
    return out


def k_tensor(values: dict[str, float]) -> NDArray:
    """k^{mu nu} (SCCEF) of a set of SME coefficient values."""
    return sum((v * unit_k_tensor(n) for n, v in values.items()), np.zeros((4, 4)))


def lab_transform(state: FrameState) -> NDArray:
    """L = diag(1, R) Lambda(beta): SCCEF -> (boost) -> lab axes, shape (n, 4, 4), read-only.

    The state's :attr:`~fringe.frames.FrameState.lab_transform`, kept with the state once
    computed (as its ``rotation`` is), so the projections of several tensors on one state
    (:func:`fringe.fit.turn_model._projected_basis`) form it once.
    """
    return state.lab_transform


class SmePhoton(Theory):
    """SME nonbirefringent photon sector with the exact observer boost to the lab."""

    name: ClassVar[str] = "sme"
    parameter_names: ClassVar[tuple[str, ...]] = SME_NAMES
    parameter_units: ClassVar[dict[str, str]] = {n: "1" for n in SME_NAMES}
    description: ClassVar[str] = ("SME nonbirefringent photon sector (kappa_e-, kappa_o+, "
                                  "kappa_tr), exact observer boost")
    #: ke_* lead (unsuppressed); ko_* enter suppressed by the boost (about 1e-4) and separate from
    #: them through its annual modulation; ktr is doubly suppressed and never freed by default.
    primary_names: ClassVar[tuple[str, ...]] = KE_NAMES
    annual_names: ClassVar[tuple[str, ...]] = KO_NAMES
    annual_span_days: ClassVar[float] = KO_DEFAULT_SPAN_DAYS

    def response(self, state: FrameState, names=None):
        """Per-coefficient lab response tensors T (n, k, 3, 3) and isotropic shifts s (n, k).

        With k'_k = L k_k Lᵀ the unit tensor of coefficient k seen by the lab
        (:func:`lab_transform`: exact boost, then rotation to lab axes):
        T_k = -1/2 traceless(k'_spatial) and s_k = -1/2 k'^{00} - 1/6 tr k'_spatial
        (= -(2/3) k'^{00}, as the eta-trace is invariant).

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
        basis = np.stack([unit_k_tensor(n) for n in names])          # (k, 4, 4)
        lt = lab_transform(state)                                     # (n, 4, 4)
        kp = np.matmul(np.einsum("nab,kbc->nkac", lt, basis), np.swapaxes(lt, 1, 2)[:, None])
        spatial = kp[..., 1:, 1:]
        tr = np.trace(spatial, axis1=-2, axis2=-1)
        t = -0.5 * (spatial - tr[..., None, None] * np.eye(3) / 3.0)
        s = -0.5 * kp[..., 0, 0] - tr / 6.0      # = -(2/3) k'^{00} (eta-trace is invariant)
        return t, s

    def project(self, state, w_lab, w_iso, names=None):
        """Fast basis: W : T_k + w_iso s_k = V : k_k with V = Lᵀ A L (no per-coefficient tensors).

        With T_k = -1/2 traceless((L k_k Lᵀ)_spatial) and s_k = -1/2 k'^{00} - 1/6 tr k'_spatial,
        A = -1/2 [W - tr(W)/3 I]_spatial + w_iso (-1/2 e0 e0 - 1/6 I_spatial), since
        X : (L k Lᵀ) = (Lᵀ X L) : k for any 4x4 X.
        """
        names = tuple(names) if names is not None else self.parameter_names
        self.check_params({n: 0.0 for n in names})
        basis = _unit_basis(names)
        n = w_lab.shape[0]
        a = np.zeros((n, 4, 4))
        tr_w = np.trace(w_lab, axis1=1, axis2=2)
        a[:, 1:, 1:] = -0.5 * (w_lab - (tr_w / 3.0)[:, None, None] * np.eye(3)) \
            - (w_iso / 6.0) * np.eye(3)
        a[:, 0, 0] = -0.5 * w_iso
        lt = lab_transform(state)
        v = np.matmul(np.swapaxes(lt, 1, 2), np.matmul(a, lt))
        return v.reshape(n, 16) @ basis.T
