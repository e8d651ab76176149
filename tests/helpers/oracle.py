"""Independent reference oracle for the tests (docs/references.md [R-oracle]).

A direct implementation of docs/references.md [R-SME-dictionary] (dictionary), [R-lab-R] (R),
[R-SME-boost] (first-order boost), [R-SME-cavity] (single cavity), [R-SME-two-path] (two-path
signal), [R-astro-circular-orbit] (circular orbit) and [R-RMS-signal] (K_RMS). It shares no code
with ``fringe`` and is used only by the tests, as a second implementation of the same formulas.
"""

import numpy as np


def rot_sccef_to_lab(chi, phi):          # rows: south, east, up ([R-lab-R])
    c, s = np.cos(phi), np.sin(phi)
    return np.array([[np.cos(chi)*c, np.cos(chi)*s, -np.sin(chi)],
                     [-s, c, 0.0],
                     [np.sin(chi)*c, np.sin(chi)*s, np.cos(chi)]])


def boosted_kappa_e(ke, ko_xy, ko_xz, ko_yz, ktr, beta):   # SCCEF axes ([R-SME-boost])
    w = np.array([ko_yz, -ko_xz, ko_xy])                    # C11
    return (ke - np.outer(beta, w) - np.outer(w, beta) + (2/3)*np.eye(3)*(beta @ w)
            - 2*ktr*(np.outer(beta, beta) - np.eye(3)*(beta @ beta)/3))


def two_path_signal(theta, chi, phi, k_sccef):            # (nu1 - nu2)/nu, C6/C8
    r = rot_sccef_to_lab(chi, phi)
    k_lab = r @ k_sccef @ r.T
    n1 = np.array([np.cos(theta), np.sin(theta), 0.0])
    n2 = np.array([-np.sin(theta), np.cos(theta), 0.0])
    return 0.5*(n1 @ k_lab @ n1 - n2 @ k_lab @ n2)


def single_cavity_shift(n_sccef, ke, ko_xy, ko_xz, ko_yz, ktr, beta):   # [R-SME-cavity]
    w = np.array([ko_yz, -ko_xz, ko_xy])
    nb = n_sccef @ beta
    return (0.5*n_sccef @ ke @ n_sccef - nb*(n_sccef @ w) - beta @ w
            - ktr*(1 + beta @ beta + nb**2))


def k_from_kappa(ke, ko_xy, ko_xz, ko_yz, ktr):          # k^{mu nu}, [R-SME-dictionary]
    k = np.zeros((4, 4))
    k[0, 0] = 1.5*ktr
    k[1:, 1:] = -ke + 0.5*ktr*np.eye(3)
    k[0, 1:] = k[1:, 0] = -np.array([ko_yz, -ko_xz, ko_xy])
    return k


ETA_J2000 = np.radians(23.4392794)                        # [R-vec-common]: eta


def beta_circular(orbital_phase, beta_orb=9.93e-5, eta=ETA_J2000):
    return beta_orb*np.array([np.sin(orbital_phase),
                              -np.cos(eta)*np.cos(orbital_phase),
                              -np.sin(eta)*np.cos(orbital_phase)])


def k_rms(p_mm, v_over_c):                                 # P = delta - beta + 1/2 ([R-RMS-signal])
    return -2*p_mm*(np.outer(v_over_c, v_over_c) - np.eye(3)*(v_over_c @ v_over_c)/3)
