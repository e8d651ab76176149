"""A fast subset of the statistical validation (validation/run_validation.py).

Small simulated SME campaigns (white FM, 45 s turns at 1 Hz, about one day) are fitted exactly
as a user would and the reported intervals are checked against the injected truth. The seeds
are fixed (numpy SeedSequence of study seed, configuration name and index), so every run gives
the same numbers.

Bands. Each statistical check uses the central 99.9 % interval of its exact reference
distribution for that N, taken from scipy.stats (reference library); a correct fit fails one
such check with probability 1e-3 for a fresh seed:

* count of the 30 campaigns with |pull| <= 1 (resp. 1.96): binomial(30, p) with
  p = 2 Phi(1) - 1 = 0.6827 (resp. 2 Phi(1.96) - 1 = 0.9500) (scipy.stats.norm): [12, 28]
  (resp. [23, 30]);
* sum over campaigns of the Mahalanobis distance d^2 = (est - truth)^T Cov^-1 (est - truth) of
  the five ke_*: chi^2 with 5 x 30 = 150 degrees of freedom: [99.5, 213.6];
* mean pull per coefficient: normal, standard error 1/sqrt(30): |mean| < 3.29/sqrt(30) = 0.60.

The study's full run (docs/validation.md) uses 400 campaigns per configuration; the slow test
below runs 200.
"""

from __future__ import annotations

import importlib.util
import math
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

_SPEC = importlib.util.spec_from_file_location(
    "run_validation", Path(__file__).resolve().parents[2] / "validation" / "run_validation.py")
rv = importlib.util.module_from_spec(_SPEC)
sys.modules.setdefault("run_validation", rv)     # dataclasses look the module up by name
_SPEC.loader.exec_module(rv)

SEED = 424242
TAIL = 0.0005                                   # per side: central 99.9 % intervals
P1 = 2 * stats.norm.cdf(1.0) - 1                # 0.6827 (scipy.stats.norm)
P196 = 2 * stats.norm.cdf(1.96) - 1             # 0.9500 (scipy.stats.norm)
ONE_SIDEREAL_DAY_D = rv.SIDEREAL_DAY_S / 86400.0


def _campaigns(tmp_path, config: str, n: int, days: float) -> list[dict]:
    return [rv.run_campaign((config, i, SEED, days), workdir=tmp_path) for i in range(n)]


def _check_coverage(records: list[dict], label: str = "reduced-chi2") -> None:
    n = len(records)
    z = rv.pulls(records, label, rv.KE)
    for p, k in ((P1, 1.0), (P196, 1.96)):
        lo, hi = stats.binom.ppf(TAIL, n, p), stats.binom.isf(TAIL, n, p)   # scipy.stats.binom
        counts = np.sum(np.abs(z) <= k, axis=0)
        for name, c in zip(rv.KE, counts, strict=True):
            assert lo <= c <= hi, f"{name}: {c}/{n} within {k} sigma, band [{lo:.0f}, {hi:.0f}]"
    d2 = float(np.sum(rv.mahalanobis2(records, label, rv.KE)))
    dof = len(rv.KE) * n
    lo, hi = stats.chi2.ppf(TAIL, dof), stats.chi2.isf(TAIL, dof)            # scipy.stats.chi2
    assert lo <= d2 <= hi, f"sum of d^2 = {d2:.1f}, band [{lo:.1f}, {hi:.1f}] (chi2_{dof})"
    limit = stats.norm.isf(TAIL) / math.sqrt(n)                             # 3.29 / sqrt(n)
    for name, m in zip(rv.KE, z.mean(axis=0), strict=True):
        assert abs(m) < limit, f"{name}: mean pull {m:+.3f}, band +-{limit:.3f}"


def test_coverage_small_sme_campaigns(tmp_path):
    """30 one-day SME campaigns, ke_* injected at a few sigma (uniform in +-4e-17)."""
    records = _campaigns(tmp_path, "sme-white", 30, 1.0)
    truth = np.array([[r["truth"][n] for n in rv.KE] for r in records])
    sigma = np.array([[r["fits"]["reduced-chi2"]["sigma"][n] for n in rv.KE] for r in records])
    # the injections are of the order of sigma (a few sigma at most): a test of the intervals,
    # not of a large-signal limit
    assert 0.5 < np.median(np.abs(truth) / sigma) < 5
    _check_coverage(records)


def test_scrambled_sidereal_phase_is_a_null(tmp_path):
    """Whole turns permuted in time destroy the sidereal pattern of a ~8 sigma injection.

    Before the scramble every campaign shows the signal: d^2 of the four modulated ke_* against
    zero exceeds the chi^2_4 quantile at 1e-9 (47.9, scipy.stats.chi2). After it, the sum of
    d^2 against zero over the 6 campaigns follows chi^2_24 (band [7.5, 53.5]); ke_ZZ (C0, the
    mean of C over the record, which a permutation keeps) still matches its injected value:
    sum of pull^2 ~ chi^2_6 (band [0.30, 24.1]).
    """
    records = _campaigns(tmp_path, "scramble", 6, 1.0 * ONE_SIDEREAL_DAY_D)
    raw = rv.mahalanobis2(records, "reduced-chi2", rv.MODULATED, zero=True)
    assert np.all(raw > stats.chi2.isf(1e-9, 4)), raw
    assert all(r["fits"]["scrambled"]["n_turns_permuted"] > 1000 for r in records)
    d2 = float(np.sum(rv.mahalanobis2(records, "scrambled", rv.MODULATED, zero=True)))
    dof = len(rv.MODULATED) * len(records)
    assert stats.chi2.ppf(TAIL, dof) <= d2 <= stats.chi2.isf(TAIL, dof), d2
    zz = rv.pulls(records, "scrambled", ("ke_ZZ",))[:, 0]
    s = float(np.sum(zz ** 2))
    assert stats.chi2.ppf(TAIL, len(zz)) <= s <= stats.chi2.isf(TAIL, len(zz)), zz


def test_epoch_shift_rotates_the_signal_instead_of_removing_it(tmp_path):
    """Moving the epoch by a constant rotates the sidereal phase by delta (not a null).

    The shifted fit must equal the unshifted one with (ke_YZ, ke_XZ) rotated by delta,
    (ke_XY, ke_XXmYY/2) by 2 delta and ke_ZZ unchanged (C10 table, docs/references.md
    [R-lab-fourier]; derived). The same data are fitted twice, so the only differences are the
    orbital velocity at the other epoch (no ko_* injected: no effect on ke_*) and rounding: 1e-3
    sigma.
    """
    rec = rv.run_campaign(("epoch-shift", 0, SEED, 1.0 * ONE_SIDEREAL_DAY_D), workdir=tmp_path)
    shifted = rec["fits"]["epoch-shifted"]
    delta = shifted["delta_rad"]
    assert abs(math.sin(delta)) > 0.1 and abs(math.sin(2 * delta)) > 0.1, delta
    for name in rv.KE:
        dev = abs(shifted["value"][name] - shifted["predicted"][name]) / shifted["sigma"][name]
        assert dev < 1e-3, (name, dev)
    # the signal is still there, moved between coefficients
    before = rec["fits"]["reduced-chi2"]
    moved = max(abs(shifted["value"][n] - before["value"][n]) / before["sigma"][n]
                for n in rv.MODULATED)
    assert moved > 3.0
    assert max(abs(shifted["value"][n]) / shifted["sigma"][n] for n in rv.MODULATED) > 5.0


@pytest.mark.slow
def test_coverage_200_campaigns(tmp_path):
    """The same checks with 200 campaigns (bands from the same 99.9 % rule for N = 200)."""
    _check_coverage(_campaigns(tmp_path, "sme-white", 200, 1.0))
