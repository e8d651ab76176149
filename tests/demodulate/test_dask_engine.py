"""Stage 1 on a dask.distributed cluster equals the local engine, bit for bit.

A block belongs to the range it starts in and each range reads ahead to complete its last
block, so any split of the record (local ranges of any length, dask tasks) must give the same
turn table: the same blocks, fitted from the same samples by the same arithmetic. The tables
are compared exactly (np.array_equal, NaN equal to NaN).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from fringe.demodulate.engine import run_stage1
from fringe.demodulate.settings import DemodSettings
from fringe.demodulate.turns import TurnTable
from fringe.errors import ConfigError
from fringe.fit.run import fit_run
from fringe.fit.settings import FitSettings
from tests.helpers.runs import BASE, simulate_run

distributed = pytest.importorskip("distributed")

@pytest.fixture(scope="module")
def run_path(tmp_path_factory):
    # gaps, NaN samples and glitches exercise the block bookkeeping at range edges
    path, _, _ = simulate_run(
        tmp_path_factory.mktemp("dask") / "run.h5", seed=8, days=0.3,
        coefficients={"ke_XY": 5e-16},
        turntable={**BASE["turntable"], "tilt_south_urad": 0.0},
        systematics={"gaps_per_day": 10.0, "gap_length_s": 300.0, "dropout_fraction": 0.02,
                     "glitches_per_day": 20.0, "glitch_size": 2e-13, "tilt_1theta": 1e-15})
    return path


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False,
                                       dashboard_address=None)
    cl = distributed.Client(cluster)
    yield cl
    cl.close()
    cluster.close()


def assert_tables_equal(a: TurnTable, b: TurnTable):
    assert a.n_blocks == b.n_blocks
    for f in dataclasses.fields(TurnTable):
        if f.name == "settings":
            assert a.settings == b.settings
        elif f.name == "aux":
            assert a.aux.keys() == b.aux.keys()
            for k in a.aux:
                assert np.array_equal(a.aux[k], b.aux[k], equal_nan=True), k
        else:
            x, y = getattr(a, f.name), getattr(b, f.name)
            assert np.array_equal(x, y, equal_nan=np.asarray(x).dtype.kind == "f"), f.name


def test_dask_engine_equals_local(run_path, client):
    demod = DemodSettings()
    local, info_local = run_stage1(run_path, demod, aux_channels=("tilt_south",))
    remote, info_remote = run_stage1(run_path, demod, aux_channels=("tilt_south",),
                                     engine="dask", scheduler=client, range_samples=4000)
    assert info_local == info_remote
    assert len(range(0, info_local.n_samples, 4000)) >= 6       # several tasks ran
    counts = local.counts()
    assert counts["n_rejected_partial"] > 0 and counts["n_rejected_glitch"] > 0
    assert_tables_equal(local, remote)


@pytest.mark.parametrize("range_samples", [1 << 30, 4000, 1777, 31])
def test_local_range_length_does_not_change_the_table(run_path, range_samples):
    demod = DemodSettings(drift="quadratic", max_harmonic=3)
    reference, _ = run_stage1(run_path, demod, range_samples=1 << 16)
    table, _ = run_stage1(run_path, demod, range_samples=range_samples)
    assert_tables_equal(reference, table)


def test_fit_with_dask_engine_equals_local(run_path, client):
    settings = FitSettings(free=("ke_XY", "ke_XXmYY"))
    local, _ = fit_run(run_path, settings)
    remote, _ = fit_run(run_path, settings, engine="dask", scheduler=client)
    assert remote.coefficients == local.coefficients
    assert remote.settings["engine"] == "dask"


def test_engine_errors(run_path):
    with pytest.raises(ConfigError, match="engine: expected one of"):
        run_stage1(run_path, DemodSettings(), engine="spark")
    with pytest.raises(ConfigError, match="scheduler=ADDRESS"):
        run_stage1(run_path, DemodSettings(), engine="dask")
