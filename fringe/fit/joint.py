"""One set of coefficients from several runs: the joint fit and the combination of results.

Each run's stage 3 is a weighted least-squares fit of its per-turn (C, B) amplitudes, so its
likelihood is Gaussian in its stage-3 columns theta_r = (coefficients c, the run's nuisances
n_r: lab_B0, lab_C0, aux_CHANNEL), with the solution theta_r^ and covariance V_r the fit
reports (its own reduced chi^2 scaling of the C and B rows, Student-t factor or bootstrap):
:class:`fringe.io.fit_joint.Likelihood`, kept in every linear fit result (format version 3).
For independent runs the joint likelihood is the product, and the joint generalised
least-squares estimate, with every run keeping its own nuisances (a block each) and its own
scaling, is

    F_r = information of run r on c with n_r profiled,   b_r = F_r c_r^,
    c = (sum_r F_r)^-1 sum_r b_r,   cov(c) = (sum_r F_r)^-1.

Two routes reach F_r, b_r, and the code takes one each:

* :func:`fit_joint` (``fringe fit RUN1 RUN2 ...``) fits each run file with the same settings, one
  after another (only each run's small matrices are kept: memory does not grow with the number
  of runs beyond a few kB a run), and forms F_r and b_r from the run's normal equations
  N_r = V_r^-1, h_r = N_r theta_r^, eliminating the nuisance block (the Schur complement
  F_r = N_cc - N_cn N_nn^-1 N_nc, b_r = h_c - N_cn N_nn^-1 h_n);
* :func:`combine_results` (``fringe combine FIT1.json FIT2.json ...``) reads the likelihoods of
  stored results and takes F_r = (V_r,cc)^-1 (the marginal covariance of c), b_r = F_r c_r^.

Both give the same numbers (the inverse of a covariance's block is the Schur complement of its
inverse); tests/fit/test_joint.py checks them against each other and against one stacked
weighted least-squares fit of all runs' per-turn rows. At the joint solution c each run's
nuisances are n_r = n_r^ + V_nc V_cc^-1 (c - c_r^) (the conditional mean of its Gaussian), and
its ``delta_chi2`` = (c - c_r^)ᵀ F_r (c - c_r^); their sum is the runs' agreement chi^2, with
(R - 1) k degrees of freedom for R runs and k coefficients.

Assumptions (``docs/fit.md``): the runs are independent (no noise or systematic shared between
them); each run's likelihood is Gaussian (linear theory); all runs free the same coefficients
and hold the same ones fixed at the same values. A run that cannot determine the free set on
its own cannot enter (its own fit is singular).
"""

from __future__ import annotations

import datetime
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from fringe.errors import ConfigError, FitError
from fringe.io.fit_joint import Likelihood, RunEntry, Runs
from fringe.io.fit_result import CONVENTIONS, FitResult
from fringe.io.fit_sections import Covariance, Estimate, FitWarning, Statistics
from fringe.linalg import SingularMatrixError, invert_normal

__all__ = ["RunPart", "combine_parts", "combine_results", "fit_joint", "joint_free",
           "run_part"]


@dataclass(frozen=True)
class RunPart:
    """What a joint result keeps of one run: its identity, its statistics and likelihood."""

    path: str
    sha256: str
    site: dict
    apparatus: dict
    epoch_utc: str
    span_s: float
    units: str
    n_turns: int
    uncertainty: str
    chi2_reduced: float
    dof: int
    likelihood: Likelihood
    warnings: tuple = ()
    source: str = ""          # the fit result file it came from ("" for a run fitted here)
    notes: tuple = ()         # the run's own notes (cautions among them)
    systematics: object = None  # the run's own budget (Systematics), carried into the joint one


def run_part(result: FitResult, source: str = "") -> RunPart:
    """The :class:`RunPart` of a fit of one run file (``source``: the file it was read from)."""
    where = source or (result.input.path if result.input else "fit result")
    if result.likelihood is None:
        raise ConfigError(f"{where}: likelihood: expected the portable likelihood of a linear "
                          "fit of fit-result format 3 (this result has none: written by an "
                          "older version, or a nonlinear theory, or rms_kt free); fit its run "
                          "file again")
    st, s1 = result.statistics, result.stage1
    return RunPart(
        path=result.input.path if result.input else "?",
        sha256=result.input.sha256 if result.input else "",
        site=dict(result.site or {}), apparatus=dict(result.apparatus or {}),
        epoch_utc=result.epoch_utc or "", span_s=float(result.span_s or 0.0),
        units=result.units, n_turns=int(st.n_turns_used if st and st.n_turns_used is not None
                                        else (s1.n_accepted if s1 else 0)),
        uncertainty=st.uncertainty if st else result.likelihood.uncertainty,
        chi2_reduced=float(st.chi2_reduced) if st else float("nan"),
        dof=int(st.dof) if st else result.likelihood.dof, likelihood=result.likelihood,
        warnings=tuple(result.warnings), source=source, notes=tuple(result.notes),
        systematics=result.systematics)


def _parts_of_entry(entry: RunEntry, source: str) -> RunPart:
    """A run of a stored joint result as a RunPart (to combine it again)."""
    return RunPart(entry.path, entry.sha256, dict(entry.site), dict(entry.apparatus),
                   entry.epoch_utc, entry.span_s, entry.units, entry.n_turns,
                   entry.uncertainty, entry.chi2_reduced, entry.dof, entry.likelihood,
                   (), source)


# ------------------------------------------------------------------ the two routes to F, b

def _order(lik: Likelihood, names: tuple[str, ...]) -> tuple[NDArray, NDArray, NDArray]:
    """(index of the coefficients in ``names`` order, of the nuisances), theta^, V."""
    value, cov = lik.arrays()
    ic = np.array([lik.columns.index(n) for n in names], int)
    inn = np.arange(lik.n_coefficients, len(lik.columns))
    return np.concatenate([ic, inn]), value, cov


def information_schur(lik: Likelihood, names: tuple[str, ...]) -> tuple[NDArray, NDArray]:
    """(F_r, b_r) from the run's normal equations N = V^-1, nuisances eliminated (joint fit)."""
    idx, value, cov = _order(lik, names)
    k = len(names)
    v = cov[np.ix_(idx, idx)]
    theta = value[idx]
    n = _inverse(v, "run covariance")
    h = n @ theta
    if v.shape[0] == k:
        return n, h
    n_cn, n_nn = n[:k, k:], n[k:, k:]
    inv_nn = _inverse(n_nn, "nuisance block")
    return n[:k, :k] - n_cn @ inv_nn @ n_cn.T, h[:k] - n_cn @ inv_nn @ h[k:]


def information_marginal(lik: Likelihood, names: tuple[str, ...]) -> tuple[NDArray, NDArray]:
    """(F_r, b_r) from the marginal covariance of the coefficients (combination of results)."""
    idx, value, cov = _order(lik, names)
    k = len(names)
    f = _inverse(cov[np.ix_(idx[:k], idx[:k])], "coefficient covariance")
    return f, f @ value[idx[:k]]


def _inverse(m: NDArray, what: str) -> NDArray:
    try:
        return invert_normal(0.5 * (m + m.T), null="raise")
    except SingularMatrixError:
        raise FitError(f"joint fit: singular {what} of a run (a free coefficient that run "
                       "does not determine)") from None


def _nuisance_at(lik: Likelihood, names, x: NDArray, cov_x: NDArray) -> dict:
    """The run's nuisances at the joint solution (conditional mean) with their 1 sigma."""
    idx, value, cov = _order(lik, names)
    k = len(names)
    v = cov[np.ix_(idx, idx)]
    theta = value[idx]
    if v.shape[0] == k:
        return {}
    gain = v[k:, :k] @ _inverse(v[:k, :k], "coefficient covariance")    # V_nc V_cc^-1
    n = theta[k:] + gain @ (x - theta[:k])
    c = v[k:, k:] - gain @ v[:k, k:] + gain @ cov_x @ gain.T
    return {lik.nuisances[i]: Estimate(float(n[i]), float(math.sqrt(max(c[i, i], 0.0))))
            for i in range(n.size)}


# ------------------------------------------------------------------ the joint result

def _check_parts(parts: list[RunPart], theory: str, fixed_of: list) -> tuple[str, ...]:
    """The common free set; ConfigError for runs that cannot be combined (first reason)."""
    first = parts[0]
    names = first.likelihood.coefficients
    seen: dict[str, RunPart] = {}
    for p, fixed in zip(parts, fixed_of):
        where = p.source or p.path
        if set(p.likelihood.coefficients) != set(names):
            raise ConfigError(f"{where}: coefficients: expected the free coefficients "
                              f"{', '.join(names)} of {first.source or first.path}, got "
                              f"{', '.join(p.likelihood.coefficients)} (combine fits of the "
                              "same free set)")
        if dict(fixed) != dict(fixed_of[0]):
            raise ConfigError(f"{where}: fixed: expected the same fixed coefficients as "
                              f"{first.source or first.path} ({dict(fixed_of[0]) or 'none'}), "
                              f"got {dict(fixed) or 'none'}")
        if p.sha256 and p.sha256 in seen:
            other = seen[p.sha256]
            raise ConfigError(f"{where}: input.sha256: the run file {p.path} (sha256 "
                              f"{p.sha256[:12]}...) is already in {other.source or other.path}; "
                              "the same run cannot enter twice")
        seen[p.sha256] = p
    return tuple(names)


def combine_parts(parts: list[RunPart], *, theory: str, fixed: dict, method: str,
                  route: str = "marginal", settings: dict | None = None,
                  notes: tuple[str, ...] = (), budget=None) -> FitResult:
    """The joint result of the runs ``parts`` (see module docstring).

    ``route``: "schur" (from each run's normal equations, the joint fit) or "marginal" (from
    the marginal covariances, the combination); ``method`` as :data:`JOINT_METHODS`;
    ``budget``: terms declared on the joint coefficients (:mod:`fringe.fit.joint_budget`, which
    also carries each run's own budget through its weight matrix).
    """
    if not parts:
        raise ConfigError("joint fit: no run to combine")
    names = _check_parts(parts, theory, [fixed] * len(parts))
    k = len(names)
    info = information_schur if route == "schur" else information_marginal
    fb = [info(p.likelihood, names) for p in parts]
    f_tot = sum(f for f, _ in fb)
    b_tot = sum(b for _, b in fb)
    try:
        cov = invert_normal(f_tot, null="raise")
    except SingularMatrixError:
        raise FitError("joint fit: singular joint information matrix") from None
    x = cov @ b_tot
    entries, chi2_at, dof_sum, agreement, budgets = [], 0.0, 0, 0.0, []
    diag_tot = np.diag(f_tot)
    for i, (p, (f, _)) in enumerate(zip(parts, fb), start=1):
        own_idx = [p.likelihood.columns.index(n) for n in names]
        val, vcov = p.likelihood.arrays()
        own = val[own_idx]
        d = x - own
        delta = float(max(d @ f @ d, 0.0))
        agreement += delta
        weight_matrix = cov @ f
        weight = np.diag(weight_matrix)
        budgets.append((f"run {i}", p.path, p.systematics, own, weight_matrix))
        entries.append(RunEntry(
            label=f"run {i}", path=p.path, sha256=p.sha256, site=p.site,
            apparatus=p.apparatus, epoch_utc=p.epoch_utc, span_s=p.span_s, units=p.units,
            n_turns=p.n_turns, uncertainty=p.uncertainty, chi2_reduced=p.chi2_reduced,
            dof=p.dof, delta_chi2=delta,
            alone={n: Estimate(float(own[j]), float(math.sqrt(vcov[own_idx[j], own_idx[j]])))
                   for j, n in enumerate(names)},
            information_fraction={n: float(f[j, j] / diag_tot[j]) for j, n in
                                  enumerate(names)},
            weight={n: float(weight[j]) for j, n in enumerate(names)},
            nuisance=_nuisance_at(p.likelihood, names, x, cov), likelihood=p.likelihood))
        red = p.chi2_reduced if math.isfinite(p.chi2_reduced) else 1.0
        chi2_at += red * p.dof + red * delta
        dof_sum += p.dof
    dof_agree = (len(parts) - 1) * k
    p_value = _upper_tail(agreement, dof_agree) if dof_agree > 0 else float("nan")
    runs = Runs(method, entries, {"chi2": agreement, "dof": dof_agree, "p_value": p_value})
    dof_joint = max(dof_sum - dof_agree, 1)
    units = sorted({p.units for p in parts})
    warns = [FitWarning(w.code, f"{e.label} ({e.path}): {w.sentence}", w.values,
                        w.coefficients) for e, p in zip(entries, parts) for w in p.warnings]
    modes = sorted({p.uncertainty for p in parts})
    sig = np.sqrt(np.diag(cov))
    all_notes = list(notes) + [
        f"{method} of {len(parts)} runs: one set of coefficients, each run with its own "
        "nuisances and its own chi2 scaling; the runs are assumed independent (no shared "
        "noise or systematic)"]
    all_notes += _run_notes(entries, parts)
    if len(units) > 1:
        all_notes.append(f"the runs' observables have different units ({', '.join(units)}): "
                         "each run's nuisances are in its own (runs table)")
    now = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    from fringe.fit.joint_budget import joint_systematics
    from fringe.theories import make_theory
    from fringe.version import software_versions

    systematics = joint_systematics(budgets, names, x, cov, budget,
                                    dict(make_theory(theory).parameter_units))

    return FitResult(
        theory=theory, units=units[0] if len(units) == 1 else "per run",
        coefficients={n: Estimate(float(x[j]), float(sig[j])) for j, n in enumerate(names)},
        fixed=dict(fixed), covariance=Covariance(names, cov), harmonics=None,
        warnings=warns, efficiency=None,
        statistics=Statistics(chi2_at / dof_joint, dof_joint, "/".join(modes),
                              sum(p.n_turns for p in parts)),
        stage1=None, site=None, apparatus=None, epoch_utc=None, span_s=None,
        settings=settings or {}, input=None, software=software_versions(),
        created_utc=now, notes=tuple(all_notes), conventions=CONVENTIONS, runs=runs,
        systematics=systematics)


def _run_notes(entries, parts) -> list[str]:
    """The runs' cautions, each once, prefixed with the runs that raised it."""
    seen: dict[str, list[str]] = {}
    for e, p in zip(entries, parts):
        for n in p.notes:
            if n.startswith("caution"):
                seen.setdefault(n, []).append(e.label)
    return [f"{', '.join(labels)}: {n}" for n, labels in seen.items()]


def _upper_tail(chi2: float, dof: int) -> float:
    """P(X >= chi2) for X ~ chi^2(dof)."""
    from scipy.stats import chi2 as dist

    return float(dist.sf(chi2, dof))


# ------------------------------------------------------------------ combine stored results

def combine_results(results: list[tuple[str, FitResult]], budget=None) -> FitResult:
    """``fringe combine``: the joint result of stored fit results (see module docstring).

    ``results``: (file, result) pairs. A result of one run contributes its likelihood; a joint
    result contributes each of its runs. Refused with one line (ConfigError): a blinded
    result, one without a likelihood (older format, nonlinear theory), results of another
    theory, other conventions, another free set or other fixed values, and the same run file
    (by its SHA-256) twice. Each result's own budget is carried into the combination's
    (:mod:`fringe.fit.joint_budget`); ``budget`` declares terms on the combined coefficients.
    """
    if len(results) < 2:
        raise ConfigError("combine: expected at least two fit results")
    first_src, first = results[0]
    parts, sources, notes = [], [], []
    for src, r in results:
        if r.blinding is not None and r.blinding.blinded:
            raise ConfigError(f"{src}: blinding: the result is blinded; combine unblinded "
                              "results (fringe unblind each first): a combination of blinded "
                              "values could not be unblinded by any one key")
        if r.theory != first.theory:
            raise ConfigError(f"{src}: theory: expected {first.theory!r} (as {first_src}), "
                              f"got {r.theory!r}")
        if dict(r.conventions or {}) != dict(first.conventions or {}):
            diff = sorted(k for k in set(r.conventions or {}) | set(first.conventions or {})
                          if (r.conventions or {}).get(k) != (first.conventions or {}).get(k))
            raise ConfigError(f"{src}: conventions: expected those of {first_src}, which "
                              f"differ in {', '.join(diff)}")
        if dict(r.fixed) != dict(first.fixed):
            raise ConfigError(f"{src}: fixed: expected the same fixed coefficients as "
                              f"{first_src} ({dict(first.fixed) or 'none'}), got "
                              f"{dict(r.fixed) or 'none'}")
        if r.runs is not None:
            parts += [_parts_of_entry(e, src) for e in r.runs.runs]
            if r.systematics is not None:
                notes.append(f"the systematic budget of {src} (a joint result) is not carried "
                             "into this combination: combine its runs' own results instead")
        else:
            parts.append(run_part(r, src))
        sources.append(src)
    return combine_parts(parts, theory=first.theory, fixed=dict(first.fixed),
                         method="combination", route="marginal",
                         settings={"combined_from": [str(s) for s in sources]},
                         notes=tuple(notes), budget=budget)


# ------------------------------------------------------------------ the joint fit of run files

def joint_free(setups_spans, settings) -> tuple[tuple[str, ...], list[str]]:
    """The free set of a joint fit and notes: ``FitSettings.free``, else the common default.

    The default is the coefficients every run frees by default for its own span (so that
    each run determines them), without rms_kt.
    """
    notes = []
    if settings.free is not None:
        free = tuple(settings.free)
        if "rms_kt" in free:
            raise ConfigError("FitSettings.free rms_kt: not available in a joint fit (its "
                              "offset fit is apart from the 2 theta columns); free the 2 theta "
                              "coefficients only")
        return free, notes
    from fringe.fit.settings import default_free

    sets = [tuple(n for n in default_free(s, span / 86400.0) if n not in settings.fixed)
            for s, span in setups_spans]
    common = tuple(n for n in sets[0] if all(n in x for x in sets[1:]))
    if "rms_kt" in common:
        common = tuple(n for n in common if n != "rms_kt")
        notes.append("rms_kt left out of the joint fit (fit it run by run)")
    if any(set(x) != set(common) for x in sets):
        notes.append(f"free coefficients: those every run frees by default for its own span "
                     f"({', '.join(common)})")
    if not common:
        raise ConfigError("FitSettings.free: the runs have no default free coefficient in "
                          "common; name them (FitSettings.free)")
    return common, notes


def fit_joint(paths, settings, demod=None, *, engine: str = "local", scheduler=None,
              dut1_s: float = 0.0, progress=None, scratch_dir: str | None = None,
              budget=None) -> FitResult:
    """Fit several run files jointly: one set of coefficients (see module docstring).

    Each file is fitted as by :func:`fringe.fit.run.fit_run` with the same settings and free
    coefficients, one after another (the turns of a run are released before the next run
    starts), and the runs are combined from their normal equations. With ``engine="dask"``
    every run is one task of the cluster (the whole fit of the run on a worker, which opens
    the file itself by its absolute path): the cluster fits as many runs at once as it has
    worker threads, and this process keeps only the runs' likelihoods.
    Refused before any work: a nonlinear theory, rms_kt free, a run file given twice (by its
    SHA-256), a regressed channel a run lacks.

    Returns
    -------
    FitResult
        With ``runs`` (each run's hash, site, apparatus, own values and sigma, share of the
        information, nuisances at the joint solution, likelihood) and the joint covariance;
        no per-turn amplitudes file.
    """
    import dataclasses

    from fringe.fit.run import fit_run, setup_from_run
    from fringe.frames import time_cautions_recorded
    from fringe.theories import make_theory

    paths = [str(p) for p in paths]
    if not paths:
        raise ConfigError("joint fit: no run file")
    if not make_theory(settings.theory).linear:
        raise ConfigError(f"FitSettings.theory {settings.theory!r}: a joint fit needs a linear "
                          "theory (fit each run alone)")
    from fringe.io.runreader import sha256

    setups, seen = [], {}
    for p in paths:                      # every file checked before the first long fit
        digest = sha256(p)
        if digest in seen:
            raise ConfigError(f"{p}: the same run file as {seen[digest]} (sha256 "
                              f"{digest[:12]}...); a run enters a joint fit once")
        seen[digest] = p
        with time_cautions_recorded():      # the time cautions are recorded per run
            setup, meta = setup_from_run(p, settings.theory, dut1_s)
        setups.append((setup, float(meta["time_last_s"] - meta["time_first_s"]),
                       int(meta["n_samples"])))
        for ch in settings.regress:
            if ch not in meta["aux_channels"]:
                raise ConfigError(f"FitSettings.regress {ch}: {p} has no auxiliary channel "
                                  f"{ch!r} (has {', '.join(meta['aux_channels']) or 'none'})")
    free, notes = joint_free([(a, b) for a, b, _ in setups], settings)
    run_settings = dataclasses.replace(settings, free=free)
    if engine == "dask":
        parts = _parts_on_dask(paths, run_settings, demod, dut1_s, scheduler, progress,
                               [n for _, _, n in setups])
    else:
        parts = []
        for p in paths:
            result, columns = fit_run(p, run_settings, demod, engine=engine, dut1_s=dut1_s,
                                      progress=progress,
                                      scratch_dir=scratch_dir or str(Path(p).resolve().parent))
            columns.close()                  # the run's turns and scratch files go now
            parts.append(run_part(result))
    return combine_parts(parts, theory=settings.theory, fixed=dict(settings.fixed),
                         method="joint fit", route="schur",
                         settings={"fit": run_settings.to_dict(), "engine": engine,
                                   "dut1_s": dut1_s}, notes=tuple(notes), budget=budget)


def _fit_part(path: str, settings, demod, dut1_s: float) -> RunPart:
    """One run's fit on a dask worker (stage 1 local there): its RunPart."""
    import tempfile

    from fringe.errors import warnings_kept_in_result
    from fringe.fit.run import fit_run

    with warnings_kept_in_result(), tempfile.TemporaryDirectory(prefix="fringe-joint-") as tmp:
        result, columns = fit_run(path, settings, demod, dut1_s=dut1_s, scratch_dir=tmp)
        columns.close()
    return run_part(result)


def _parts_on_dask(paths, settings, demod, dut1_s, scheduler, progress, n_samples):
    """The runs' RunParts fitted on a dask cluster, one task per run, in the order of paths."""
    import os

    from fringe.demodulate.engine import scheduler_client

    client, own = scheduler_client(scheduler)
    from distributed import as_completed

    try:
        futures = {client.submit(_fit_part, os.path.abspath(p), settings, demod, dut1_s,
                                 pure=False): i for i, p in enumerate(paths)}
        out: list = [None] * len(paths)
        for fut in as_completed(list(futures)):
            i = futures[fut]
            out[i] = fut.result()         # a run's one-line error stops the joint fit
            fut.release()
            if progress:
                progress(n_samples[i])
        return out
    finally:
        if own:
            client.close()
