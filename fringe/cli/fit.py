"""``fringe fit``: anisotropy coefficients from a recorded (or simulated) run file.

Several run files (``fringe fit RUN1.h5 RUN2.h5 ... --out FIT.json``, or a folder of run files)
are fitted jointly (:func:`fringe.fit.joint.fit_joint`).
"""

from __future__ import annotations

from pathlib import Path

import click

from fringe.cli.common import (
    RegistryChoice,
    note_first_compile,
    progress,
    run_guarded,
    verbosity_options,
    warnings_once,
)
from fringe.errors import ConfigError


def _names(text: str | None) -> tuple[str, ...] | None:
    if not text:
        return None
    return tuple(n.strip() for n in text.split(",") if n.strip())


@click.command("fit")
@click.argument("run_files", nargs=-1, required=True, metavar="RUN_FILE")
@click.option("--out", "out_path", required=True, metavar="FILE",
              help="Result file to write (one JSON file, e.g. fit.json; the per-turn "
                   "amplitudes go beside it as FILE.turns.h5; not a directory). A joint fit "
                   "of several run files writes the JSON file only.")
@click.option("--theory", type=RegistryChoice("fringe.theories", "THEORIES"), default="sme",
              help="Theory whose coefficients are fitted  [default: the theory of the run "
                   "file's scenario when it records one (simulated runs), else sme]")
@click.option("--free", "free", default=None, metavar="NAMES",
              help="Comma-separated free coefficients, e.g. ke_XY,ke_XZ  [default: the "
                   "theory's usual set for the record's span]")
@click.option("--fix", "fixes", multiple=True, metavar="NAME=VALUE",
              help="Hold a coefficient at a value (dimensionless; repeatable)  [default: none]")
@click.option("--uncertainty", type=RegistryChoice("fringe.fit.settings", "UNCERTAINTY_MODES"),
              default="reduced-chi2", show_default=True,
              help="How sigma is set: scaled by the reduced chi2, by a bootstrap over blocks "
                   "of days, or the formal sigma of the per-turn errors.")
@click.option("--bootstrap-days", type=float, default=1.0, show_default=True,
              help="Block length of the bootstrap, days (with --uncertainty bootstrap).")
@click.option("--drift", type=RegistryChoice("fringe.demodulate.settings", "DRIFT_TERMS"),
              default="linear", show_default=True,
              help="Per-turn drift polynomial removed with the harmonics.")
@click.option("--max-harmonic", type=click.IntRange(2, 4), default=2, show_default=True,
              help="Highest harmonic of the table angle in the per-turn model (2..4).")
@click.option("--min-samples", type=click.IntRange(3), default=12, show_default=True,
              help="Least number of valid samples of an accepted turn (e.g. 8 for a record "
                   "read at 8 marks per turn).")
@click.option("--regress", multiple=True, metavar="CHANNEL",
              help="Regress out the 2-theta part of an auxiliary channel of the run file "
                   "(repeatable)  [default: none]")
@click.option("--no-lab-b0", is_flag=True, show_default=True,
              help="Do not fit a constant B offset (a lab-fixed 2-theta term).")
@click.option("--lab-c0", is_flag=True, show_default=True,
              help="Fit a constant C offset (needs ke_ZZ fixed).")
@click.option("--cross-check", is_flag=True, show_default=True,
              help="Also run the one-stage global fit and print its coefficients.")
@click.option("--engine", type=RegistryChoice("fringe.demodulate.engine", "ENGINES"),
              default="local", show_default=True,
              help="Where stage 1 runs: this machine, or a dask cluster (--scheduler).")
@click.option("--scratch-dir", "scratch_dir", default=None, metavar="DIR",
              help="Where a long record keeps its turn table while it is fitted (removed "
                   "afterwards)  [default: the directory of --out]")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="dask scheduler address, e.g. tcp://host:8786 (with --engine dask)  "
                   "[default: a local cluster]")
@click.option("--dut1", "dut1_s", type=float, default=0.0, show_default=True,
              help="UT1 - UTC at the record's epoch, s.")
@click.option("--overwrite", is_flag=True, show_default=True,
              help="Replace an existing --out file and its .turns.h5.")
@click.option("--budget", "budget_path", default=None, metavar="FILE",
              help="Systematic budget file (TOML) of declared terms (docs/fit.md)  "
                   "[default: none; only the --regress channels and the calibration]")
@click.option("--blind", "blind_key", default=None, metavar="KEYFILE",
              help="Blind the values with secret offsets kept in KEYFILE (written, mode "
                   "0600); a key already used by fringe unblind gives an unblinded fit that "
                   "records whether the settings changed since  [default: not blinded]")
@verbosity_options
@run_guarded
def command(run_files, out_path, theory, free, fixes, uncertainty, bootstrap_days, drift,
            max_harmonic, min_samples, regress, no_lab_b0, lab_c0, cross_check, engine,
            scratch_dir, scheduler, dut1_s, overwrite, budget_path, blind_key):
    """Fit RUN_FILE: per-turn demodulation, sidereal harmonics, coefficients with sigma.

    Several RUN_FILEs (or a folder of run files) are fitted jointly: one set of coefficients,
    each run with its own nuisances and chi2 scaling (docs/fit.md, "Joint fit").
    """
    from fringe.demodulate.settings import DemodSettings
    from fringe.experiment.scenario import parse_assignments
    from fringe.fit.run import fit_run
    from fringe.fit.settings import FitSettings
    from fringe.io.atomic import check_directory_writable
    from fringe.io.fit_files import fit_outputs, turns_path_of, write_fit_files
    from fringe.io.runreader import open_run

    paths, folder = run_paths(run_files)
    if scratch_dir is not None:
        check_directory_writable(scratch_dir, shown=f"--scratch-dir {scratch_dir}")
    if len(paths) > 1 or folder:
        for given, option in ((blind_key, "--blind"), (cross_check or None, "--cross-check")):
            if given is not None:
                raise ConfigError(f"{option}: not available for a joint fit of several run "
                                  "files (fit each run with it, then fringe combine)")
        theory, why = choose_theory(paths[0], theory)
        settings = FitSettings(theory=theory, free=_names(free),
                               fixed=parse_assignments(fixes, "--fix"),
                               uncertainty=uncertainty, bootstrap_days=bootstrap_days,
                               lab_b0=not no_lab_b0, lab_c0=lab_c0, regress=tuple(regress))
        demod = DemodSettings(drift=drift, max_harmonic=max_harmonic, min_samples=min_samples)
        _joint(paths, out_path, settings, demod, why, engine=engine, scheduler=scheduler,
               dut1_s=dut1_s, scratch_dir=scratch_dir, overwrite=overwrite,
               budget=_read_budget(budget_path))
        return
    run_file = paths[0]
    theory, why = choose_theory(run_file, theory)
    out = Path(out_path)
    turns_path = turns_path_of(out)
    outputs = fit_outputs(out, overwrite=overwrite, protect=[run_file])  # checked before the fit
    settings = FitSettings(theory=theory, free=_names(free),
                           fixed=parse_assignments(fixes, "--fix"), uncertainty=uncertainty,
                           bootstrap_days=bootstrap_days, lab_b0=not no_lab_b0, lab_c0=lab_c0,
                           regress=tuple(regress))
    demod = DemodSettings(drift=drift, max_harmonic=max_harmonic, min_samples=min_samples)
    budget = None
    if budget_path is not None:
        from fringe.io.budget_file import read_budget

        budget = read_budget(budget_path)
    spent = _key_before_fit(blind_key, overwrite, [run_file, out_path, turns_path])
    if blind_key is not None and spent is None:
        from fringe.theories import make_theory

        if not make_theory(theory).linear:
            raise ConfigError(f"--blind: theory {theory!r} is not linear; blinding covers the "
                              "linear theories")
    with open_run(run_file, check_values=False) as run:
        n = run.n_samples
    click.echo(f"theory: {theory}, {why}")
    note_first_compile()
    key = None
    try:
        with outputs, progress(n, "fit, stage 1 (per-turn demodulation)") as bar:
            done = {"samples": 0}

            def advance(k):
                bar.update(k)
                done["samples"] += k
                if done["samples"] >= n:
                    bar.then("fit, stages 2-3 (sidereal harmonics, coefficients) ...")

            with warnings_once() as fitted:
                result, columns = fit_run(run_file, settings, demod, engine=engine,
                                          scheduler=scheduler, dut1_s=dut1_s,
                                          progress=advance, one_stage=cross_check,
                                          scratch_dir=scratch_dir or str(outputs.base.resolve()),
                                          budget=budget)
                fitted.append(result)
            result, columns, key = _blind(result, columns, blind_key, spent)
            with columns:
                result = write_fit_files(outputs, result, columns)
            if key is not None:
                _write_key(blind_key, key, outputs, overwrite)
    except BaseException:
        if key is not None:                 # the result it names was not kept
            Path(blind_key).unlink(missing_ok=True)
        raise
    click.echo(result.summary())
    for line in significance_lines(result):
        click.echo(line)
    click.echo(f"\nwrote {out}\nwrote {turns_path}")
    if key is not None:
        click.echo(f"wrote {blind_key} (the blinding key: keep it away from the analysis)")


def run_paths(given) -> tuple[list[str], bool]:
    """The run files of the arguments and whether a folder was given.

    A folder stands for the run files in it (``*.h5`` but the per-turn files ``*.turns.h5`` of
    fits, in name order).
    """
    from fringe.errors import InputFileError

    out, folder = [], False
    for g in given:
        p = Path(g)
        if p.is_dir():
            folder = True
            found = sorted(str(x) for x in p.iterdir() if x.suffix == ".h5"
                           and not x.name.endswith(".turns.h5") and x.is_file())
            if not found:
                raise InputFileError(p, "folder", "expected run files (*.h5) in it, found none")
            out += found
        else:
            out.append(str(g))
    return out, folder


def _read_budget(budget_path):
    """The budget file's declared terms (None without --budget)."""
    if budget_path is None:
        return None
    from fringe.io.budget_file import read_budget

    return read_budget(budget_path)


def _joint(paths, out_path, settings, demod, why, *, engine, scheduler, dut1_s, scratch_dir,
           overwrite, budget=None) -> None:
    """The joint fit of several run files: fit each, combine, write FIT.json only."""
    from fringe.fit.joint import fit_joint
    from fringe.io.atomic import check_output_path, write_json_atomic
    from fringe.io.runreader import open_run

    check_output_path(out_path, overwrite=overwrite, protect=paths)
    n = 0
    for p in paths:                      # each file opened (and so checked) before the work
        with open_run(p, check_values=False) as run:
            n += run.n_samples
    click.echo(f"theory: {settings.theory}, {why}")
    click.echo(f"joint fit of {len(paths)} run files")
    note_first_compile()
    with progress(n, "joint fit, stage 1 of each run") as bar, warnings_once() as fitted:
        result = fit_joint(paths, settings, demod, engine=engine, scheduler=scheduler,
                           dut1_s=dut1_s, progress=bar.update,
                           scratch_dir=scratch_dir or str(Path(out_path).resolve().parent),
                           budget=budget)
        fitted.append(result)
        fitted.append(_run_warnings(result))
    write_json_atomic(out_path, result.to_dict(), overwrite=overwrite, protect=paths)
    click.echo(result.summary())
    for line in significance_lines(result):
        click.echo(line)
    click.echo(f"\nwrote {out_path}")


def _run_warnings(result):
    """The runs' own warning sentences of a joint result (without the "run i (path): " label)."""
    from types import SimpleNamespace

    labels = [f"{e.label} ({e.path}): " for e in result.runs.runs]
    out = []
    for w in result.warnings:
        text = next((w.sentence[len(lab):] for lab in labels if w.sentence.startswith(lab)),
                    w.sentence)
        out.append(SimpleNamespace(sentence=text))
    return SimpleNamespace(warnings=out)


def _key_before_fit(blind_key, overwrite: bool, protect):
    """Check the key target before the fit; return a used key (a fit after unblinding) or None.

    An unused key that exists is refused unless ``--overwrite`` (it belongs to a blinded
    result not yet unblinded).
    """
    if blind_key is None:
        return None
    from fringe.errors import OutputError
    from fringe.io.atomic import check_output_path
    from fringe.io.blind_key import read_key

    if Path(blind_key).exists():
        key = read_key(blind_key)
        if key.unblinded is not None:
            return key
        if not overwrite:
            raise OutputError(f"{blind_key}: exists and belongs to the blinded result "
                              f"sha256 {key.result_sha256[:12]}... (not yet unblinded); "
                              "unblind it first, or pass --overwrite to draw a new key")
    check_output_path(blind_key, overwrite=overwrite, protect=protect)
    return None


def _blind(result, columns, blind_key, spent):
    """(result, columns, key to write or None) for --blind."""
    if blind_key is None:
        return result, columns, None
    from fringe.fit.blinding import after_unblinding, blind_fit

    if spent is not None:
        return after_unblinding(result, spent), columns, None
    try:
        return blind_fit(result, columns)
    except BaseException:
        columns.close()
        raise


def _write_key(blind_key, key, outputs, overwrite: bool) -> None:
    """Bind the key to the staged result file and write it (mode 0600), before the commit."""
    from fringe.io.blind_key import write_key
    from fringe.io.runreader import sha256

    staged = outputs.path(outputs.names[1])
    write_key(blind_key, key.bound_to(sha256(staged)), overwrite=overwrite)


def choose_theory(run_file: str, given: str) -> tuple[str, str]:
    """The theory to fit and why: --theory when given, else the run's scenario, else the default.

    Returns ``(name, reason)``; the reason is printed ("the default; ...", "from the run
    file's scenario", "from --theory").
    """
    from fringe.errors import FringeError
    from fringe.io.runreader import open_run

    ctx = click.get_current_context()
    if ctx.get_parameter_source("theory") is not click.core.ParameterSource.DEFAULT:
        return given, "as --theory asks"
    try:
        with open_run(run_file, check_values=False) as run:
            recorded = run.read_group_attrs("truth").get("theory")
    except (FringeError, OSError, KeyError):
        recorded = None
    from fringe.theories import THEORIES

    if isinstance(recorded, str) and recorded in THEORIES:
        return recorded, "the theory of the run file's scenario (--theory chooses another)"
    return given, "the default (--theory chooses another)"


#: A coefficient this many sigma from zero is far outside any noise (printed in words).
FAR_SIGMA = 1000.0


def significance_lines(result) -> list[str]:
    """Sentences for coefficients beyond :data:`FAR_SIGMA` sigma from zero (else none)."""
    lines = []
    for name, v in result.coefficients.items():
        if not v.sigma or not v.sigma > 0:
            continue
        z = abs(v.value) / v.sigma
        if z >= FAR_SIGMA:
            lines.append(f"note: {name} is {z:,.0f} sigma from zero: no noise does that; the "
                         "record holds a large signal of this shape (an injected value, a "
                         "systematic effect) or a mismatch of units or calibration. Read it as "
                         "a detection to explain, not as a limit.")
    return lines
