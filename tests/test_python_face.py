"""The Python face: ``import fringe`` offers the whole job, and docs/python.md runs as written."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

import fringe

ROOT = Path(__file__).resolve().parents[1]


def test_the_face_lists_the_whole_job():
    for name in ("load_scenario", "predict", "simulate", "read_run", "fit_record", "load_fit",
                 "write_report", "forecast", "run_study"):
        func = getattr(fringe, name)
        assert callable(func) and func.__doc__ and "Parameters" in func.__doc__, name
    assert set(fringe.__all__) >= {"fit_record", "forecast", "__version__"}


def test_fit_record_refuses_an_unknown_option(tmp_path):
    from fringe.errors import ConfigError

    with pytest.raises(ConfigError, match="unknown option 'bootstrap_dayz'"):
        fringe.fit_record(tmp_path / "absent.h5", bootstrap_dayz=2.0)


def test_python_md_session_runs(tmp_path, monkeypatch, capsys):
    """Every ```python block of docs/python.md, in order, in a fresh folder."""
    text = (ROOT / "docs" / "python.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```python\n(.*?)```", text, re.S)
    assert len(blocks) >= 5
    (tmp_path / "examples").symlink_to(ROOT / "examples")
    monkeypatch.chdir(tmp_path)
    namespace: dict = {}
    exec(compile("\n".join(blocks), "docs/python.md", "exec"), namespace)
    out = capsys.readouterr().out
    assert "report.html" in out and "1-sigma forecast" in out
    result = namespace["result"]
    assert result.theory == "sme"
    assert (tmp_path / "session" / "fit.json").is_file()
    assert (tmp_path / "session" / "report" / "report.md").is_file()


def test_study_runs_campaigns_and_refuses_an_unknown_option(tmp_path):
    from fringe.errors import ConfigError
    from tests.study.test_study import FREE, SCENARIO

    path = tmp_path / "study.toml"
    path.write_text(SCENARIO, encoding="utf-8")
    with pytest.raises(ConfigError, match="unknown option 'inject_sigmaa'"):
        fringe.run_study(path, inject_sigmaa=1.0)
    result = fringe.run_study(path, campaigns=2, seed=5, free=FREE, workers=1)
    assert result["master_seed"] == 5 and result["fit"]["free"] == list(FREE)
    assert result["rows"][0]["n_campaigns"] == 2
    assert set(result["rows"][0]["coefficients"]) == set(FREE)
