"""The runs section of a joint result's report (fringe/report/runs.py), on hand-made likelihoods.

Two invented runs with Gaussian likelihoods in (ke_XY, ke_ZZ, lab_B0) are combined both ways
(the joint fit's Schur complement of the normal matrix, the combination's marginal covariance);
the sections render in every style, with file names escaped for LaTeX, and summary.json keeps
the runs without their likelihoods.
"""

from __future__ import annotations

import hashlib

import numpy as np
import pytest

from fringe.fit.joint import RunPart, combine_parts
from fringe.io.fit_joint import Likelihood
from fringe.report.runs import runs_html, runs_latex, runs_markdown, runs_summary, runs_table

COLUMNS = ("ke_XY", "ke_ZZ", "lab_B0")


def _part(path, lat, kind, value, cov):
    lik = Likelihood(COLUMNS, 2, value, np.array(cov), chi2=100.0, dof=100,
                     uncertainty="reduced-chi2")
    return RunPart(path, hashlib.sha256(path.encode()).hexdigest(), {"name": "Lab (invented)",
                   "latitude_deg": lat}, {"kind": kind}, "2027-02-03T00:00:00Z", 43200.0, "Hz",
                   720, "reduced-chi2", 1.0, 100, lik)


PARTS = [_part("run_a.h5", 47.6, "cavity-pair", (1e-17, 2e-17, 0.01),
               [[4e-34, 1e-34, 1e-19], [1e-34, 9e-34, 0.0], [1e-19, 0.0, 1e-4]]),
         _part("run_b.h5", -31.5, "michelson", (-1e-17, 3e-17, -0.02),
               [[9e-34, -2e-34, 0.0], [-2e-34, 2.5e-33, 3e-19], [0.0, 3e-19, 4e-4]])]


@pytest.fixture(scope="module")
def joint():
    return combine_parts(PARTS, theory="sme", fixed={}, method="combination")


def test_both_routes_give_the_weighted_mean_of_the_marginals(joint):
    schur = combine_parts(PARTS, theory="sme", fixed={}, method="joint fit", route="schur")
    f = [np.linalg.inv(np.array(p.likelihood.covariance)[:2, :2]) for p in PARTS]
    x = np.linalg.solve(sum(f), sum(fi @ np.array(p.likelihood.value[:2])
                                    for fi, p in zip(f, PARTS)))       # derived: GLS
    for res in (joint, schur):
        got = np.array([res.coefficients[n].value for n in COLUMNS[:2]])
        np.testing.assert_allclose(got, x, rtol=1e-10)
        np.testing.assert_allclose(res.covariance.array(), np.linalg.inv(sum(f)), rtol=1e-10)


def test_runs_sections_render_in_every_style(joint):
    md = "\n".join(runs_markdown(joint))
    assert md.startswith("## Runs") and "| run 1 | run_a.h5 | Lab (invented), +47.60° |" in md
    assert "σ joint" in md
    tex = "\n".join(runs_latex(joint))
    assert r"run\_a.h5" in tex and r"-31.50$^\circ$" in tex and "tab:runs-sigma" in tex
    (title, body), = runs_html(joint)
    assert title == "Runs" and "michelson" in body
    table = runs_table(joint)
    shares = [[float(c) for c in row[7:]] for row in table.rows]
    assert np.allclose(np.sum(shares, axis=0), 1.0, atol=2e-3)          # printed to 3 digits
    summary = runs_summary(joint)["runs"]
    assert [r["path"] for r in summary["runs"]] == ["run_a.h5", "run_b.h5"]
    assert all("likelihood" not in r for r in summary["runs"])


def test_a_result_of_one_run_file_has_no_runs_section(joint):
    import dataclasses

    single = dataclasses.replace(joint, runs=None)
    assert runs_markdown(single) == [] and runs_html(single) == [] and runs_summary(single) == {}
