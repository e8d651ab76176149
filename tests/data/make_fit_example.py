"""Write the small stored fit result used by tests/report/ (invented numbers).

    python tests/data/make_fit_example.py

writes ``fit_example.json`` and ``fit_example.turns.h5`` beside this script (``main(out_dir)``
writes them elsewhere; the tests use that to check the stored files are reproducible). Everything is
invented: the site, the campaign, the "true" coefficients and the sensitivity matrix that maps
the five ke_* coefficients to the C10 harmonics (a made-up 8x5 matrix of order one times the
carrier frequency, NOT the SME response of any real set-up). The per-turn amplitudes are
simulated from it with Gaussian noise (seeded), then

* the ten C10 harmonics are fitted freely to the per-turn C and B (weighted least squares);
* the coefficients are fitted to the per-turn C and B with C0 and B0 as free offsets, and
  ``model_C``/``model_B`` are that fit evaluated at each turn;
* uncertainties are scaled by sqrt(reduced chi2) ("reduced-chi2"), and the warnings are the
  diagnostics those numbers trigger.

The output is deterministic (fixed seed, fixed time stamps). The HDF5 file stays well under
200 kB (about 1900 turns).
"""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path

import h5py
import numpy as np

HERE = Path(__file__).resolve().parent
KE = ("ke_XY", "ke_XZ", "ke_YZ", "ke_XXmYY", "ke_ZZ")
HARM = ("C0", "Cs1", "Cc1", "Cs2", "Cc2", "B0", "Bs1", "Bc1", "Bs2", "Bc2")

CARRIER_HZ = 2.82e14
TURN_PERIOD_S = 360.0
N_TURNS = 2000
STELLAR_DAY_S = 86_400.0 / 1.00273781191135448
PHI0_RAD = 1.234
SIGMA_TURN_HZ = 0.05          # stated per-turn uncertainty
NOISE_SCALE = 1.1             # actual noise / stated (so reduced chi2 ~ 1.2)
B0_SYSTEMATIC_HZ = 9.0e-3     # an invented lab-fixed offset in B
TRUE = dict(zip(KE, (1.5e-17, -0.8e-17, 0.3e-17, 2.0e-17, -4.0e-17), strict=True))

# Invented sensitivity of the sidereal harmonics (rows Cs1 Cc1 Cs2 Cc2 Bs1 Bc1 Bs2 Bc2) to the
# ke_* (columns), in units of CARRIER_HZ per unit coefficient. Not physics.
SENS = np.array([
    [0.00, 0.42, -0.11, 0.00, 0.05],
    [0.00, 0.09, 0.40, 0.00, 0.04],
    [-0.55, 0.00, 0.00, 0.27, 0.00],
    [0.24, 0.00, 0.00, 0.52, 0.00],
    [0.00, -0.38, 0.16, 0.00, 0.00],
    [0.00, 0.12, 0.37, 0.00, 0.00],
    [0.46, 0.00, 0.00, -0.31, 0.00],
    [0.30, 0.00, 0.00, 0.49, 0.00],
]) * CARRIER_HZ


def basis(phi):
    """(n, 5): 1, sin phi, cos phi, sin 2 phi, cos 2 phi."""
    return np.stack([np.ones_like(phi), np.sin(phi), np.cos(phi), np.sin(2 * phi),
                     np.cos(2 * phi)], axis=1)


def wls(design, y, sigma):
    """Weighted least squares: estimate, formal covariance, chi2, dof."""
    w = 1.0 / sigma
    a = design * w[:, None]
    b = y * w
    cov = np.linalg.inv(a.T @ a)
    p = cov @ (a.T @ b)
    chi2 = float(np.sum((a @ p - b) ** 2))
    return p, cov, chi2, y.size - p.size


def main(out_dir: Path = HERE):
    out_dir = Path(out_dir)
    rng = np.random.default_rng(20310402)
    t = (np.arange(N_TURNS) + 0.5) * TURN_PERIOD_S
    keep = ~((t > 320_000) & (t < 342_000))            # a 6-hour interruption
    t = t[keep]
    phi = np.mod(PHI0_RAD + 2 * np.pi * t / STELLAR_DAY_S, 2 * np.pi)
    n = t.size
    f = basis(phi)
    true_h = SENS @ np.array([TRUE[k] for k in KE])    # 8 sidereal harmonics, Hz
    c_true = 2.0e-3 + f[:, 1:] @ true_h[:4]
    b_true = B0_SYSTEMATIC_HZ + f[:, 1:] @ true_h[4:]
    sig_c = SIGMA_TURN_HZ * (1 + 0.2 * rng.random(n))
    sig_b = SIGMA_TURN_HZ * (1 + 0.2 * rng.random(n))
    c = c_true + NOISE_SCALE * sig_c * rng.standard_normal(n)
    b = b_true + NOISE_SCALE * sig_b * rng.standard_normal(n)
    accepted = np.ones(n, dtype=np.int8)
    glitch = rng.choice(n, 40, replace=False)
    accepted[glitch] = 0
    c[glitch[:20]] += 1.5                               # glitched turns (rejected)
    partial = rng.choice(np.flatnonzero(accepted), 25, replace=False)
    accepted[partial] = 0
    ok = accepted == 1

    # (1) free C10 harmonics
    z = np.zeros_like(f[ok])
    design_h = np.block([[f[ok], z], [z, f[ok]]])
    y = np.concatenate([c[ok], b[ok]])
    s = np.concatenate([sig_c[ok], sig_b[ok]])
    h, hcov, hchi2, hdof = wls(design_h, y, s)
    h_red = hchi2 / hdof
    hcov = hcov * max(1.0, h_red)

    # (2) coefficients with free C0, B0
    kc = f[ok][:, 1:] @ SENS[:4]                         # (n_ok, 5)
    kb = f[ok][:, 1:] @ SENS[4:]
    one, zero = np.ones((ok.sum(), 1)), np.zeros((ok.sum(), 1))
    design = np.block([[kc, one, zero], [kb, zero, one]])
    p, pcov, chi2, dof = wls(design, y, s)
    red = chi2 / dof
    formal = np.sqrt(np.diag(pcov))[:5]
    pcov = pcov * max(1.0, red)
    sig = np.sqrt(np.diag(pcov))
    model_c = f[:, 1:] @ SENS[:4] @ p[:5] + p[5]
    model_b = f[:, 1:] @ SENS[4:] @ p[:5] + p[6]

    rho = pcov[:5, :5] / np.outer(sig[:5], sig[:5])
    warnings = []
    b0_z = h[5] / math.sqrt(hcov[5, 5])
    if abs(b0_z) > 3:
        warnings.append(f"B0 = {h[5]:.2e} Hz differs from zero by {abs(b0_z):.1f} sigma: "
                        "a lab-fixed systematic is likely")
    if red > 1.1:
        warnings.append(f"reduced chi2 = {red:.2f} > 1.1: uncertainties scaled by "
                        "sqrt(reduced chi2)")
    for i in range(5):
        for j in range(i + 1, 5):
            if abs(rho[i, j]) > 0.5:
                warnings.append(f"{KE[i]} and {KE[j]} are correlated (rho = {rho[i, j]:+.2f})")

    turns_path = out_dir / "fit_example.turns.h5"
    with h5py.File(turns_path, "w", track_order=True) as fh:
        fh.attrs["fringe_format"] = "turns"
        fh.attrs["fringe_format_version"] = 1
        fh.attrs["units"] = "Hz"
        fh.attrs["epoch_utc"] = "2031-04-02T00:00:00Z"
        g = fh.create_group("turns")
        for name, arr in (("t_mid_s", t), ("phi_rad", phi), ("C", c), ("B", b),
                          ("sigma_C", sig_c), ("sigma_B", sig_b), ("accepted", accepted),
                          ("model_C", model_c), ("model_B", model_b)):
            g.create_dataset(name, data=arr, compression="gzip", shuffle=True)

    fit = {
        "fringe_format": "fit", "fringe_format_version": 1,
        "theory": "sme", "units": "Hz",
        "coefficients": {k: {"value": float(p[i]), "sigma": float(sig[i])}
                         for i, k in enumerate(KE)},
        "fixed": {"ko_XY": 0.0, "ko_XZ": 0.0, "ko_YZ": 0.0, "ktr": 0.0},
        "covariance": {"names": list(KE),
                       "matrix": [[float(x) for x in row] for row in pcov[:5, :5]]},
        "harmonics": {"names": list(HARM), "value": [float(x) for x in h],
                      "sigma": [float(x) for x in np.sqrt(np.diag(hcov))],
                      "covariance": [[float(x) for x in row] for row in hcov],
                      "units": "Hz", "chi2_reduced": float(h_red)},
        "warnings": warnings,
        "nuisance": {"lab_C0": {"value": float(p[5]), "sigma": float(sig[5])},
                     "lab_B0": {"value": float(p[6]), "sigma": float(sig[6])}},
        "notes": ["invented example: the coefficient model uses a made-up sensitivity matrix"],
        "efficiency": {k: float(formal[i] / sig[i]) for i, k in enumerate(KE)},
        "statistics": {"chi2_reduced": float(red), "dof": int(dof),
                       "uncertainty": "reduced-chi2"},
        "stage1": {"n_blocks": int(n), "n_accepted": int(ok.sum()),
                   "n_rejected_glitch": int(glitch.size),
                   "n_rejected_partial": int(partial.size), "turn_period_s": TURN_PERIOD_S,
                   "residual_rms": 0.055, "white_noise_per_sample": 0.8},
        "site": {"latitude_deg": 47.62, "longitude_deg": 11.38, "height_m": 610.0,
                 "name": "Kestrel Fen optics cellar (invented)"},
        "apparatus": {"kind": "cavity-pair", "carrier_hz": CARRIER_HZ,
                      "path_separation_deg": 90.0},
        "epoch_utc": "2031-04-02T00:00:00Z", "span_s": float(t[-1] - t[0] + TURN_PERIOD_S),
        "conventions": {"theta": "turntable angle: azimuth of path 1 from south toward east",
                        "beat": "beat sign: path 1 minus path 2",
                        "normalisation": "normalisation: the two-path signal",
                        "sidereal": "sidereal angle: phi = ERA(UT1) + east longitude"},
        "settings": {"theory": "sme", "free": list(KE), "nuisance": ["C0", "B0"],
                     "annual": False, "uncertainty": "reduced-chi2"},
        "input": {"path": "kestrel_fen_run.h5",
                  "sha256": hashlib.sha256(b"invented run file").hexdigest()},
        "software": {"fringe": "0.1.0", "numpy": "2.x", "lmfit": "1.3.4"},
        "created_utc": "2031-05-01T12:00:00Z",
        "amplitudes_file": turns_path.name,
    }
    (out_dir / "fit_example.json").write_text(json.dumps(fit, indent=2) + "\n", encoding="utf-8")
    return out_dir / "fit_example.json", turns_path


if __name__ == "__main__":
    for p in main():
        print(f"wrote {p} ({p.stat().st_size} bytes)")
