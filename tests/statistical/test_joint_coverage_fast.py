"""A fast subset of the joint fit's coverage study (validation/joint_coverage.py).

Twelve joint campaigns of each configuration (two sites and apparatus kinds; one site with a
tilted second run), seeds fixed. Bands are the central 99.9 % intervals of the exact reference
distributions (scipy.stats, reference library): a correct fit fails one with probability 1e-3.

* sum over campaigns of the Mahalanobis distance of the five ke_* from the truth, with the joint
  covariance: chi^2 with 5 x 12 = 60 degrees of freedom;
* mean pull per coefficient: normal with standard error 1/sqrt(12): |mean| < 3.29/sqrt(12);
* the combination of the runs' likelihoods equals the joint fit (0.05 sigma, issue 16) and the
  joint sigma is not above the best single run's.
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
    "joint_coverage", Path(__file__).resolve().parents[2] / "validation" / "joint_coverage.py")
jc = importlib.util.module_from_spec(_SPEC)
sys.modules.setdefault("joint_coverage", jc)
_SPEC.loader.exec_module(jc)

N = 12
SEED = 1616
TAIL = 0.0005


@pytest.mark.parametrize("config", jc.CONFIGS)
def test_joint_campaigns_cover_the_truth(config):
    recs = [jc.run_campaign((config, i, SEED)) for i in range(N)]
    assert all("error" not in r for r in recs)
    diffs = [np.subtract([r["value"][k] for k in jc.KE], [r["truth"][k] for k in jc.KE])
             for r in recs]
    d2 = sum(float(d @ np.linalg.solve(np.array(r["cov"]), d)) for d, r in zip(diffs, recs))
    dof = len(jc.KE) * N
    lo, hi = stats.chi2.ppf(TAIL, dof), stats.chi2.isf(TAIL, dof)      # scipy.stats.chi2
    assert lo <= d2 <= hi, f"sum of Mahalanobis distances {d2:.1f}, band [{lo:.1f}, {hi:.1f}]"
    z = np.array([[(r["value"][k] - r["truth"][k]) / r["sigma"][k] for k in jc.KE]
                  for r in recs])
    limit = stats.norm.isf(TAIL) / math.sqrt(N)                      # scipy.stats.norm
    assert np.all(np.abs(z.mean(axis=0)) < limit), z.mean(axis=0)
    for r in recs:
        assert max(abs(v) for v in r["combine_minus_joint"].values()) < 0.05
        assert all(r["sigma"][k] <= min(a[k] for a in r["alone"]) for k in jc.KE)
