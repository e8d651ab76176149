"""``fringe import``: a CSV table of samples (and optionally an azimuth log) into a run file."""

from __future__ import annotations

import os

import click

from fringe.cli.common import progress as progress_bar
from fringe.cli.common import run_guarded, verbosity_options


def describe(summary) -> str:
    """The import's summary in words: samples, time span from the epoch, source checksum."""
    span_s = summary.time_last_s - summary.time_first_s
    span = f"{span_s / 86400:.3g} d" if span_s >= 86400 else f"{span_s:.6g} s"
    return (f"{summary.n_samples} samples over {span} (from {summary.time_first_s:.6g} s to "
            f"{summary.time_last_s:.6g} s after {summary.epoch_utc}); CSV SHA-256 "
            f"{summary.source_sha256[:12]}...")


@click.command("import")
@click.argument("csv_file")
@click.option("--meta", "meta", required=True, metavar="FILE",
              help="TOML with epoch, site, apparatus, column mapping and units "
                   "(docs/run-format.md).")
@click.option("--azimuth-log", "azimuth_log", type=click.Path(dir_okay=False), default=None,
              metavar="FILE",
              help="CSV of the azimuth from a second device (encoder), merged onto the "
                   "signal's times as the TOML's [azimuth_log] section says  [default: none; "
                   "the azimuth is a column of CSV_FILE]")
@click.option("--out", "out_path", required=True, metavar="FILE",
              help="Run file to write (a single HDF5 file, e.g. run.h5; not a directory).")
@click.option("--overwrite", is_flag=True, show_default=True,
              help="Replace an existing --out file.")
@verbosity_options
@run_guarded
def command(csv_file, meta, azimuth_log, out_path, overwrite):
    """Convert CSV_FILE (one header line, a row per sample) into a run file."""
    from fringe.io.csvimport import import_csv

    try:
        size = os.path.getsize(csv_file)
    except OSError:
        size = 0                        # the import names the missing file
    done = {"bytes": 0}
    with progress_bar(size, "import", min_total=50_000_000) as bar:
        def progress(rows, bytes_read=0):
            bar.update(max(int(bytes_read) - done["bytes"], 0))
            done["bytes"] = max(done["bytes"], int(bytes_read))

        summary = import_csv(csv_file, out_path, metadata=meta, azimuth_log=azimuth_log,
                             overwrite=overwrite, progress=progress)
    click.echo(f"wrote {out_path}: {describe(summary)}")
    if summary.n_dropped:
        click.echo(f"  {summary.n_dropped} signal rows had no azimuth in the azimuth log "
                   "(outside its span or in a gap) and were left out", err=True)
