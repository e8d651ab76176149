"""Stage 1: the compiled block kernel against a plain per-block least-squares reference."""

from __future__ import annotations

import numpy as np
import pytest

from fringe.demodulate.blocks import demodulate_blocks, turn_boundaries
from fringe.demodulate.settings import DemodSettings, leak_terms


def reference_block_fit(t, az, y, aux, settings):
    """One block by numpy.linalg.lstsq: the direct statement of the stage-1 model (module
    docstring of fringe.demodulate), sharing no code with the kernel."""
    theta = np.pi - az
    good = np.isfinite(y)
    for a in aux.values():
        good &= np.isfinite(a)
    t, theta, y = t[good], theta[good], y[good]
    nd = {"offset": 1, "linear": 2, "quadratic": 3}[settings.drift]
    half = max(0.5 * (t.max() - t.min()), 1e-9)
    tau = (t - t.mean()) / half
    cols = [tau ** j for j in range(nd)]
    for m in range(1, settings.max_harmonic + 1):
        cols += [np.cos(m * theta), np.sin(m * theta)]
    x = np.stack(cols, axis=1)
    coef, *_ = np.linalg.lstsq(x, y, rcond=None)
    rms = np.sqrt(np.sum((y - x @ coef) ** 2) / max(y.size - x.shape[1], 1))
    inv = np.linalg.inv(x.T @ x)
    ic, isn = nd + 2, nd + 3
    unit = {"C": np.cos(2 * theta), "B": np.sin(2 * theta), "A": np.ones_like(theta)}
    leak = np.array([np.linalg.lstsq(x, unit[k] * tau ** j, rcond=None)[0][[ic, isn]]
                     for k, j in leak_terms(settings)]).T
    aux_coef = {k: np.linalg.lstsq(x, a[good], rcond=None)[0] for k, a in aux.items()}
    psi = np.sort(np.mod(theta, 2 * np.pi))
    gap = max(np.max(np.diff(psi), initial=0.0), psi[0] + 2 * np.pi - psi[-1])
    return dict(coef=coef, rms=rms, ninv_2=inv[np.ix_([ic, isn], [ic, isn])], leak=leak,
                aux=aux_coef, t_mid=t.mean(), gap_deg=np.degrees(gap), n=y.size)


def _record(rng, n_blocks=12, per_turn=45, nan_fraction=0.05):
    n = n_blocks * per_turn
    t = np.arange(n) * 1.0 + rng.uniform(-0.05, 0.05, n)
    az = np.mod(np.pi - 2 * np.pi * t / per_turn + 0.3, 2 * np.pi)
    y = 3.0 + 1e-3 * t + 0.4 * np.cos(2 * (np.pi - az)) + rng.normal(0, 0.1, n)
    y[rng.random(n) < nan_fraction] = np.nan
    tilt = 0.2 * np.sin(np.pi - az) + rng.normal(0, 0.01, n)
    starts = np.flatnonzero(turn_boundaries(np.pi - az, (np.pi - az[0]) % (2 * np.pi), t, 11.0))
    return t, az, y, {"tilt": tilt}, np.concatenate([[0], starts])


@pytest.mark.parametrize("settings", [DemodSettings(), DemodSettings(drift="offset"),
                                      DemodSettings(drift="quadratic", max_harmonic=4)])
def test_kernel_equals_per_block_lstsq(settings):
    rng = np.random.default_rng(3)
    t, az, y, aux, starts = _record(rng)
    table = demodulate_blocks(t, az, y, starts, settings, aux=aux)
    bounds = np.append(starts, t.size)
    assert table.n_blocks == starts.size and np.all(table.accepted)
    for b in range(table.n_blocks):
        sl = slice(bounds[b], bounds[b + 1])
        ref = reference_block_fit(t[sl], az[sl], y[sl], {k: v[sl] for k, v in aux.items()},
                                  settings)
        np.testing.assert_allclose(table.coef[b], ref["coef"], rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(table.residual_rms[b], ref["rms"], rtol=1e-9)
        np.testing.assert_allclose(table.ninv_2[b], ref["ninv_2"], rtol=1e-9, atol=1e-15)
        np.testing.assert_allclose(table.leak[b], ref["leak"], rtol=1e-8, atol=1e-12)
        np.testing.assert_allclose(table.aux["tilt"][b], ref["aux"]["tilt"], rtol=1e-9,
                                   atol=1e-12)
        assert table.t_mid_s[b] == pytest.approx(ref["t_mid"], abs=1e-9)
        assert table.angle_gap_deg[b] == pytest.approx(ref["gap_deg"], abs=1e-9)
        assert table.n_valid[b] == ref["n"]


def test_rejection_rules_and_split_independence():
    rng = np.random.default_rng(4)
    t, az, y, aux, starts = _record(rng, nan_fraction=0.0)
    bounds = np.append(starts, t.size)
    y[bounds[2]:bounds[3] - 5] = np.nan             # block 2: 5 valid samples -> partial
    sl = slice(bounds[4], bounds[5])                 # block 4: half a turn missing -> partial
    y[sl][np.cos(np.pi - az[sl]) > 0] = np.nan
    y[bounds[6]:bounds[7]] = np.nan                  # block 6: nothing valid
    table = demodulate_blocks(t, az, y, starts, DemodSettings(), aux=aux)
    assert list(np.flatnonzero(~table.accepted)) == [2, 4, 6]
    assert table.angle_gap_deg[4] > 150 and table.angle_gap_deg[6] == 360.0
    assert np.isnan(table.t_start_s[6]) and table.n_valid[6] == 0
    assert np.all(np.isnan(table.coef[[2, 4, 6]]))
    # a block's numbers do not depend on which other blocks share its range
    k = 5
    part = demodulate_blocks(t[:bounds[k]], az[:bounds[k]], y[:bounds[k]], starts[:k],
                             DemodSettings(), aux={n: v[:bounds[k]] for n, v in aux.items()})
    rest = demodulate_blocks(t[bounds[k]:], az[bounds[k]:], y[bounds[k]:],
                             starts[k:] - bounds[k], DemodSettings(),
                             aux={n: v[bounds[k]:] for n, v in aux.items()})
    both = np.concatenate([part.coef, rest.coef])
    assert np.array_equal(both, table.coef, equal_nan=True)


def test_singular_block_is_rejected():
    """Samples at only two table angles (0 and 180 deg) make every sin m theta column zero;
    with the angular-coverage rule switched off (360 deg) the rank guard must reject the block."""
    n = 60
    t = np.arange(n, dtype=float)
    az = np.where(np.arange(n) % 2 == 0, 0.0, np.pi)
    y = np.ones(n)
    table = demodulate_blocks(t, az, y, np.array([0]), DemodSettings(max_angle_gap_deg=360))
    assert not table.accepted[0] and np.isnan(table.coef[0, 0])


def test_turn_boundaries_reference():
    """The compiled boundary rule equals its direct numpy statement (psi jumps by more than pi,
    or a long time gap), for wrapped and unwrapped angles, both senses."""
    rng = np.random.default_rng(5)
    t = np.cumsum(rng.uniform(0.5, 1.5, 500))
    t[300:] += 40.0                                   # one long time gap
    th = np.cumsum(rng.normal(2 * np.pi / 45, 0.02, 500)) * np.where(np.arange(500) < 250, 1, -1)
    theta0, gap = 0.7, 11.0
    for angles in (th, np.mod(th + np.pi, 2 * np.pi) - np.pi):
        for prev in (None, (angles[0] - 0.1, t[0] - 1.0)):
            got = turn_boundaries(angles, theta0, t, gap, *(prev or ()))
            psi = np.mod(np.concatenate([[angles[0] if prev is None else prev[0]], angles])
                         - theta0, 2 * np.pi)
            psi[psi >= 2 * np.pi - 1e-7] -= 2 * np.pi            # ANGLE_TIE_RAD
            pt = np.concatenate([[t[0] if prev is None else prev[1]], t])
            want = (np.abs(np.diff(psi)) > np.pi) | (np.diff(pt) > gap)
            if prev is None:
                want[0] = False
            assert np.array_equal(got, want)
            assert got[300] and 5 < np.sum(got) < 30


def test_sample_on_the_reference_angle_starts_one_block():
    """Samples exactly on theta0 + 2 pi k (to rounding) at large unwrapped angles: such a sample
    has psi = 0, the first angle of a turn, so it starts its block when theta increases and
    ends it when theta decreases; every block has exactly 45 samples in either sense."""
    n = 45 * 400
    t = np.arange(n, dtype=float)
    for sense in (1.0, -1.0):
        theta = np.pi + sense * 2 * np.pi * t / 45 + 5000.0 * 2 * np.pi   # unwrapped, ~3e4 rad
        starts = np.flatnonzero(turn_boundaries(theta, np.pi, t, 11.0))
        first = 45 if sense > 0 else 1
        assert np.array_equal(starts, np.arange(first, n, 45)), sense


def test_table_builder_joins_ranges_and_grows():
    """Joining range tables as they arrive (TurnTableBuilder) equals demodulating at once, also
    when the expected size is far too small (the arrays grow)."""
    from fringe.demodulate.turns import TurnTableBuilder

    rng = np.random.default_rng(6)
    t, az, y, aux, starts = _record(rng, n_blocks=30)
    whole = demodulate_blocks(t, az, y, starts, DemodSettings(), aux=aux)
    bounds = np.append(starts, t.size)
    for expected in (2, 1000):
        builder = TurnTableBuilder(DemodSettings(), expected)
        for lo, hi in ((0, 7), (7, 8), (8, 8), (8, 30)):
            sl = slice(bounds[lo], bounds[hi])
            part = demodulate_blocks(t[sl], az[sl], y[sl], starts[lo:hi] - bounds[lo],
                                     DemodSettings(), aux={k: v[sl] for k, v in aux.items()})
            builder.append(part)
        joined = builder.finish()
        assert joined.n_blocks == whole.n_blocks
        for name in ("t_mid_s", "coef", "ninv_2", "residual_rms", "leak", "status"):
            assert np.array_equal(getattr(joined, name), getattr(whole, name), equal_nan=True)
        assert np.array_equal(joined.aux["tilt"], whole.aux["tilt"], equal_nan=True)


def test_stalled_table_is_a_one_line_error(tmp_path, monkeypatch):
    """A table that stops turning (no time gap) would make the rest of the record one block in
    memory; beyond the read-ahead limit the fit stops with the file's one-line error."""
    import fringe.demodulate.engine as engine
    from fringe.demodulate.engine import run_stage1
    from fringe.errors import InputFileError
    from fringe.io.runwriter import RunWriter

    n = 150_000
    t = np.arange(n, dtype=float)
    az = np.where(t < 100_000, np.mod(-2 * np.pi * t / 45, 2 * np.pi), 1.0)   # turns, stops
    y = np.random.default_rng(7).normal(size=n)
    path = tmp_path / "stall.h5"
    with RunWriter(path, site={"latitude_deg": 47.6, "longitude_deg": 11.4},
                   apparatus={"kind": "cavity-pair", "carrier_hz": 2.8e14},
                   epoch_utc="2027-02-03T00:00:00Z", signal_units="Hz") as w:
        w.append(t, az, y)
    monkeypatch.setattr(engine, "MAX_BLOCK_SAMPLES", 2_000)    # 64 x 180 samples apply here
    with pytest.raises(InputFileError) as err:
        run_stage1(str(path), DemodSettings(), range_samples=1 << 14)
    message = str(err.value)
    assert message.startswith(f"{path}: samples/azimuth: ") and "\n" not in message
    assert "stopped turning" in message
    # with the default limit the same record is fitted (the stall is one rejected block)
    monkeypatch.setattr(engine, "MAX_BLOCK_SAMPLES", 1 << 21)
    table, _ = run_stage1(str(path), DemodSettings(), range_samples=1 << 14)
    assert table.n_blocks >= 2000 and not table.accepted[-1] and table.n_valid[-1] > 40_000


def _tables_equal(a, b):
    for name in ("t_mid_s", "t_start_s", "t_stop_s", "n_valid", "coef", "ninv_2", "residual_rms",
                 "angle_gap_deg", "status", "leak"):
        assert np.array_equal(getattr(a, name), getattr(b, name), equal_nan=True), name


def test_short_record_in_memory_is_the_streamed_stage1(small_run, monkeypatch):
    """A short record is read whole once and split in LOCAL_THREADS ranges; a long one range by
    range: the same turn table to the bit, and the loaded arrays are left as read."""
    import fringe.demodulate.engine as engine
    from fringe.demodulate.engine import run_stage1
    from fringe.io.runreader import open_run

    loaded = []
    real_load = engine._loaded

    def spy(run, *args):
        got = real_load(run, *args)
        if got is not run:
            loaded.append((got, {c: got._data[c].copy() for c in got.channels}))
        return got

    monkeypatch.setattr(engine, "_loaded", spy)
    memory, info_m = run_stage1(str(small_run), DemodSettings())
    assert len(loaded) == 1
    for name, before in loaded[0][1].items():
        assert np.array_equal(loaded[0][0]._data[name], before, equal_nan=True), name
    monkeypatch.setattr(engine, "WHOLE_RECORD_SAMPLES", 0)
    streamed, info_s = run_stage1(str(small_run), DemodSettings())
    assert len(loaded) == 1 and info_m == info_s
    _tables_equal(memory, streamed)
    with open_run(small_run) as run:
        whole = run.load(("time", "azimuth"))
        for kw in ({}, {"start": 5, "stop": 1000}, {"start": 7, "stop": 7}):
            a = list(run.iter_chunks(300, ("time", "azimuth"), copy=True, **kw))
            b = list(whole.iter_chunks(300, ("time", "azimuth"), **kw))
            assert len(a) == len(b)
            for x, y in zip(a, b):
                assert all(np.array_equal(x[c], y[c]) for c in ("time", "azimuth"))
