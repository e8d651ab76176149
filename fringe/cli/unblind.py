"""``fringe unblind FIT.json --key KEYFILE --out FIT_UNBLIND.json``: remove a blind's offsets once.

No physics here: read the blinded result and its key, call :func:`fringe.fit.blinding.unblind`,
write the unblinded result, then mark the key as used (when, and the settings hash).
"""

from __future__ import annotations

import click

from fringe.cli.common import run_guarded


@click.command("unblind")
@click.argument("fit_json")
@click.option("--key", "key_path", required=True, metavar="KEYFILE",
              help="The key file written by fringe fit --blind for this result.")
@click.option("--out", "out_path", required=True, metavar="FILE",
              help="The unblinded result file to write (JSON).")
@click.option("--overwrite", is_flag=True, show_default=True,
              help="Replace an existing --out file.")
@run_guarded
def command(fit_json, key_path, out_path, overwrite):
    """Unblind FIT_JSON with its key, once; the key records when and the settings hash."""
    from fringe.fit.blinding import unblind
    from fringe.io.atomic import check_output_path, write_json_atomic
    from fringe.io.blind_key import read_key, write_key
    from fringe.io.fit_result import read_fit_result
    from fringe.io.runreader import sha256

    check_output_path(out_path, overwrite=overwrite, protect=[fit_json, key_path])
    result = read_fit_result(fit_json)
    key = read_key(key_path)
    plain, used = unblind(result, key, sha256(fit_json), source=fit_json, key_source=key_path)
    write_json_atomic(out_path, plain.to_dict(), overwrite=overwrite,
                      protect=[fit_json, key_path])
    write_key(key_path, used, overwrite=True)
    click.echo(plain.summary())
    click.echo(f"\nwrote {out_path}\nmarked {key_path} as used ({used.unblinded['utc']})")
