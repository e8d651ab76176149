"""The turn table in scratch files and stages 2-3 in segments (fringe.demodulate.turn_store,
fringe.fit.passes): the same numbers as the in-memory fit, and nothing left behind.

The segment size is lowered (SEGMENT_TURNS = 300 turns) so that a short simulated record
(invented scenario, tests/helpers/runs.py) is spilled to disk and fitted in several segments.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from click.testing import CliRunner

import fringe.demodulate.turn_store as turn_store
from fringe.cli import main
from fringe.demodulate.engine import run_stage1, stage1_store
from fringe.demodulate.settings import DemodSettings
from fringe.demodulate.turn_store import Scratch, TurnStore
from fringe.demodulate.turns import TurnTable
from fringe.errors import FitError, OutputError
from fringe.fit.passes import noise_level, segment_noise_levels
from fringe.fit.run import fit_run, setup_from_run
from fringe.fit.settings import FitSettings
from fringe.fit.stages import stage2_and_3
from fringe.io.turns_file import read_turns, write_turns
from tests.helpers.runs import BASE, simulate_run

SMALL_SEGMENT = 300


@pytest.fixture(scope="module")
def run_path(tmp_path_factory):
    # 0.6 d of 45 s turns = 1150 turns: four segments of 300; gaps, dropouts and glitches
    # put rejected turns at segment edges; the tilt channel is there to be regressed
    path, _, _ = simulate_run(
        tmp_path_factory.mktemp("store") / "run.h5", seed=21, days=0.6,
        coefficients={"ke_XY": 4e-16, "ke_ZZ": -3e-16},
        turntable={**BASE["turntable"], "tilt_south_urad": 0.0},
        systematics={"gaps_per_day": 8.0, "gap_length_s": 300.0, "dropout_fraction": 0.02,
                     "glitches_per_day": 20.0, "glitch_size": 2e-13, "tilt_1theta": 1e-15})
    return path


@pytest.fixture
def small_segments(monkeypatch):
    monkeypatch.setattr(turn_store, "SEGMENT_TURNS", SMALL_SEGMENT)


def assert_tables_equal(a: TurnTable, b: TurnTable):
    assert a.n_blocks == b.n_blocks
    for f in dataclasses.fields(TurnTable):
        x, y = getattr(a, f.name), getattr(b, f.name)
        if f.name == "settings":
            assert x == y
        elif f.name == "aux":
            assert x.keys() == y.keys()
            for k in x:
                assert np.array_equal(x[k], y[k], equal_nan=True), k
        else:
            assert np.array_equal(x, y, equal_nan=np.asarray(x).dtype.kind == "f"), f.name


def test_spilled_table_reads_back_exactly(run_path, small_segments, tmp_path):
    demod = DemodSettings()
    memory, _ = run_stage1(run_path, demod, aux_channels=("tilt_south",))
    scratch = Scratch(tmp_path)
    store, _ = stage1_store(run_path, demod, aux_channels=("tilt_south",), scratch=scratch)
    assert store.on_disk and memory.n_blocks > 3 * SMALL_SEGMENT
    assert np.array_equal(store.status, memory.status)     # glitch rule on the whole record
    assert_tables_equal(store.load(), memory)
    parts = list(store.segments())
    assert [lo for lo, _ in parts] == list(range(0, memory.n_blocks, SMALL_SEGMENT))
    assert_tables_equal(parts[1][1], memory.rows(SMALL_SEGMENT, 2 * SMALL_SEGMENT))
    assert any(scratch.path.iterdir())
    scratch.close()
    assert list(tmp_path.iterdir()) == []


def test_short_record_stays_in_memory_and_writes_nothing(run_path, tmp_path):
    scratch = Scratch(tmp_path)
    store, _ = stage1_store(run_path, DemodSettings(), scratch=scratch)
    assert not store.on_disk and scratch.path is None
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("segment", [7, 50, 300])
def test_segment_noise_levels_equal_the_whole_record_filter(segment):
    rng = np.random.default_rng(segment)
    for n, reject in ((1000, 0.1), (1000, 0.6), (40, 0.2), (31, 0.0)):
        status = np.where(rng.random(n) < reject, 1, 0).astype(np.int8)
        status[n // 3:n // 3 + min(200, n // 4)] = 2      # a long stretch without accepted turns
        rms = rng.lognormal(0.0, 0.3, n)
        got = np.concatenate(list(segment_noise_levels(status, rms, segment)))
        assert np.array_equal(got, noise_level(rms[status == 0])), (n, reject)


def _stage2_3(run_path, store, settings, scratch):
    setup, meta = setup_from_run(run_path, settings.theory)
    span_days = (meta["time_last_s"] - meta["time_first_s"]) / 86400.0
    return stage2_and_3(setup, store, settings, span_days, scratch)


@pytest.mark.parametrize("settings", [
    FitSettings(),
    FitSettings(uncertainty="bootstrap", bootstrap_days=0.1),
    FitSettings(free=("ke_XY", "ke_XXmYY", "ke_XZ", "ke_YZ"), fixed={"ke_ZZ": -3e-16},
                regress=("tilt_south",)),
], ids=["default", "bootstrap", "fixed-regress"])
def test_disk_and_memory_segments_give_identical_numbers(run_path, small_segments, tmp_path,
                                                         settings):
    """Same segments, table in scratch files or in memory: bit-for-bit the same fit."""
    demod = DemodSettings()
    aux = tuple(settings.regress)
    disk, _ = stage1_store(run_path, demod, aux_channels=aux, scratch=Scratch(tmp_path))
    memory = TurnStore.in_memory(run_stage1(run_path, demod, aux_channels=aux)[0],
                                 SMALL_SEGMENT)
    h1, r1, _, m1 = _stage2_3(run_path, disk, settings, Scratch(tmp_path))
    h2, r2, _, m2 = _stage2_3(run_path, memory, settings, Scratch(tmp_path))
    assert h1["value"] == h2["value"] and h1["covariance"] == h2["covariance"]
    assert np.array_equal(r1.value, r2.value) and np.array_equal(r1.cov, r2.cov)
    assert r1.nuisance == r2.nuisance and r1.chi2_reduced == r2.chi2_reduced
    for i in range(4):
        assert all(np.array_equal(a, b) for a, b in zip(m1.segment(i, 0, 0),
                                                        m2.segment(i, 0, 0)))


def test_segmented_fit_agrees_with_the_one_segment_fit(run_path, monkeypatch, tmp_path):
    """Segments change only the rounding and the interpolation nodes of the per-turn model
    (each segment has its own time grid and ephemeris spline): measured 2e-11 sigma and
    2e-11 of the model's size; bound 1e-9."""
    settings = FitSettings(uncertainty="bootstrap", bootstrap_days=0.1)
    whole, whole_cols = fit_run(run_path, settings)
    monkeypatch.setattr(turn_store, "SEGMENT_TURNS", SMALL_SEGMENT)
    parts, part_cols = fit_run(run_path, settings, scratch_dir=str(tmp_path))
    for name, v in whole.coefficients.items():
        w = parts.coefficients[name]
        assert abs(w.value - v.value) < 1e-9 * v.sigma, name
        assert w.sigma == pytest.approx(v.sigma, rel=1e-9), name
    assert parts.harmonics.value == pytest.approx(whole.harmonics.value, rel=1e-9,
                                                      abs=1e-12 * max(whole.harmonics.sigma))
    assert parts.statistics.chi2_reduced == pytest.approx(whole.statistics.chi2_reduced,
                                                             rel=1e-9)
    assert parts.stage1 == whole.stage1
    a, b = whole_cols.to_dict(), part_cols.to_dict()
    for name in a:
        if name in ("model_C", "model_B"):
            scale = np.nanmax(np.abs(a[name]))
            assert np.allclose(a[name], b[name], rtol=0, atol=1e-9 * scale, equal_nan=True)
        else:
            assert np.array_equal(a[name], b[name], equal_nan=True), name
    # the amplitudes file written a segment at a time holds the same columns
    with part_cols:
        write_turns(tmp_path / "t.turns.h5", units=parts.units, epoch_utc=parts.epoch_utc,
                    columns=part_cols)
    back = read_turns(tmp_path / "t.turns.h5")
    for name in b:
        assert np.array_equal(back[name], b[name], equal_nan=True), name
    assert sorted(p.name for p in tmp_path.iterdir()) == ["t.turns.h5"]   # scratch removed


def test_failed_fit_removes_its_scratch(run_path, small_segments, tmp_path):
    with pytest.raises(FitError, match="bootstrap"):
        fit_run(run_path, FitSettings(uncertainty="bootstrap", bootstrap_days=1.0),
                scratch_dir=str(tmp_path))
    assert list(tmp_path.iterdir()) == []


def test_cli_fit_leaves_only_its_outputs(run_path, small_segments, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    work = tmp_path / "work"
    work.mkdir()
    got = CliRunner().invoke(main, ["fit", run_path, "--out", str(out / "r.json")])
    assert got.exit_code == 0, got.output
    assert sorted(p.name for p in out.iterdir()) == ["r.json", "r.turns.h5"]
    got = CliRunner().invoke(main, ["fit", run_path, "--out", str(out / "s.json"),
                                    "--scratch-dir", str(work)])
    assert got.exit_code == 0, got.output
    assert list(work.iterdir()) == []
    a, b = read_turns(out / "r.turns.h5"), read_turns(out / "s.turns.h5")
    assert all(np.array_equal(a[k], b[k], equal_nan=True) for k in a if k not in
               ("units", "epoch_utc"))


def test_unusable_scratch_dir_is_a_one_line_error(run_path, small_segments, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    missing = tmp_path / "no-such-dir"
    # the command checks the option before any work
    got = CliRunner().invoke(main, ["fit", run_path, "--out", str(out / "r.json"),
                                    "--scratch-dir", str(missing)])
    assert got.exit_code == 2, got.output
    lines = [ln for ln in got.output.splitlines() if ln.lower().startswith("error")]
    assert len(lines) == 1 and "--scratch-dir" in lines[0] and str(missing) in lines[0]
    assert "Traceback" not in got.output
    assert list(out.iterdir()) == []
    # the library, when it first needs the directory
    with pytest.raises(OutputError, match="scratch directory: expected a writable directory"):
        fit_run(run_path, FitSettings(), scratch_dir=str(missing))
    assert not missing.exists()


def test_full_disk_while_spilling_is_an_output_error(run_path, small_segments, tmp_path,
                                                     monkeypatch):
    import errno

    def no_space(*args, **kwargs):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(turn_store.np, "save", no_space)
    with pytest.raises(OutputError, match="No space left on device"):
        fit_run(run_path, FitSettings(), scratch_dir=str(tmp_path))
    assert list(tmp_path.iterdir()) == []


def test_dask_stage1_spills_the_same_table(run_path, small_segments, tmp_path):
    distributed = pytest.importorskip("distributed")
    cluster = distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                       dashboard_address=None)
    client = distributed.Client(cluster)
    try:
        store, _ = stage1_store(run_path, DemodSettings(), engine="dask", scheduler=client,
                                scratch=Scratch(tmp_path))
    finally:
        client.close()
        cluster.close()
    assert store.on_disk
    assert_tables_equal(store.load(), run_stage1(run_path, DemodSettings())[0])


def test_interrupted_fit_removes_its_scratch(run_path, small_segments, tmp_path, monkeypatch):
    """Ctrl-C (or SIGTERM, which the command line turns into the same KeyboardInterrupt) in
    stage 3, when the table and the first segment's rows are in the scratch files."""
    import fringe.fit.passes as fit_passes

    real, calls = fit_passes.design_columns, []

    def interrupted(*args, **kwargs):
        calls.append(1)
        if len(calls) == 2:
            assert any(p.name.endswith(".scratch") and p.name.startswith(".fringe-")
                       for p in tmp_path.iterdir())
            raise KeyboardInterrupt
        return real(*args, **kwargs)

    monkeypatch.setattr(fit_passes, "design_columns", interrupted)
    with pytest.raises(KeyboardInterrupt):
        fit_run(run_path, FitSettings(), scratch_dir=str(tmp_path))
    assert len(calls) == 2 and list(tmp_path.iterdir()) == []


@pytest.mark.filterwarnings("ignore::fringe.errors.SystematicsWarning")  # SME data, medium fit
@pytest.mark.parametrize("theory", ["medium", "rms"])
def test_other_theories_fit_the_same_from_the_scratch_table(run_path, monkeypatch, tmp_path,
                                                            theory):
    """The medium fit loads the spilled table whole; rms is linear and runs in segments."""
    whole, whole_cols = fit_run(run_path, FitSettings(theory=theory))
    monkeypatch.setattr(turn_store, "SEGMENT_TURNS", SMALL_SEGMENT)
    parts, part_cols = fit_run(run_path, FitSettings(theory=theory), scratch_dir=str(tmp_path))
    for name, v in whole.coefficients.items():
        w = parts.coefficients[name]
        assert abs(w.value - v.value) < 1e-9 * v.sigma, name
        assert w.sigma == pytest.approx(v.sigma, rel=1e-9), name
    a, b = whole_cols.to_dict(), part_cols.to_dict()
    scale = np.nanmax(np.abs(a["model_C"]))
    assert np.allclose(a["model_C"], b["model_C"], rtol=0, atol=1e-9 * scale, equal_nan=True)
    part_cols.close()
    assert list(tmp_path.iterdir()) == []
