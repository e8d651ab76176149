"""``fringe simulate``: a synthetic run file from a scenario (signal + noise + systematics)."""

from __future__ import annotations

import click

from fringe.cli.common import progress, run_guarded, verbosity_options


def draw_seed() -> int:
    """A fresh random seed in 0 .. 2**32 - 1 (from the operating system's entropy)."""
    import secrets

    return secrets.randbelow(2 ** 32)


@click.command("simulate")
@click.argument("scenario")
@click.option("--out", "out_path", required=True, metavar="FILE",
              help="Run file to write (a single HDF5 file, e.g. run.h5; not a directory).")
@click.option("--seed", type=int, default=None, metavar="INTEGER",
              help="Seed of the noise and systematics (same seed, same file)  [default: drawn "
                   "at random, printed and recorded in the run file's settings/seed]")
@click.option("--set", "assignments", multiple=True, metavar="NAME=VALUE",
              help="Injected coefficient value (dimensionless), overriding the scenario's "
                   "[coefficients] (repeatable)  [default: the scenario's values]")
@click.option("--noise-free", is_flag=True, show_default=True,
              help="Write the bare signal without noise or systematics (equals predict).")
@click.option("--overwrite", is_flag=True, show_default=True,
              help="Replace an existing --out file.")
@verbosity_options
@run_guarded
def command(scenario, out_path, seed, assignments, noise_free, overwrite):
    """Simulate a campaign of SCENARIO and write it as a run file."""
    from fringe.experiment.scenario import load_scenario, parse_assignments
    from fringe.simulation.campaign import check_seed, simulate

    drawn = seed is None
    if drawn:
        seed = draw_seed()
    check_seed(seed)                                   # before anything is read or written
    sc = load_scenario(scenario)
    if assignments:
        sc = sc.with_coefficients(parse_assignments(assignments, "--set"))
    with progress(sc.n_samples, "simulate") as bar:
        info = simulate(sc, out_path, seed=seed, overwrite=overwrite, protect=[scenario],
                        progress=bar.update, noise_free=noise_free)
    injected = ", ".join(f"{k}={v:.3g}" for k, v in info["truth"].items() if v) or "none"
    how = " (drawn at random; pass --seed to repeat it)" if drawn else ""
    click.echo(f"wrote {info['path']}: {info['n_samples']} samples, {info['n_gaps']} gaps, "
               f"{info['n_glitches']} glitches; injected {injected}; seed {seed}{how}")
