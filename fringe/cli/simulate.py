"""``fringe simulate``: a synthetic run file from a scenario (signal + noise + systematics)."""

from __future__ import annotations

import click

from fringe.cli.common import progress, run_guarded


@click.command("simulate")
@click.argument("scenario")
@click.option("--out", "out_path", required=True, help="Run file to write (HDF5).")
@click.option("--seed", type=int, required=True, help="Random seed (same seed, same file).")
@click.option("--set", "assignments", multiple=True, metavar="NAME=VALUE",
              help="Injected coefficient value, overriding the scenario (repeatable).")
@click.option("--noise-free", is_flag=True, help="Write the bare signal (equals predict).")
@click.option("--overwrite", is_flag=True, help="Replace an existing output.")
@run_guarded
def command(scenario, out_path, seed, assignments, noise_free, overwrite):
    """Simulate a campaign of SCENARIO and write it as a run file."""
    from fringe.experiment.scenario import load_scenario, parse_assignments
    from fringe.simulation.campaign import simulate

    sc = load_scenario(scenario)
    if assignments:
        sc = sc.with_coefficients(parse_assignments(assignments, "--set"))
    with progress(sc.n_samples, "simulate") as bar:
        info = simulate(sc, out_path, seed=seed, overwrite=overwrite, protect=[scenario],
                        progress=bar.update, noise_free=noise_free)
    injected = ", ".join(f"{k}={v:.3g}" for k, v in info["truth"].items() if v) or "none"
    click.echo(f"wrote {info['path']}: {info['n_samples']} samples, {info['n_gaps']} gaps, "
               f"{info['n_glitches']} glitches; injected {injected}; seed {seed}")
