"""Studies of many campaigns: seeds, statistics, engines, failures, the command.

Scenario: an invented laboratory (tests/helpers/runs.py), 0.4 day at 1 Hz, so a campaign
costs about a second. The statistics are checked against scipy.stats (a reference library,
[R-oracle] is not needed: the binomial and normal quantities are textbook formulas).
"""

from __future__ import annotations

import json
import math
import pickle
import threading
import time
import warnings

import numpy as np
import pytest
import scipy.stats

import fringe.errors as errors
from fringe.errors import CampaignWarning, ConfigError, FitError, InputFileError
from fringe.fit.settings import FitSettings
from fringe.study import StudySettings, campaign_seeds, map_tasks, parse_vary, run_study
from fringe.study.engines import WORKER_LOST, connect
from fringe.study.pulls import P68, P95, binomial_sigma, coefficient_table
from tests.helpers import study_faults
from tests.helpers.commands import run_command

SCENARIO = """\
title = "study test (invented)"
[site]
name = "Kestrel Fen optics cellar (invented)"
latitude_deg = 47.62
longitude_deg = 11.38
height_m = 610.0
[campaign]
start_utc = "2027-02-03T00:00:00Z"
duration_days = 0.4
sample_interval_s = 1.0
[apparatus]
kind = "cavity-pair"
carrier_hz = 2.82e14
path_separation_deg = 90.0
units = "Hz"
[turntable]
motion = "continuous"
period_s = 45.0
sense = "ccw"
start_azimuth_deg = 0.0
[theory]
name = "sme"
[coefficients]
ke_XY = 3.0e-16
ke_XXmYY = -2.0e-16
[noise]
white_fm_adev_1s = 2e-15
"""

FREE = ("ke_XY", "ke_XXmYY", "ke_ZZ")     # well determined by 0.4 day


@pytest.fixture
def scenario(tmp_path):
    p = tmp_path / "study.toml"
    p.write_text(SCENARIO, encoding="utf-8")
    return p


def settings(**kw) -> StudySettings:
    base = {"campaigns": 3, "seed": 11, "workers": 1, "fit": FitSettings(free=FREE)}
    return StudySettings(**{**base, **kw})


def strip_times(study: dict) -> dict:
    """The study without what depends on the machine (timings, date, engine)."""
    out = json.loads(json.dumps(study))
    for key in ("wall_s", "date_utc", "engine", "workers"):
        out.pop(key)
    for c in out["campaigns"]:
        c.pop("sim_s", None)
        c.pop("fit_s", None)
    return out


# == seeds and settings ==========================================================================

def test_campaign_seeds_are_distinct_reproducible_and_extend():
    a, b = campaign_seeds(5, 50), campaign_seeds(5, 80)
    assert a == b[:50]                            # a larger study extends a smaller one
    sims = [s["simulation"] for s in b]
    assert len(set(sims)) == len(sims)
    assert campaign_seeds(6, 3) != a[:3]


@pytest.mark.parametrize("text, expected", [
    ("period_s=30,45,60", ("period_s", (30.0, 45.0, 60.0))),
    ("latitude_deg=-10,0,47.5", ("latitude_deg", (-10.0, 0.0, 47.5))),
    ("duration_days=0.5", ("duration_days", (0.5,))),
])
def test_parse_vary(text, expected):
    assert parse_vary(text) == expected


@pytest.mark.parametrize("text", ["speed=1,2", "period_s", "period_s=1,x", "period_s=-5",
                                  "latitude_deg=95", "period_s=30,30"])
def test_parse_vary_refuses(text):
    with pytest.raises(ConfigError) as info:
        parse_vary(text, "--vary")
    assert "--vary" in str(info.value) and "\n" not in str(info.value)


@pytest.mark.parametrize("kw", [{"campaigns": 1}, {"seed": -1}, {"mode": "odd"},
                                {"mode": "null", "inject_sigma": 2.0},
                                {"engine": "dask"}, {"engine": "local", "scheduler": "x"},
                                {"workers": 0}])
def test_settings_refuse(kw):
    with pytest.raises(ConfigError):
        StudySettings(**kw)


# == statistics ==================================================================================

def test_expected_coverages_and_binomial_sigma():
    # normal distribution (scipy.stats.norm): 2 Phi(k) - 1
    assert P68 == pytest.approx(2 * scipy.stats.norm.cdf(1.0) - 1, rel=1e-12)
    assert P95 == pytest.approx(2 * scipy.stats.norm.cdf(1.96) - 1, rel=1e-12)
    # binomial: std of k/n is sqrt(p (1 - p) / n) (scipy.stats.binom)
    assert binomial_sigma(0.3, 70) == pytest.approx(scipy.stats.binom(70, 0.3).std() / 70,
                                                    rel=1e-12)


def _records(rng, n, sigma_scale=1.0):
    out = []
    for _ in range(n):
        truth = {"a": rng.normal(), "b": 0.0}
        sig = {"a": 0.5, "b": 2.0}
        val = {k: truth[k] + sigma_scale * sig[k] * rng.normal() for k in truth}
        out.append({"truth": truth, "value": val, "sigma": sig, "efficiency": {"a": 0.9}})
    return out


def test_coefficient_table_of_normal_pulls():
    rng = np.random.default_rng(4)
    n = 4000
    t = coefficient_table(_records(rng, n), ("a", "b"), {"a": 0.45, "b": None})
    for name in ("a", "b"):
        c = t[name]
        # coverage of exact normal pulls within 4 binomial sigma (seeded; derived)
        assert abs(c["coverage_68"]["z"]) < 4 and abs(c["coverage_95"]["z"]) < 4
        assert c["coverage_68"]["binomial_sigma"] == pytest.approx(binomial_sigma(P68, n))
        assert abs(c["pull_mean"]["value"]) < 4 * c["pull_mean"]["uncertainty"]
        assert abs(c["pull_std"]["value"] - 1) < 4 * c["pull_std"]["uncertainty"]
    assert t["a"]["efficiency_coloured"] == pytest.approx(0.45 / 0.5)
    assert t["a"]["efficiency_white"] == pytest.approx(0.9)
    assert t["b"]["efficiency_coloured"] is None


def test_coefficient_table_sees_underestimated_sigma():
    # estimates scattered 1.5x their sigma: coverage far below 68 % (can fail: it must)
    t = coefficient_table(_records(np.random.default_rng(5), 2000, 1.5), ("a",))
    assert t["a"]["coverage_68"]["z"] < -10
    assert t["a"]["pull_std"]["value"] == pytest.approx(1.5, abs=0.1)


# == engines =====================================================================================

def test_local_loop_keeps_going_after_a_failure():
    out = map_tasks(study_faults.square_or_raise, [0, 1, 3], study_faults.fail_record)
    assert out[0] == 0 and out[2] == 9
    assert out[1] == {"failed": 1, "reason": "injected failure of item 1"}


def test_process_pool_survives_an_error_and_a_lost_worker():
    # spawned processes: item 1 raises, item 2 ends its process (the pool breaks); the others
    # are still computed and nothing hangs
    items = [0, 1, 2, 3, 4, 5]
    out = map_tasks(study_faults.square_or_fail, items, study_faults.fail_record, workers=2)
    assert [out[i] for i in (0, 3, 4, 5)] == [0, 9, 16, 25]
    assert out[1]["reason"] == "injected failure of item 1"
    assert out[2] == {"failed": 2, "reason": WORKER_LOST}


def test_an_interrupt_stops_the_pool_without_waiting_for_the_queue():
    def interrupt(done, total):
        raise KeyboardInterrupt

    before = set(threading.enumerate())
    t0 = time.monotonic()
    with pytest.raises(KeyboardInterrupt):
        map_tasks(study_faults.quick_then_slow, [0, 1, 2, 3, 4, 5], study_faults.fail_record,
                  workers=2, progress=interrupt)
    assert time.monotonic() - t0 < 100       # not 2 x 120 s of queued items
    # before: the pool's management thread stayed alive and kept the interpreter from exiting
    left = [t for t in threading.enumerate() if t not in before and t.is_alive() and not t.daemon]
    assert left == []


def test_unreachable_scheduler_is_one_line_quickly():
    pytest.importorskip("distributed")
    t0 = time.monotonic()
    with pytest.raises(ConfigError) as info:
        connect("tcp://127.0.0.1:9", timeout_s=2.0)      # the discard port: nothing listens
    assert time.monotonic() - t0 < 30
    assert "cannot reach" in str(info.value) and "\n" not in str(info.value)


def test_missing_scheduler_file(tmp_path):
    pytest.importorskip("distributed")
    with pytest.raises(InputFileError):
        connect(scheduler_file=str(tmp_path / "none.json"))


def _subclasses(base):
    out = set()
    for cls in vars(errors).values():
        if isinstance(cls, type) and issubclass(cls, base):
            out.add(cls)
    return sorted(out, key=lambda c: c.__name__)


@pytest.mark.parametrize("cls", _subclasses(errors.FringeError) + _subclasses(
    errors.FringeWarning), ids=lambda c: c.__name__)
def test_every_error_and_warning_class_pickles(cls):
    exc = cls("run.h5", "samples/time", "expected times") if cls is InputFileError \
        else cls("a.toml: [x] y: expected z")
    back = pickle.loads(pickle.dumps(exc))
    assert type(back) is cls and str(back) == str(exc) and back.args == exc.args
    assert back.__dict__ == exc.__dict__


# == whole studies ===============================================================================

def test_study_records_seeds_and_is_reproducible(scenario):
    a = run_study(scenario, settings())
    b = run_study(scenario, settings())
    assert strip_times(a) == strip_times(b)
    assert a["master_seed"] == 11 and len(a["campaigns"]) == 3
    assert [c["seeds"] for c in a["campaigns"]] == campaign_seeds(11, 3)
    row = a["rows"][0]
    assert row["free"] == list(FREE) and row["n_failed"] == 0
    assert set(row["coefficients"]) == set(FREE)
    for c in a["campaigns"]:
        assert c["truth"] == {"ke_XY": 3e-16, "ke_XXmYY": -2e-16, "ke_ZZ": 0.0}
    # the forecast beside the median sigma: a white-noise record reaches it (efficiency ~ 1)
    for name, c in row["coefficients"].items():
        assert 0.8 < c["efficiency_coloured"] < 1.2, name


def test_study_draws_a_master_seed_when_none_is_given(scenario):
    a = run_study(scenario, settings(seed=None, campaigns=2))
    assert isinstance(a["master_seed"], int) and a["master_seed"] >= 0
    again = run_study(scenario, settings(seed=a["master_seed"], campaigns=2))
    assert strip_times(again)["rows"] == strip_times(a)["rows"]


def test_inject_sigma_draws_truths_from_the_forecast(scenario):
    a = run_study(scenario, settings(inject_sigma=3.0))
    fc = a["rows"][0]["sigma_forecast"]
    for c, s in zip(a["campaigns"], campaign_seeds(11, 3)):
        z = np.random.default_rng(s["truth"]).standard_normal(len(FREE))
        assert c["truth"] == pytest.approx({n: 3.0 * fc[n] * x for n, x in zip(FREE, z)})


def test_null_and_scramble(scenario):
    null = run_study(scenario, settings(mode="null"))
    assert all(v == 0.0 for c in null["campaigns"] for v in c["truth"].values())
    assert null["rows"][0]["pulls_against"] == "zero"
    # ~15 sigma of ke_XY injected; scrambling whole turns moves each turn to a random
    # sidereal time, so the modulated ke_XY, ke_XXmYY fall back to noise (|est/sigma| < 5:
    # fails with probability ~1e-6 per estimate for normal pulls); without it they are found
    scr = run_study(scenario, settings(mode="scramble"))
    plain = run_study(scenario, settings())
    for c, p in zip(scr["campaigns"], plain["campaigns"]):
        assert c["n_turns_permuted"] > 100
        assert abs(p["value"]["ke_XY"] / p["sigma"]["ke_XY"]) > 8
        for n in ("ke_XY", "ke_XXmYY"):
            assert abs(c["value"][n] / c["sigma"][n]) < 5, n


def test_vary_gives_one_row_per_value(scenario):
    a = run_study(scenario, settings(campaigns=2, vary=("period_s", (30.0, 60.0))))
    assert [r["vary"]["value"] for r in a["rows"]] == [30.0, 60.0]
    assert len(a["campaigns"]) == 4
    # the same seeds in each row (common random numbers)
    assert [c["seeds"] for c in a["campaigns"] if c["row"] == 0] == \
        [c["seeds"] for c in a["campaigns"] if c["row"] == 1]


def test_one_failing_campaign_is_reported_with_its_seed(scenario, monkeypatch):
    monkeypatch.setattr("fringe.study.run.run_campaign", study_faults.failing_campaign)
    with pytest.warns(CampaignWarning, match=r"campaign 1 \(row 0, simulation seed \d+\)"):
        a = run_study(scenario, settings())
    row = a["rows"][0]
    assert row["n_failed"] == 1 and row["n_campaigns"] == 3
    fail = row["failures"][0]
    assert fail["index"] == 1 and fail["seeds"] == campaign_seeds(11, 3)[1]
    assert "injected failure" in fail["error"]
    assert all(row["coefficients"][n]["n"] == 2 for n in FREE)


def test_all_campaigns_failing_is_one_error(scenario, monkeypatch):
    def always(task):
        raise RuntimeError("no")

    monkeypatch.setattr("fringe.study.campaign._run", always)
    with pytest.raises(FitError, match="all 3 campaigns failed"):
        run_study(scenario, settings())


@pytest.mark.slow
def test_process_pool_equals_the_loop(scenario):
    a = run_study(scenario, settings(campaigns=4))
    b = run_study(scenario, settings(campaigns=4, workers=2))
    assert strip_times(a) == strip_times(b)


def test_dask_cluster_of_two_workers_equals_the_loop(scenario, tmp_path, monkeypatch):
    distributed = pytest.importorskip("distributed")
    local = run_study(scenario, settings())
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                       dashboard_address=":0", scheduler_port=0)
    try:
        monkeypatch.chdir(tmp_path)
        (tmp_path / "scratch").mkdir()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DeprecationWarning)
            remote = run_study(scenario, settings(engine="dask", workers=None,
                                                  scheduler=cluster.scheduler_address,
                                                  scratch_dir="scratch"))
        assert strip_times(remote) == strip_times(local)
        assert remote["engine"] == "dask"
        # one failing campaign on the cluster: reported, the others kept
        # (its CampaignWarning is tested with the local engine above: the campaigns on two
        # in-process worker threads enter and leave warnings.catch_warnings out of order, which
        # can detach pytest's recorder -- the module's state is global, not per thread)
        monkeypatch.setattr("fringe.study.run.run_campaign", study_faults.failing_campaign)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", CampaignWarning)
            bad = run_study(scenario, settings(engine="dask", workers=None,
                                               scheduler=cluster.scheduler_address))
        assert bad["rows"][0]["n_failed"] == 1
        failure, = bad["rows"][0]["failures"]
        assert failure["index"] == 1 and "injected failure of campaign 1" in failure["error"]
        assert isinstance(failure["seeds"]["simulation"], int)
        assert [c["index"] for c in bad["campaigns"] if "error" not in c] == [0, 2]
        assert list((tmp_path / "scratch").iterdir()) == []       # temporary runs removed
    finally:
        cluster.close()


# == the command =================================================================================

def test_command_writes_the_set_and_refuses_to_replace_it(scenario, tmp_path):
    r = run_command(tmp_path, ["study", "study.toml", "--campaigns", "2", "--seed", "3",
                               "--workers", "1", "--free", ",".join(FREE), "--out", "st"])
    assert r.exit_code == 0, r.stderr
    out = tmp_path / "st"
    names = sorted(p.name for p in out.iterdir())
    assert names == ["study.html", "study.json", "study.md", "study_coverage.png",
                     "study_pulls.png", "study_sigma.png"]
    study = json.loads((out / "study.json").read_text(encoding="utf-8"))
    assert study["master_seed"] == 3 and study["fit"]["free"] == list(FREE)
    assert study["scenario"] == "study.toml"
    page = (out / "study.md").read_text(encoding="utf-8")
    for name in FREE:
        assert f"| {name} | 2 |" in page
    assert all(f"![{f}]({f})" in page for f in names if f.endswith(".png"))
    html_page = (out / "study.html").read_text(encoding="utf-8")
    assert "<img src='study_pulls.png'" in html_page
    # the HTML page names each coefficient by its symbol (its name in the tooltip), as the
    # fit's report does; sigmas with three significant digits
    for name in FREE:
        assert f'<span class="coef" title="{name}">' in html_page
    sigma = study["rows"][0]["coefficients"][FREE[0]]["sigma_median"]
    assert f"<td>{sigma:.2e}</td>" in html_page and f"| {sigma:.2e} |" in page
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []   # no scratch
    again = run_command(tmp_path, ["study", "study.toml", "--campaigns", "2", "--out", "st"])
    assert again.exit_code != 0 and len(again.stderr.strip().splitlines()) == 1
    assert "--overwrite" in again.stderr


@pytest.mark.parametrize("args, needle", [
    (["--vary", "speed=1"], "--vary"),
    (["--engine", "dask"], "--scheduler"),
    (["--campaigns", "1"], "--campaigns"),
    (["--inject-sigma", "2", "--mode", "null"], "--inject-sigma"),
])
def test_command_bad_options_are_one_line(scenario, tmp_path, args, needle):
    r = run_command(tmp_path, ["study", "study.toml", "--out", "o"] + args)
    assert r.exit_code == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and needle in lines[0], r.stderr
    assert not (tmp_path / "o").exists()
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


def test_command_missing_scenario(tmp_path):
    r = run_command(tmp_path, ["study", "none.toml", "--out", "o"])
    assert r.exit_code == 2 and len(r.stderr.strip().splitlines()) == 1
    assert "none.toml" in r.stderr


def test_coverage_numbers_are_finite(scenario):
    a = run_study(scenario, settings())
    for c in a["rows"][0]["coefficients"].values():
        assert math.isfinite(c["pull_std"]["value"]) and c["sigma_median"] > 0


def test_command_on_a_dask_cluster_and_an_unreachable_scheduler(scenario, tmp_path):
    distributed = pytest.importorskip("distributed")
    args = ["study", "study.toml", "--campaigns", "2", "--seed", "3", "--free", ",".join(FREE)]
    local = run_command(tmp_path, args + ["--workers", "1", "--out", "here"])
    cluster = distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                                       dashboard_address=":0", scheduler_port=0)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DeprecationWarning)
            remote = run_command(tmp_path, args + ["--engine", "dask", "--scheduler",
                                                   cluster.scheduler_address, "--out", "there"])
    finally:
        cluster.close()
    assert local.exit_code == 0 and remote.exit_code == 0, remote.stderr
    a, b = (json.loads((tmp_path / d / "study.json").read_text(encoding="utf-8"))
            for d in ("here", "there"))
    assert strip_times(a) == strip_times(b)
    t0 = time.monotonic()
    r = run_command(tmp_path, args + ["--engine", "dask", "--scheduler", "tcp://127.0.0.1:9",
                                      "--out", "nowhere"])
    assert time.monotonic() - t0 < 60         # the connection timeout is 10 s
    lines = r.stderr.strip().splitlines()
    assert r.exit_code == 2 and len(lines) == 1 and "--scheduler ADDRESS" in lines[0], r.stderr
    assert not (tmp_path / "nowhere").exists()


# == campaigns fitted in threads of one process ==================================================

def test_campaigns_in_threads_keep_their_own_warnings(tmp_path):
    """A dask worker with several threads fits campaigns side by side: each record lists the
    warnings of its own fit (read from the result), not those of the fit beside it."""
    import tomllib

    from fringe.study.campaign import fit_record, simulate_run

    doc = tomllib.loads(SCENARIO)
    old = tomllib.loads(SCENARIO.replace("2027-02-03", "1955-02-03"))   # UTC before 1960
    paths = {"new": str(tmp_path / "new.h5"), "old": str(tmp_path / "old.h5")}
    simulate_run(doc, "new.toml", paths["new"], seed=3)
    with pytest.warns(errors.TimeScaleWarning):
        simulate_run(old, "old.toml", paths["old"], seed=3)
    fit = FitSettings(free=FREE)
    alone = {k: fit_record(p, fit)["warnings"] for k, p in paths.items()}
    assert any(w.startswith("utc-before-1960") for w in alone["old"])
    assert not any(w.startswith("utc-before-1960") for w in alone["new"])

    side_by_side: dict = {}
    start = threading.Barrier(2)

    def one(key):
        start.wait()
        side_by_side[key] = fit_record(paths[key], fit)["warnings"]

    threads = [threading.Thread(target=one, args=(k,)) for k in paths]
    with warnings.catch_warnings():     # the threads' fits show their warnings: not errors
        warnings.simplefilter("ignore")
        for t in threads:
            t.start()
        for t in threads:
            t.join()
    assert side_by_side == alone
