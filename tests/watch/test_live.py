"""fringe watch follows a run file while another process appends to it in SWMR mode.

The reference is our own ``fit_run`` of the closed file (no outside values): the watch takes
the flushed whole turns at each look, so its pieces cut the record where turns start and the
incremental fit must equal the one fit of the closed file (1e-6 sigma, the issue's bar).
The writer is a separate process (:class:`fringe.io.livewriter.LiveRunWriter` driven over a
pipe), as an acquisition would be.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from fringe.cli import main
from fringe.demodulate.blocks import turn_boundaries
from fringe.demodulate.engine import SURVEY_SAMPLES
from fringe.demodulate.settings import DemodSettings
from fringe.errors import InputFileError
from fringe.experiment.scenario import load_scenario
from fringe.fit.growing import IncrementalFit
from fringe.fit.run import fit_run
from fringe.fit.settings import FitSettings
from fringe.io.livewriter import LiveRunWriter
from fringe.io.runreader import open_run
from fringe.report.watching import Watch
from fringe.simulation.campaign import simulate

from .test_watch import SCENARIO, _same

#: The child: copies samples of a source run file into a LiveRunWriter on command.
#: "A B": append samples [A, B) and flush; "lopsided A B": samples [A, B) of time and azimuth
#: only (a writer whose signal lags), flushed; "close": close and exit.
CHILD = r"""
import sys
from fringe.io.livewriter import LiveRunWriter
from fringe.io.runreader import open_run

src, dst = sys.argv[1], sys.argv[2]
with open_run(src) as run:
    meta, data = run.to_dict(), run.read_all()
w = LiveRunWriter(dst, site=meta["site"], apparatus=meta["apparatus"],
                  epoch_utc=meta["epoch_utc"], signal_units=meta["signal_units"],
                  azimuth_units=meta["azimuth_units"])
w.__enter__()
print("open", flush=True)
for line in sys.stdin:
    words = line.split()
    if words[0] == "close":
        w.close()
        print("closed", flush=True)
        break
    if words[0] == "lopsided":
        a, b = int(words[1]), int(words[2])
        for name in ("azimuth", "time"):
            ds = w._file["samples"][name]
            ds.resize((b,))
            ds[a:b] = data[name][a:b]
            ds.flush()
    else:
        a, b = int(words[0]), int(words[1])
        w.append(data["time"][a:b], data["azimuth"][a:b], data["signal"][a:b])
        w.flush()
    print("flushed", flush=True)
"""


class Writer:
    """A LiveRunWriter in another process, driven line by line."""

    def __init__(self, src: Path, dst: Path):
        env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[2])}
        self.proc = subprocess.Popen([sys.executable, "-u", "-c", CHILD, str(src), str(dst)],
                                     stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True,
                                     env=env)
        assert self.proc.stdout.readline().strip() == "open"

    def say(self, text: str) -> None:
        self.proc.stdin.write(text + "\n")
        self.proc.stdin.flush()
        reply = self.proc.stdout.readline().strip()
        assert reply in ("flushed", "closed"), reply

    def close(self) -> None:
        self.say("close")
        assert self.proc.wait(timeout=60) == 0

    def kill(self) -> None:
        if self.proc.poll() is None:
            self.proc.kill()
            self.proc.wait()


@pytest.fixture(scope="module")
def record(tmp_path_factory):
    """A 3-day record sampled every 2 s (60 samples a 120 s turn) and its whole-file fit."""
    d = tmp_path_factory.mktemp("live")
    text = SCENARIO.format(days=3.0).replace("sample_interval_s = 6.0", "sample_interval_s = 2.0")
    (d / "sc.toml").write_text(text)
    whole = d / "whole.h5"
    simulate(load_scenario(d / "sc.toml"), whole, seed=23)
    with open_run(whole) as run:
        n = run.n_samples
    return whole, n


def _look(folder, out) -> str:
    res = CliRunner().invoke(main, ["watch", str(folder), "--out", str(out), "--once",
                                    "--no-report"])
    assert res.exit_code == 0, res.output          # a look never fails on a file being written
    return res.output


def test_a_file_followed_while_written_ends_equal_to_one_fit(record, tmp_path):
    whole, n = record
    folder, out = tmp_path / "drop", tmp_path / "out"
    folder.mkdir()
    live = folder / "run.h5"
    writer = Writer(whole, live)
    try:
        writer.say("0 30001")                      # fewer than the survey reads: waits
        text = _look(folder, out)
        assert "waiting: run.h5: being written: 30001 samples flushed" in text
        # uneven steps, each cutting a turn (60 samples) somewhere inside
        cuts = [30001, 70013, 70016, 84437, 101009, 101010, 117777, n]
        watch, said = None, ""
        for k, (a, b) in enumerate(zip(cuts[:-2], cuts[1:-1])):
            writer.say(f"{a} {b}")
            if k in (2, 3):                        # a watch kept running between looks ...
                watch = watch or Watch(folder, out, FitSettings(), report=False)
                watch.poll()
            else:                                  # ... and restarted ones (--once)
                watch = None
                said += _look(folder, out)
        assert "no whole turn after sample" in said     # a step of 1 or 3 samples
        state = json.loads((out / "state" / "state.json").read_text())
        assert all(not p["complete"] and p["being_written"] for p in state["pieces"])
        writer.say(f"{cuts[-2]} {n}")
        writer.close()
    finally:
        writer.kill()
    _look(folder, out)                             # the writer closed it: the rest
    state = json.loads((out / "state" / "state.json").read_text())
    pieces = state["pieces"]
    assert len(pieces) >= 5 and pieces[-1]["complete"] and not pieces[-1]["being_written"]
    assert [p["start"] for p in pieces[1:]] == [p["stop"] for p in pieces[:-1]]
    assert pieces[0]["start"] == 0 and pieces[-1]["stop"] == n
    # every cut of a piece taken while written is where a turn starts (no turn cut in two)
    with open_run(live) as run:
        data = run.read_all(("time", "azimuth"))
        sums = [run.samples_sha256(p["start"], p["stop"]) for p in pieces]
    bnd = turn_boundaries(np.pi - data["azimuth"], _theta0(live), data["time"],
                          0.25 * 120.0)
    assert all(bnd[p["stop"]] for p in pieces[:-1])
    assert [p["sha256"] for p in pieces] == sums and "file_sha256" in pieces[-1]
    ref, cols = fit_run(str(live), FitSettings())
    cols.close()
    ref_whole, cols = fit_run(str(whole), FitSettings())
    cols.close()
    _same(ref_whole, ref)                          # the closed file is the same record
    _same(ref, IncrementalFit(out / "state", FitSettings()).result(str(folder)))
    fit = json.loads((out / "fit.json").read_text())
    assert fit["input"]["n_samples"] == n


def _theta0(path) -> float:
    from fringe.demodulate.engine import survey

    return survey(str(path), DemodSettings()).theta0_rad


def test_unequal_flushed_lengths_are_cut_at_the_shortest(record, tmp_path):
    whole, n = record
    folder, out = tmp_path / "drop", tmp_path / "out"
    folder.mkdir()
    live = folder / "run.h5"
    writer = Writer(whole, live)
    try:
        writer.say(f"0 {SURVEY_SAMPLES + 1001}")
        writer.say(f"lopsided {SURVEY_SAMPLES + 1001} {SURVEY_SAMPLES + 9001}")
        with open_run(live, while_written=True) as run:
            assert run.being_written
            assert run.flushed_lengths["time"] == SURVEY_SAMPLES + 9001
            assert run.n_samples == run.flushed_lengths["signal"] == SURVEY_SAMPLES + 1001
        with pytest.raises(InputFileError, match="a writer still holds open"):
            open_run(live)                         # the plain reader names why it refuses
        _look(folder, out)
        state = json.loads((out / "state" / "state.json").read_text())
        (piece,) = state["pieces"]
        assert SURVEY_SAMPLES + 1001 - 60 <= piece["stop"] <= SURVEY_SAMPLES + 1001
        writer.close()                             # close cuts the datasets to one length
    finally:
        writer.kill()
    with open_run(live) as run:
        assert run.n_samples == SURVEY_SAMPLES + 1001


def test_live_writer_refuses_an_existing_file_and_keeps_what_it_wrote(record, tmp_path):
    whole, _ = record
    with open_run(whole) as run:
        meta, data = run.to_dict(), run.read_all()
    kw = {"site": meta["site"], "apparatus": meta["apparatus"], "epoch_utc": meta["epoch_utc"],
          "signal_units": meta["signal_units"]}
    path = tmp_path / "a.h5"
    with pytest.raises(RuntimeError, match="stop"), LiveRunWriter(path, **kw) as w:
        w.append(data["time"][:500], data["azimuth"][:500], data["signal"][:500])
        w.flush()
        raise RuntimeError("stop")                 # the acquisition fails: the data stay
    with open_run(path) as run:
        assert run.n_samples == 500
        np.testing.assert_array_equal(run.read_all()["signal"], data["signal"][:500])
    with pytest.raises(Exception, match="exists"), LiveRunWriter(path, **kw):
        pass
    with open_run(path) as run:                    # untouched
        assert run.n_samples == 500
