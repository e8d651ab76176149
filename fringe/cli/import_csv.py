"""``fringe import``: a CSV table of samples (and optionally an azimuth log) into a run file."""

from __future__ import annotations

import click

from fringe.cli.common import run_guarded


@click.command("import")
@click.argument("csv_file")
@click.option("--meta", "meta", required=True,
              help="TOML with epoch, site, apparatus, column mapping and units "
                   "(docs/run-format.md).")
@click.option("--azimuth-log", "azimuth_log", type=click.Path(dir_okay=False), default=None,
              help="CSV of the azimuth from a second device (encoder), merged onto the "
                   "signal's times as the TOML's [azimuth_log] section says.")
@click.option("--out", "out_path", required=True, help="Run file to write (HDF5).")
@click.option("--overwrite", is_flag=True, help="Replace an existing output.")
@run_guarded
def command(csv_file, meta, azimuth_log, out_path, overwrite):
    """Convert CSV_FILE (one header line, a row per sample) into a run file."""
    from fringe.io.csvimport import import_csv

    shown = {"rows": 0}

    def progress(rows, _bytes=0):
        if rows - shown["rows"] >= 1_000_000:
            click.echo(f"  {rows} rows", err=True)
            shown["rows"] = rows

    summary = import_csv(csv_file, out_path, metadata=meta, azimuth_log=azimuth_log,
                         overwrite=overwrite, progress=progress)
    click.echo(f"wrote {out_path}: {summary}")
    if summary.n_dropped:
        click.echo(f"  {summary.n_dropped} signal rows had no azimuth in the azimuth log "
                   "(outside its span or in a gap) and were left out", err=True)
