"""``fringe import``: a CSV table of samples into a run file."""

from __future__ import annotations

import click

from fringe.cli.common import run_guarded


@click.command("import")
@click.argument("csv_file")
@click.option("--meta", "meta", required=True,
              help="TOML with epoch, site, apparatus, column mapping and units "
                   "(docs/run-format.md).")
@click.option("--out", "out_path", required=True, help="Run file to write (HDF5).")
@click.option("--overwrite", is_flag=True, help="Replace an existing output.")
@run_guarded
def command(csv_file, meta, out_path, overwrite):
    """Convert CSV_FILE (one header line, a row per sample) into a run file."""
    from fringe.io.csvimport import import_csv

    shown = {"rows": 0}

    def progress(rows, _bytes=0):
        if rows - shown["rows"] >= 1_000_000:
            click.echo(f"  {rows} rows", err=True)
            shown["rows"] = rows

    summary = import_csv(csv_file, out_path, metadata=meta, overwrite=overwrite,
                         progress=progress)
    click.echo(f"wrote {out_path}: {summary}")
