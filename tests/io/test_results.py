"""The result records: the fit result's one validating reader (every kind of bad field named
with its file), version-1 files, warnings as records, frozen objects, the turns file's one
reader; and library errors that name fields while the command line names its options."""

from __future__ import annotations

import ast
import copy
import dataclasses
import json
import math
import pickle
import re
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from fringe.cli import main
from fringe.cli.common import OPTION_SPELLING, as_options
from fringe.errors import ConfigError, FitError, InputFileError, OutputError
from fringe.fit.run import fit_run
from fringe.fit.settings import FitSettings
from fringe.io.atomic import write_text_atomic
from fringe.io.fit_result import FORMAT_VERSION, FitResult, read_fit_result
from fringe.io.fit_sections import Estimate, FitWarning
from fringe.io.records import FrozenMap
from fringe.io.turns_file import read_accepted_turns, read_turns, write_turns
from tests.helpers.runs import simulate_run

DATA = Path(__file__).resolve().parents[1] / "data"
EXAMPLE = json.loads((DATA / "fit_example.json").read_text("utf-8"))   # format version 1


def _v2(d: dict) -> dict:
    """The example as a version-2 file (warnings as records)."""
    d = copy.deepcopy(d)
    d["fringe_format_version"] = 2
    d["warnings"] = [{"code": "unnamed", "message": w, "values": {}} for w in d["warnings"]]
    return d


def _set(d: dict, dotted: str, value) -> dict:
    """A copy of ``d`` with the field at ``dotted`` (a.b.c; "-" deletes) replaced."""
    d = copy.deepcopy(d)
    *parents, last = dotted.split(".")
    node = d
    for p in parents:
        node = node[int(p)] if isinstance(node, list) else node[p]
    if value == "-":
        del node[last]
    elif isinstance(node, list):
        node[int(last)] = value
    else:
        node[last] = value
    return d


# ------------------------------------------------------------------ from_dict refuses, naming

BAD_FIELDS = [
    # (field, new value, version 1 or 2, expected text after "PATH: ")
    ("fringe_format", "run", 1, "fringe_format: expected 'fit' (a result of fringe fit), "
                                "got 'run'"),
    ("fringe_format_version", 4, 1, "fringe_format_version: expected 1, 2 or 3, got 4"),
    ("fringe_format_version", True, 1, "fringe_format_version: expected 1, 2 or 3, got True"),
    ("colour", "blue", 1, "colour: unknown field (expected only fringe_format"),
    ("theory", "", 1, "theory: expected a non-empty string, got ''"),
    ("units", "-", 1, "units: missing; expected a non-empty string"),
    ("coefficients", {}, 1, "coefficients: expected a non-empty object {NAME: {value, sigma}}"),
    ("coefficients.ke_XY", 1e-17, 1, "coefficients.ke_XY: expected a JSON object, got 1e-17"),
    ("coefficients.ke_XY.value", "1e-17", 1,
     "coefficients.ke_XY.value: expected a finite number, got '1e-17'"),
    ("coefficients.ke_XY.value", None, 1, "coefficients.ke_XY.value: expected a finite number"),
    ("coefficients.ke_XY.sigma", -1.0, 1, "coefficients.ke_XY.sigma: expected a number >= 0, "
                                          "got -1.0"),
    ("coefficients.ke_XY.error", 0.1, 1, "coefficients.ke_XY.error: unknown field (expected "
                                         "only value, sigma)"),
    ("fixed.ktr", "zero", 1, "fixed.ktr: expected a finite number, got 'zero'"),
    ("covariance.names", ["ke_XY"], 1, "covariance.names: expected the names of the free "
                                       "coefficients"),
    ("covariance.matrix", [[1.0]], 1, "covariance.matrix: expected a 5x5 matrix of finite "
                                      "numbers"),
    ("harmonics.value", [0.0], 1, "harmonics.value: expected a list of finite numbers of "
                                  "length 10"),
    ("harmonics.sigma.2", -1.0, 1, "harmonics.sigma[2]: expected a number >= 0, got -1.0"),
    ("harmonics.units", 5, 1, "harmonics.units: expected a non-empty string, got 5"),
    ("warnings", "none", 1, "warnings: expected a list, got 'none'"),
    ("warnings.0", 7, 1, "warnings[0]: expected a string (version-1 warning), got 7"),
    ("warnings.0", "plain text", 2, "warnings[0]: expected a JSON object, got 'plain text'"),
    ("warnings.0.code", "-", 2, "warnings[0].code: missing; expected a non-empty string"),
    ("warnings.0.values", {"n_sigma": "5"}, 2, "warnings[0].values.n_sigma: expected a finite "
                                               "number or null"),
    ("efficiency.ke_XY", "high", 1, "efficiency.ke_XY: expected a finite number or null"),
    ("statistics.dof", 3741.5, 1, "statistics.dof: expected an integer >= 0, got 3741.5"),
    ("statistics.uncertainty", "-", 1, "statistics.uncertainty: missing"),
    ("stage1.n_blocks", 10, 1, "stage1.n_blocks: expected at least the sum of the counts "
                               "(1939), got 10"),
    ("stage1.n_rejected_glitch", -1, 1, "stage1.n_rejected_glitch: expected an integer >= 0"),
    ("stage1.turn_period_s", 0.0, 1, "stage1.turn_period_s: expected a positive number"),
    ("stage1.n_accepted", "-", 1, "stage1.n_accepted: missing"),
    ("stage1.speed", 1.0, 1, "stage1.speed: unknown field"),
    ("site", "cellar", 1, "site: expected a JSON object, got 'cellar'"),
    ("site.name", 3, 1, "site.name: expected a string, got 3"),
    ("site.latitude_deg", "47N", 1, "site.latitude_deg: expected a finite number"),
    ("apparatus.kind", "", 1, "apparatus.kind: expected a non-empty string"),
    ("epoch_utc", 2031, 1, "epoch_utc: expected a non-empty string, got 2031"),
    ("span_s", -1.0, 1, "span_s: expected a number >= 0, got -1.0"),
    ("settings", [], 1, "settings: expected a JSON object, got []"),
    ("input.sha256", "-", 1, "input.sha256: missing; expected a non-empty string"),
    ("input.n_samples", -4, 1, "input.n_samples: expected an integer >= 0, got -4"),
    ("software.numpy", 2, 1, "software.numpy: expected a string, got 2"),
    ("amplitudes_file", 3, 1, "amplitudes_file: expected a file name relative to the JSON "
                              "file, got 3"),
    ("notes", "one note", 1, "notes: expected a list of strings, got 'one note'"),
    ("nuisance.lab_B0.sigma", "x", 1, "nuisance.lab_B0.sigma: expected a finite number or "
                                      "null"),
    ("upper_limits", {"speed_kms_95": "fast"}, 1, "upper_limits.speed_kms_95: expected a "
                                                  "finite number or null"),
    ("one_stage", {"coefficients": {"ke_XY": {"value": 0.0, "sigma": 1.0}}}, 1,
     "one_stage.nuisance: missing; expected a JSON object"),
    ("conventions.beat", None, 1, "conventions.beat: expected a string, got None"),
]


@pytest.mark.parametrize(("field", "value", "version", "expected"), BAD_FIELDS,
                         ids=[f"{c[0]}={c[1]!r}"[:40] for c in BAD_FIELDS])
def test_from_dict_names_the_file_and_the_bad_field(tmp_path, field, value, version,
                                                    expected):
    doc = _set(EXAMPLE if version == 1 else _v2(EXAMPLE), field, value)
    path = tmp_path / "bad.json"
    path.write_text(json.dumps(doc), "utf-8")
    before = path.read_bytes()
    with pytest.raises(InputFileError) as info:
        read_fit_result(path)
    message = str(info.value)
    assert message.startswith(f"{path}: {expected}"), message
    assert "\n" not in message
    assert path.read_bytes() == before                    # the input is only read
    with pytest.raises(InputFileError, match=re.escape(expected)) as info:
        FitResult.from_dict(doc)                          # without a file: "fit result: ..."
    assert str(info.value).startswith("fit result: ")


@pytest.mark.parametrize(("text", "expected"), [
    ("[1, 2]", "top level: expected a JSON object, got [1, 2]"),
    ("{\"fringe_format\": ", "JSON: expected valid JSON"),
])
def test_read_fit_result_refuses_non_objects_and_bad_json(tmp_path, text, expected):
    path = tmp_path / "x.json"
    path.write_text(text, "utf-8")
    with pytest.raises(InputFileError, match=re.escape(f"{path}: {expected}")):
        read_fit_result(path)
    with pytest.raises(InputFileError, match="file: not found; expected a fit result"):
        read_fit_result(tmp_path / "missing.json")


def test_covariance_is_reordered_to_the_coefficients():
    doc = copy.deepcopy(EXAMPLE)
    order = [4, 0, 3, 1, 2]
    cov = doc["covariance"]
    doc["covariance"] = {"names": [cov["names"][i] for i in order],
                         "matrix": [[cov["matrix"][i][j] for j in order] for i in order]}
    assert FitResult.from_dict(doc).covariance == FitResult.from_dict(EXAMPLE).covariance


# ------------------------------------------------------------------------- version 1, warnings

def test_version_1_file_reads_with_unnamed_warnings():
    res = FitResult.from_dict(EXAMPLE)
    assert [w.code for w in res.warnings] == ["unnamed"] * 3
    assert [w.sentence for w in res.warnings] == EXAMPLE["warnings"]
    assert [str(w) for w in res.warnings] == EXAMPLE["warnings"]
    assert all(w.values == {} for w in res.warnings)
    out = res.to_dict()
    assert out["fringe_format_version"] == FORMAT_VERSION == 3
    assert out["warnings"][0] == {"code": "unnamed", "message": EXAMPLE["warnings"][0],
                                  "values": {}}
    # everything but the version and the warnings is written back as read
    for key in EXAMPLE:
        if key not in ("fringe_format_version", "warnings"):
            assert out[key] == EXAMPLE[key], key
    assert FitResult.from_dict(json.loads(json.dumps(out))) == res


def test_warning_records_round_trip():
    warning = FitWarning("b0-lab-fixed", "B0 = 7.3e-03 ± 1.4e-03 Hz is inconsistent with zero "
                         "(5.2 sigma)", {"B0": 7.317409011045276e-03,
                                         "sigma": 1.4072015156757728e-03,
                                         "n_sigma": math.nan})
    res = dataclasses.replace(FitResult.from_dict(EXAMPLE), warnings=(warning,))
    d = json.loads(json.dumps(res.to_dict(), allow_nan=False))
    assert d["warnings"] == [{"code": "b0-lab-fixed", "message": warning.sentence,
                              "values": {"B0": 7.317409011045276e-03,
                                         "sigma": 1.4072015156757728e-03, "n_sigma": None}}]
    back = FitResult.from_dict(d).warnings[0]
    assert (back.code, back.sentence) == (warning.code, warning.sentence)
    assert back.values["B0"] == warning.values["B0"]              # exactly, unrounded
    assert math.isnan(back.values["n_sigma"])                     # null is a non-finite value
    assert "WARNING: B0 = 7.3e-03" in res.summary()


# --------------------------------------------------------------------------------- frozen

def test_fit_result_and_its_parts_refuse_assignment():
    res = FitResult.from_dict(EXAMPLE)
    with pytest.raises(dataclasses.FrozenInstanceError):
        res.theory = "rms"
    with pytest.raises(dataclasses.FrozenInstanceError):
        res.coefficients["ke_XY"].value = 0.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        res.stage1.n_blocks = 0
    with pytest.raises(dataclasses.FrozenInstanceError):
        res.warnings[0].code = "other"
    with pytest.raises(TypeError):
        res.coefficients["ke_XY"] = Estimate(0.0, 1.0)
    with pytest.raises(TypeError):
        res.site["name"] = "elsewhere"
    with pytest.raises(TypeError):
        res.covariance.matrix[0][0] = 0.0                          # tuples of rows
    assert isinstance(res.settings["free"], tuple)                 # nested lists frozen too
    # a changed copy leaves the original as it was
    other = dataclasses.replace(res, amplitudes_file="")
    assert other.amplitudes_file == "" and res.amplitudes_file == EXAMPLE["amplitudes_file"]
    assert pickle.loads(pickle.dumps(res)) == res


def test_views_of_the_fit_result():
    res = FitResult.from_dict(EXAMPLE)
    text = repr(res)
    assert text.startswith("FitResult(theory='sme', units='Hz', free=['ke_XY'")
    assert "turns=1874/1939 accepted" in text and "warnings=['unnamed'" in text
    assert "ke_XXmYY" in res.summary() and "1874 accepted of 1939" in res.summary()
    assert res.stage1.n_accepted == 1874 and res.stage1.n_rejected_partial == 25
    np.testing.assert_allclose(np.diag(res.correlation()), 1.0, rtol=1e-15)
    assert isinstance(res.coefficients, FrozenMap) and dict(res.coefficients)


# ------------------------------------------------------------------------- the turns file

def _turns(n=8):
    t = np.arange(n) * 60.0
    return {"t_mid_s": t, "phi_rad": t * 7.29e-5, "C": np.ones(n), "B": np.zeros(n),
            "sigma_C": np.full(n, 0.1), "sigma_B": np.full(n, 0.1),
            "accepted": np.array([1] * (n - 1) + [0], np.int8),
            "status": np.array([0] * (n - 1) + [2], np.int8),
            "model_C": np.ones(n), "model_B": np.zeros(n)}


def test_turns_file_one_reader(tmp_path):
    path = tmp_path / "t.turns.h5"
    write_turns(path, units="Hz", epoch_utc="2027-02-03T00:00:00Z", columns=_turns())
    got = read_turns(path)
    assert got["units"] == "Hz" and got["epoch_utc"] == "2027-02-03T00:00:00Z"
    assert got["status"].dtype == np.int8 and got["C"].size == 8
    acc = read_accepted_turns(path)
    assert acc["n_turns"] == 8 and acc["n_rejected"] == 1 and acc["C"].size == 7
    assert acc["turn_period_s"] == 60.0                       # the median spacing
    assert read_accepted_turns(path, turn_period_s=45.0)["turn_period_s"] == 45.0


def test_turns_file_in_memory_and_streamed_alike(tmp_path, monkeypatch):
    # a small table is laid out in memory and written at once, a long one streamed through
    # the guard: the reader sees the same columns, types and attributes either way
    import fringe.io.turns_file as turns_file

    columns = _turns(50)
    small, long = tmp_path / "small.turns.h5", tmp_path / "long.turns.h5"
    write_turns(small, units="Hz", epoch_utc="2027-02-03T00:00:00Z", columns=columns)
    monkeypatch.setattr(turns_file, "IN_MEMORY_TURNS", 10)
    write_turns(long, units="Hz", epoch_utc="2027-02-03T00:00:00Z", columns=columns)
    a, b = read_turns(small), read_turns(long)
    assert a.keys() == b.keys()
    for name, value in a.items():
        if isinstance(value, np.ndarray):
            assert value.dtype == b[name].dtype and np.array_equal(value, b[name]), name
        else:
            assert value == b[name], name
    assert not [p for p in tmp_path.iterdir() if p.name not in ("small.turns.h5",
                                                                "long.turns.h5")]


@pytest.mark.parametrize(("edit", "expected"), [
    (lambda c: c.pop("model_C"), "turns/model_C: expected a 1-D numeric dataset"),
    (lambda c: c.update(B=np.zeros(5)), "turns/B: expected 8 values (one per turn), got 5"),
    (lambda c: c.update(accepted=np.zeros(8, np.int8)),
     "turns/accepted: expected at least 4 accepted turns, got 0"),
    (lambda c: c.update(sigma_B=np.zeros(8)), "turns/sigma_B: expected positive values"),
    (lambda c: c["C"].__setitem__(0, np.nan), "turns/C: expected finite values on accepted"),
])
def test_turns_file_refuses_bad_columns(tmp_path, edit, expected):
    columns = _turns()
    edit(columns)
    path = tmp_path / "t.turns.h5"
    write_turns(path, units="Hz", epoch_utc="2027-02-03T00:00:00Z", columns=columns)
    with pytest.raises(InputFileError, match=re.escape(f"{path}: {expected}")):
        read_accepted_turns(path)


def test_turns_file_refuses_other_files(tmp_path):
    junk = tmp_path / "junk.h5"
    junk.write_bytes(b"not hdf5")
    with pytest.raises(InputFileError, match="junk.h5: file: expected a readable HDF5 file"):
        read_turns(junk)
    with pytest.raises(InputFileError, match="file: not found; expected a per-turn"):
        read_turns(tmp_path / "missing.h5")


# ------------------------------------------- errors: the library names fields, the CLI options

@pytest.fixture(scope="module")
def short_run(tmp_path_factory):
    """Half a day of 1 s samples, 45 s turns, white noise (too short for a bootstrap)."""
    path, *_ = simulate_run(tmp_path_factory.mktemp("short") / "run.h5", seed=5, days=0.5,
                            coefficients={"ke_XY": 1e-16},
                            noise={"white_fm_adev_1s": 1e-15})
    return path


def test_fit_result_from_a_fit_and_its_columns(short_run):
    res, columns = fit_run(short_run, FitSettings(free=("ke_XY", "ke_XXmYY")))
    with columns:
        text = repr(columns)
        assert text == (f"TurnColumns({len(columns)} turns, {res.stage1.n_accepted} accepted, "
                        f"span {res.span_s / 86400:.3g} d, units 'Hz')")
    d = json.loads(json.dumps(res.to_dict()))
    assert FitResult.from_dict(d).to_dict() == d                  # what fit writes, it reads
    assert list(d["stage1"])[:4] == ["n_blocks", "n_accepted", "n_rejected_partial",
                                     "n_rejected_glitch"]


CASES = [
    # (FitSettings keywords, CLI options, library text, command text)
    ({"free": ("ke_XY", "ke_QQ")}, ["--free", "ke_XY,ke_QQ"], "FitSettings.free", "--free"),
    ({"fixed": {"ke_QQ": 0.0}}, ["--fix", "ke_QQ=0"], "FitSettings.fixed", "--fix"),
    ({"lab_c0": True}, ["--lab-c0"],
     "FitSettings.lab_c0: a constant C offset is degenerate with ke_ZZ; fix ke_ZZ or drop "
     "FitSettings.lab_c0",
     "--lab-c0: a constant C offset is degenerate with ke_ZZ; fix ke_ZZ or drop --lab-c0"),
    ({"uncertainty": "bootstrap"}, ["--uncertainty", "bootstrap"],
     "FitSettings.uncertainty bootstrap: only 1 blocks of 1.0 d; need at least 5 (shorter "
     "FitSettings.bootstrap_days)",
     "--uncertainty bootstrap: only 1 blocks of 1.0 d; need at least 5 (shorter "
     "--bootstrap-days)"),
    ({"regress": ("tilt",)}, ["--regress", "tilt"], "FitSettings.regress tilt:",
     "--regress tilt:"),
]


@pytest.mark.parametrize(("settings", "options", "library", "command"), CASES,
                         ids=[c[1][0] for c in CASES])
def test_library_names_the_field_and_the_command_its_option(short_run, tmp_path, settings,
                                                             options, library, command):
    with pytest.raises((ConfigError, FitError)) as info:
        fit_run(short_run, FitSettings(**settings))
    assert library in str(info.value) and " --" not in str(info.value)
    got = CliRunner().invoke(main, ["fit", short_run, "--out", str(tmp_path / "f.json"),
                                    *options])
    assert got.exit_code == 2
    lines = got.stderr.strip().splitlines()
    assert len(lines) == 1 and command in lines[0] and "FitSettings" not in lines[0], lines


def test_overwrite_is_a_keyword_for_python_and_an_option_for_the_command(tmp_path):
    target = tmp_path / "a.txt"
    write_text_atomic(target, "first\n")
    with pytest.raises(OutputError, match=r"exists \(pass overwrite=True to replace it\)"):
        write_text_atomic(target, "second\n")
    assert as_options(f"{target}: exists (pass overwrite=True to replace it)") == \
        f"{target}: exists (pass --overwrite to replace it)"


def test_option_spelling_leaves_paths_and_longer_names_alone():
    assert as_options("/data/kt/is_/scratch_dir=DIR/x.h5: scratch directory: expected a "
                      "writable directory; choose another with scratch_dir=DIR") == \
        ("/data/kt/is_/scratch_dir=DIR/x.h5: scratch directory: expected a writable "
         "directory; choose another with --scratch-dir DIR")
    assert as_options("engine='dask': needs scheduler=ADDRESS (e.g. tcp://host:8786)") == \
        "--engine dask: needs --scheduler ADDRESS (e.g. tcp://host:8786)"
    assert as_options("MyFitSettings.free_extra: x") == "MyFitSettings.free_extra: x"
    assert as_options("kt/is_: both") == "--kt/--is: both"
    assert len({a for a, _ in OPTION_SPELLING}) == len(OPTION_SPELLING)


def _raised_texts(tree: ast.AST):
    """The string constants inside every ``raise X(...)`` of a module."""
    for node in ast.walk(tree):
        if isinstance(node, ast.Raise) and node.exc is not None:
            for sub in ast.walk(node.exc):
                if isinstance(sub, ast.Constant) and isinstance(sub.value, str):
                    yield node.lineno, sub.value


def test_library_errors_quote_no_command_line_option():
    """Outside fringe/cli, no error message quotes an option such as --free: a Python caller
    passed a field or keyword, and only the command line maps those to its options."""
    package = Path(__file__).resolve().parents[2] / "fringe"
    found = []
    for path in sorted(package.rglob("*.py")):
        if "cli" in path.relative_to(package).parts:
            continue
        for line, text in _raised_texts(ast.parse(path.read_text("utf-8"))):
            if re.search(r"(?<![\w-])--[a-z]", text):
                found.append(f"{path.relative_to(package)}:{line}: {text!r}")
    assert not found, found
    assert list(_raised_texts(ast.parse("raise ValueError('--free: x')")))    # the walker works


def test_harmonics_state_their_observable_and_two_path_factor():
    """The harmonics record says what was fitted and its factor f to the two-path harmonics
    (C9); both round-trip, and a file without them (version 1) still reads."""
    d = _v2(EXAMPLE)
    d["harmonics"]["observable"] = "michelson fringe count (invented test value)"
    d["harmonics"]["two_path_factor"] = [-3.5e7, 0.0]
    h = FitResult.from_dict(d, source="test").harmonics
    assert h.observable.startswith("michelson") and h.two_path_factor == (-3.5e7, 0.0)
    again = FitResult.from_dict(json.loads(json.dumps(FitResult.from_dict(d).to_dict())))
    assert again.harmonics.two_path_factor == (-3.5e7, 0.0)
    assert FitResult.from_dict(EXAMPLE).harmonics.two_path_factor is None
    with pytest.raises(InputFileError, match="harmonics.two_path_factor"):
        FitResult.from_dict(_set(copy.deepcopy(d), "harmonics.two_path_factor", [1.0]),
                            source="test")


def test_fit_states_the_factor_of_its_apparatus(tmp_path):
    """A Michelson fit labels its harmonics with the fringe count and f = -2L/lambda
    ([R-SME-two-path]); the report's caption states both."""
    from fringe.report.tables import harmonics_caption

    app = {"kind": "michelson", "arm_length_m": 2.0, "wavelength_m": 633e-9}
    path, *_ = simulate_run(tmp_path / "m.h5", seed=2, days=0.25, interval_s=2.0,
                            period_s=60.0, apparatus=dict(app, units="fringe"))
    res, _ = fit_run(path, FitSettings(free=("ke_XY", "ke_XXmYY")))
    assert res.harmonics.observable.startswith("michelson fringe count")
    assert res.harmonics.two_path_factor == pytest.approx((-2 * 2.0 / 633e-9, 0.0), rel=1e-12)
    caption = harmonics_caption(res)
    assert "michelson fringe count" in caption and "f = -6.31912e+06" in caption
