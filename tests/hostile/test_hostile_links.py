"""Hostile input: run files whose data live in other files (external links, virtual datasets,
external raw storage) are refused; soft links inside the file are followed (all files under
tmp_path; docs/hostile-input.md, item 6).

A fit records the SHA-256 of the run file. Data reached through a link into another file are
not covered by it, so a later change of the linked file would give another result under the same
recorded hash; the reader refuses such files with one line naming the file and the object.
"""

from __future__ import annotations

import shutil
from pathlib import Path

import h5py
import numpy as np
import pytest

from fringe.errors import InputFileError
from fringe.io.runreader import open_run
from tests.helpers.commands import run_command
from tests.helpers.hostile import assert_one_line_naming, digest
from tests.hostile.test_hostile import write_base_file

N = 24


def _other(path, name="signal", data=None):
    """A second file holding a copy of the signal (and some other data)."""
    with h5py.File(path, "w") as f:
        f.create_dataset(name, data=np.cos(np.arange(N) * 0.5) if data is None else data)
    return path


def _replace(path, key, make):
    with h5py.File(path, "a") as f:
        units = dict(f[key].attrs) if key in f and isinstance(f[key], h5py.Dataset) else {}
        del f[key]
        make(f, key)
        if units and isinstance(f.get(key), h5py.Dataset) and not f[key].is_virtual:
            f[key].attrs.update(units)


def _vds(f, key, source, n=N):
    layout = h5py.VirtualLayout(shape=(N,), dtype="f8")
    layout[:n] = h5py.VirtualSource(source, "signal", shape=(n,))
    f.create_virtual_dataset(key, layout, fillvalue=np.nan).attrs["units"] = "Hz"


CASES = {
    "external link to a dataset": lambda f, k, d: f.__setitem__(
        k, h5py.ExternalLink(str(d / "other.h5"), "signal")),
    "external link to a group": None,            # handled below (the samples group)
    "virtual dataset": lambda f, k, d: _vds(f, k, str(d / "other.h5")),
    "virtual dataset with a missing source": lambda f, k, d: _vds(f, k, str(d / "gone.h5")),
    "virtual dataset, half from a missing source": lambda f, k, d: _vds(
        f, k, str(d / "gone.h5"), n=N // 2),
    "external raw storage": lambda f, k, d: f.create_dataset(
        k, shape=(N,), dtype="f8", external=[(str(d / "raw.bin"), 0, N * 8)]),
    "soft link to an external link": lambda f, k, d: (
        f.__setitem__("elsewhere", h5py.ExternalLink(str(d / "other.h5"), "signal")),
        f.__setitem__(k, h5py.SoftLink("/elsewhere"))),
}


@pytest.mark.parametrize("case", sorted(k for k, v in CASES.items() if v is not None))
def test_signal_stored_in_another_file_is_refused(tmp_path, case):
    run = write_base_file(tmp_path / "run.h5", n=N)
    _other(tmp_path / "other.h5")
    (tmp_path / "raw.bin").write_bytes(np.cos(np.arange(N) * 0.5).astype("<f8").tobytes())
    _replace(run, "samples/signal", lambda f, k: CASES[case](f, k, tmp_path))
    before = digest(run)
    with pytest.raises(InputFileError) as info:
        with open_run(run) as r:
            r.read_all()
    assert_one_line_naming(info.value, run)
    assert "samples/signal" in str(info.value) or "elsewhere" in str(info.value)
    assert digest(run) == before


@pytest.mark.parametrize("group", ["samples", "site", "truth"])
def test_group_behind_an_external_link_is_refused(tmp_path, group):
    run = write_base_file(tmp_path / "run.h5", n=N)
    copy = write_base_file(tmp_path / "copy.h5", n=N)
    with h5py.File(run, "a") as f:
        del f[group]
        f[group] = h5py.ExternalLink(str(copy), group)
    with pytest.raises(InputFileError) as info:
        with open_run(run) as r:
            r.read_group_attrs("truth")
    assert_one_line_naming(info.value, run)
    assert f"{run}: {group}: expected an object stored in this file" in str(info.value)


def test_dataset_of_an_extra_group_behind_an_external_link_is_refused(tmp_path):
    run = write_base_file(tmp_path / "run.h5", n=N)
    _other(tmp_path / "other.h5")
    with h5py.File(run, "a") as f:
        f["truth/table"] = h5py.ExternalLink(str(tmp_path / "other.h5"), "signal")
    with open_run(run) as r:
        with pytest.raises(InputFileError) as info:
            r.read_group_datasets("truth")
    assert str(info.value).startswith(f"{run}: truth/table: expected an object stored")


def test_soft_links_inside_the_file_are_followed(tmp_path):
    run = write_base_file(tmp_path / "run.h5", n=N)
    with open_run(run) as r:
        expected = r.read_all()
    with h5py.File(run, "a") as f:
        f.move("samples/signal", "stash/signal")
        f["samples/signal"] = h5py.SoftLink("/stash/signal")
    with open_run(run) as r:
        got = r.read_all()
    for k in expected:
        np.testing.assert_array_equal(got[k], expected[k])


def test_fit_of_a_linked_run_is_one_line_and_writes_nothing(small_run, tmp_path):
    # the measured case of the campaign: the signal behind a link, the fit's hash of the small
    # linking file would not change when the linked data did
    with h5py.File(small_run, "r") as src, h5py.File(tmp_path / "data.h5", "w") as dst:
        dst.create_dataset("signal", data=src["samples/signal"][()])
        with h5py.File(tmp_path / "run.h5", "w") as f:
            for k, v in src.attrs.items():
                f.attrs[k] = v
            for g in ("site", "apparatus", "samples"):
                src.copy(g, f)
            units = dict(f["samples/signal"].attrs)
            del f["samples/signal"]
            f["samples/signal"] = h5py.ExternalLink("data.h5", "signal")
            del units
    run = run_command(tmp_path, ["fit", "run.h5", "--out", "fit.json"])
    assert run.exit_code == 2, run.stdout + run.stderr
    assert run.stderr.strip().splitlines() == [
        "error: run.h5: samples/signal: expected an object stored in this file, got an external "
        "link to 'signal' in 'data.h5' (a run file holds all its data: the SHA-256 a fit records "
        "covers this file only)"]
    assert not (tmp_path / "fit.json").exists()


@pytest.mark.parametrize("how", ["external link", "virtual dataset"])
def test_turns_file_with_data_in_another_file_is_refused(tmp_path, how):
    from fringe.io.turns_file import read_turns

    src = Path(__file__).resolve().parents[1] / "data" / "fit_example.turns.h5"
    turns = tmp_path / "fit.turns.h5"
    shutil.copy(src, turns)
    with h5py.File(turns, "a") as f:
        data = f["turns/C"][()]
        with h5py.File(tmp_path / "other.h5", "w") as g:
            g.create_dataset("signal", data=data)
        del f["turns/C"]
        if how == "external link":
            f["turns/C"] = h5py.ExternalLink(str(tmp_path / "other.h5"), "signal")
        else:
            layout = h5py.VirtualLayout(shape=data.shape, dtype=data.dtype)
            layout[:] = h5py.VirtualSource(str(tmp_path / "other.h5"), "signal",
                                           shape=data.shape)
            f["turns"].create_virtual_dataset("C", layout)
    with pytest.raises(InputFileError) as info:
        read_turns(turns)
    assert str(info.value).startswith(f"{turns}: turns/C: expected data stored in this file")
