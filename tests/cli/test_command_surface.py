"""What a user meets first: option help, one-line mistakes, -v/-q, progress, printed tables.

Every option of every command has help with its default; the common mistakes (a wrong path, a
typo in a field or section, an existing output, an unknown option, a value out of range) give one
line on stderr that names the fix, and a non-zero exit; -v/-q work after the command too; the
progress bar is drawn on a terminal only; the plan's tables merge rows that print the same; the
printed tables keep their columns apart whatever the magnitudes.
"""

from __future__ import annotations

import io
import logging
import re
import shutil
from pathlib import Path
from types import SimpleNamespace

import click
import pytest
from click.testing import CliRunner

from fringe.cli import common, main
from fringe.cli.fit import FAR_SIGMA, significance_lines
from fringe.cli.inspection import OUTPUTS as INSPECT_OUTPUTS
from fringe.errors import nearest_name, unknown_name
from fringe.plan.forecast import _period_grid
from fringe.plan.result import collapsed_rows
from fringe.text_table import number, text_table

EXAMPLES = Path(__file__).resolve().parents[2] / "examples"
SCENARIO = EXAMPLES / "cavity_pair.toml"


def _commands():
    ctx = click.Context(main)
    return [("(group)", main)] + [(name, main.get_command(ctx, name))
                                  for name in main.list_commands(ctx)]


def _invoke(args, cwd=None):
    return CliRunner().invoke(main, [str(a) for a in args])


def _short(tmp_path, text=None, days=0.05):
    """examples/cavity_pair.toml, shortened to ``days`` and with white noise, in tmp_path."""
    text = (text or SCENARIO.read_text("utf-8")).replace("duration_days = 2.0",
                                                          f"duration_days = {days}")
    p = tmp_path / "sc.toml"
    p.write_text(text + "\n[noise]\nwhite_fm_adev_1s = 1e-15\n", "utf-8")
    return p


# -- help ------------------------------------------------------------------------------------
@pytest.mark.parametrize("name,command", _commands(), ids=[n for n, _ in _commands()])
def test_every_option_has_help_and_its_default(name, command):
    for param in command.params:
        if not isinstance(param, click.Option):
            continue
        opt = max(param.opts, key=len)
        assert param.help and len(param.help) > 10, f"fringe {name} {opt}: no help"
        # a flag's default is off and a required option has none; any other option shows
        # its default or says it in words
        if not (param.is_flag or param.count or param.required):
            assert param.show_default or "[default:" in param.help, \
                f"fringe {name} {opt}: the help shows no default"


@pytest.mark.parametrize("name,command", _commands(), ids=[n for n, _ in _commands()])
def test_out_says_whether_it_is_a_file_or_a_directory(name, command):
    outs = [p for p in command.params if "--out" in getattr(p, "opts", ())]
    for p in outs:
        kind = p.metavar
        assert kind in ("FILE", "DIR"), f"fringe {name} --out: metavar {kind!r}"
        word = "file" if kind == "FILE" else "Directory"
        assert word.lower() in p.help.lower(), f"fringe {name} --out: help does not say {word}"


def test_group_help_lists_quiet_and_verbose():
    res = _invoke(["--help"])
    assert res.exit_code == 0 and "--quiet" in res.output and "--verbose" in res.output


# -- one-line mistakes -----------------------------------------------------------------------
def _one_line(res, *needles):
    lines = res.stderr.strip().splitlines()
    assert res.exit_code != 0, res.output
    assert len(lines) == 1, res.stderr
    assert lines[0].startswith("error: ") and "Traceback" not in res.stderr
    for needle in needles:
        assert needle in lines[0], lines[0]
    return lines[0]


@pytest.mark.parametrize("args,needles", [
    (["fit", "run.h5", "--out", "f.json", "--max-harmonic", "9"],
     ["error: --max-harmonic: 9 is not in 2..4 (see fringe fit --help)"]),
    (["fit", "run.h5", "--outt", "f.json"],
     ["--outt: no such option of fringe fit; did you mean --out?", "fringe fit --help"]),
    (["fit"], ["RUN_FILE: missing", "fringe fit --help"]),
    (["simulate", "sc.toml"], ["--out: missing", "fringe simulate --help"]),
    (["fitt", "run.h5"], ["fitt: no such command; did you mean fit?"]),
    (["fit", "run.h5", "--out", "f.json", "--theory", "smee"],
     ["--theory: 'smee' is not one of", "did you mean sme?"]),
    (["fit", "run.h5", "--out", "f.json", "--bootstrap-days", "x"],
     ["--bootstrap-days: 'x' is not a number"]),
    (["--verbos", "fit"], ["--verbos: no such option of fringe; did you mean --verbose?"]),
])
def test_usage_errors_are_one_line_with_the_fix(args, needles):
    res = _invoke(args)
    _one_line(res, *needles)
    assert res.exit_code == 2                          # click's status for a usage error
    assert "Usage:" not in res.output


@pytest.mark.parametrize("command,suffix", [
    (["fit", "{missing}", "--out", "{tmp}/f.json"], "h5"),
    (["inspect", "{missing}"], "h5"),
    (["simulate", "{missing}", "--out", "{tmp}/r.h5"], "toml"),
    (["predict", "{missing}", "--out", "{tmp}/p"], "toml"),
    (["plan", "{missing}", "--out", "{tmp}/p"], "toml"),
    (["report", "{missing}", "--out", "{tmp}/r"], "json"),
])
def test_a_wrong_path_names_the_file_and_the_fix(tmp_path, command, suffix):
    missing = tmp_path / f"nothere.{suffix}"
    args = [a.format(missing=missing, tmp=tmp_path) for a in command]
    _one_line(_invoke(args), f"{missing}: file: not found; expected ", "check the path")
    assert not list(tmp_path.iterdir())                # nothing written


@pytest.mark.parametrize("edit,needles", [
    (("height_m", "heigth_m"),
     ["[site] heigth_m: unknown field; did you mean height_m? (known: height_m, "]),
    (("[turntable]", "[turntabel]"),
     ["[turntabel]: unknown section; did you mean [turntable]?", "[noise]"]),
    (("sample_interval_s", "sample_intervall_s"),
     ["[campaign] sample_intervall_s: unknown field; did you mean sample_interval_s?"]),
    (("carrier_hz", "carier_hz"),
     ["[apparatus] carier_hz: unknown field of kind 'cavity-pair'; did you mean carrier_hz?"]),
    (('motion = "continuous"', 'motion = "continous"'),
     ["[turntable] motion: continous: unknown motion; did you mean continuous?"]),
    (("ke_XY = 1e-17", "ke_XQ = 1e-17"),
     ["ke_XQ: unknown coefficient of theory 'sme'; did you mean ke_XZ?"]),
    (("latitude_deg = 47.62", ""), ["[site] latitude_deg: missing"]),
    (("period_s = 45.0", 'period_s = "fast"'),
     ["[turntable] period_s: expected a number, got 'fast'"]),
])
def test_a_typo_in_the_scenario_names_the_nearest_field(tmp_path, edit, needles):
    sc = _short(tmp_path, SCENARIO.read_text("utf-8").replace(*edit, 1))
    before = sc.read_bytes()
    line = _one_line(_invoke(["predict", sc, "--out", tmp_path / "p"]), *needles)
    assert "__init__" not in line and "TypeError" not in line
    assert sc.read_bytes() == before and not (tmp_path / "p").exists()


def test_a_typo_in_a_name_on_the_command_line_names_the_nearest(tmp_path):
    sc = _short(tmp_path)
    _one_line(_invoke(["predict", sc, "--set", "ke_QX=1e-17", "--out", tmp_path / "p"]),
              "--set: ke_QX: unknown coefficient of theory 'sme'", "(known: ke_XY, ")
    _one_line(_invoke(["plan", sc, "--free", "ke_XY,ke_XQ", "--out", tmp_path / "q"]),
              "--free: ke_XQ: unknown coefficient of theory 'sme'; did you mean ke_XZ?")


def test_a_typo_in_the_import_metadata_names_the_nearest_section(tmp_path):
    meta = tmp_path / "meta.toml"
    meta.write_text('[unit]\ntime = "s"\n', "utf-8")
    csv = tmp_path / "data.csv"
    csv.write_text("t,az,beat\n0,0,0\n", "utf-8")
    _one_line(_invoke(["import", csv, "--meta", meta, "--out", tmp_path / "r.h5"]),
              f"{meta}: unit: unknown section; did you mean units? (known: ")


def test_text_that_is_not_utf8_is_one_line_without_codec_words(tmp_path):
    sc = tmp_path / "sc.toml"
    sc.write_bytes(b'title = "\xff"\n')
    line = _one_line(_invoke(["predict", sc, "--out", tmp_path / "p"]),
                     f"{sc}: file: expected UTF-8 text, got byte 0xff at byte offset 9")
    assert "codec" not in line


def test_an_existing_output_reads_the_same_in_every_command(tmp_path):
    sc = _short(tmp_path)
    out = tmp_path / "run.h5"
    assert _invoke(["simulate", sc, "--out", out, "--seed", "1"]).exit_code == 0
    before = out.read_bytes()
    _one_line(_invoke(["simulate", sc, "--out", out, "--seed", "2"]),
              f"{out}: exists (pass --overwrite to replace it)")
    assert out.read_bytes() == before
    (tmp_path / "p").mkdir()
    (tmp_path / "p" / "harmonics.txt").write_text("earlier\n", "utf-8")
    _one_line(_invoke(["predict", sc, "--out", tmp_path / "p", "--no-series"]),
              f"{tmp_path / 'p' / 'harmonics.txt'}: exists (pass --overwrite to replace it)")


def test_unknown_name_wording():
    # the one wording (fringe.errors.unknown_name): nearest first, then every known name
    assert unknown_name("heigth_m", ["name", "height_m"]) == \
        "heigth_m: unknown field; did you mean height_m? (known: height_m, name)"
    assert unknown_name("zzz", ["b", "a"], "section") == "zzz: unknown section (known: a, b)"
    assert nearest_name("KE_XY", ["ke_XY", "ke_XZ"]) == "ke_XY"       # a difference of case
    assert nearest_name("qqq", ["ke_XY"]) is None


# -- seed, -v and -q after the command -------------------------------------------------------
def test_simulate_without_seed_draws_one_prints_and_records_it(tmp_path):
    from fringe.io.runreader import open_run

    sc = _short(tmp_path)
    res = _invoke(["simulate", sc, "--out", tmp_path / "r.h5"])
    assert res.exit_code == 0, res.output
    seed = int(re.search(r"seed (\d+) \(drawn at random; pass --seed to repeat it\)",
                         res.stdout).group(1))
    with open_run(tmp_path / "r.h5") as run:
        assert run.read_group_attrs("settings")["seed"] == seed
    again = _invoke(["simulate", sc, "--out", tmp_path / "s.h5", "--seed", str(seed)])
    assert again.exit_code == 0
    with open_run(tmp_path / "r.h5") as a, open_run(tmp_path / "s.h5") as b:
        assert (a.read_all()["signal"] == b.read_all()["signal"]).all()   # same seed, same file


@pytest.fixture
def root_level():
    level = logging.getLogger().level
    yield
    logging.getLogger().setLevel(level)
    common.reset_verbosity()


@pytest.mark.parametrize("flags,level,quiet", [
    ([], logging.WARNING, False), (["-v"], logging.INFO, False), (["-vv"], logging.DEBUG, False),
    (["-q"], logging.ERROR, True), (["--verbose"], logging.INFO, False),
    (["--quiet"], logging.ERROR, True)])
@pytest.mark.parametrize("where", ["before", "after"])
def test_verbose_and_quiet_before_or_after_the_command(tmp_path, root_level, flags, level,
                                                        quiet, where):
    sc = _short(tmp_path)
    args = ["predict", str(sc), "--out", str(tmp_path / "p"), "--no-series"]
    res = _invoke(flags + args if where == "before" else args + flags)
    assert res.exit_code == 0, res.output
    assert logging.getLogger().level == level
    assert common.quiet() is quiet


def test_a_later_invocation_starts_from_the_default_verbosity(tmp_path, root_level):
    sc = _short(tmp_path)
    assert _invoke(["predict", sc, "--out", tmp_path / "a", "--no-series", "-q"]).exit_code == 0
    assert _invoke(["predict", sc, "--out", tmp_path / "b", "--no-series"]).exit_code == 0
    assert logging.getLogger().level == logging.WARNING and not common.quiet()


# -- progress --------------------------------------------------------------------------------
class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_progress_is_not_drawn_under_pytest_or_in_a_pipe(monkeypatch):
    monkeypatch.setattr("sys.stderr", _Terminal())
    with common.progress(10, "job", min_total=0) as bar:      # a terminal, but under pytest
        bar.update(10)
    assert isinstance(bar, common._NoBar)
    monkeypatch.delenv("PYTEST_CURRENT_TEST")
    monkeypatch.setattr("sys.stderr", io.StringIO())           # a pipe
    with common.progress(10, "job", min_total=0) as bar:
        bar.update(10)
    assert isinstance(bar, common._NoBar)


def test_progress_on_a_terminal_draws_a_bar_with_the_time_left(monkeypatch):
    monkeypatch.delenv("PYTEST_CURRENT_TEST")
    term = _Terminal()
    monkeypatch.setattr("sys.stderr", term)
    with common.progress(100, "fit, stage 1", min_total=0) as bar:
        for _ in range(4):
            bar.update(20)
        bar.then("fit, stages 2-3 ...")
    text = term.getvalue()
    assert "fit, stage 1" in text and "%" in text and "fit, stages 2-3 ..." in text
    common.reset_verbosity(quiet=True)                          # -q: no bar on a terminal
    try:
        with common.progress(100, "job", min_total=0) as bar:
            pass
        assert isinstance(bar, common._NoBar)
    finally:
        common.reset_verbosity()


def test_a_short_job_draws_no_bar(monkeypatch):
    monkeypatch.delenv("PYTEST_CURRENT_TEST")
    monkeypatch.setattr("sys.stderr", _Terminal())
    with common.progress(1000, "job") as bar:                  # below min_total
        pass
    assert isinstance(bar, common._NoBar)


# -- fit: far from zero in words -------------------------------------------------------------
def test_a_coefficient_thousands_of_sigma_from_zero_is_said_in_words():
    est = SimpleNamespace
    result = SimpleNamespace(coefficients={"ke_XY": est(value=3.1e-14, sigma=1e-17),
                                           "ke_XZ": est(value=2e-17, sigma=1e-17)})
    lines = significance_lines(result)
    assert len(lines) == 1 and lines[0].startswith("note: ke_XY is 3,100 sigma from zero")
    assert "not as a limit" in lines[0]
    edge = SimpleNamespace(coefficients={"a": est(value=FAR_SIGMA * 0.999, sigma=1.0)})
    assert significance_lines(edge) == []


# -- tables ----------------------------------------------------------------------------------
def test_columns_never_run_together_whatever_the_magnitudes():
    rows = [["0.0", "11622", number(8.25e-08, ".3g"), "23242"],
            ["518040.0", "1", number(-1.234e-123, ".3g"), "2"]]
    lines = text_table(["start [s]", "turns", "sigma B", "dof"], rows, left=0)
    for line in lines[1:]:
        cells = line.split()
        assert len(cells) == 4                      # four columns, each apart from the next
    assert re.search(r"8\.25e-08 +23242", lines[1]) and "  " in lines[1].split("e-08")[1]
    widths = {len(line) for line in lines}
    assert len(widths) == 1                          # right-aligned: every line as long


@pytest.mark.parametrize("x,spec,zero_below,text", [
    (0.0, ".3g", 0.0, "0"), (-0.0, ".3g", 0.0, "0"), (-1e-19, ".2f", 0.0, "0"),
    (2.6e-16, ".3e", 1e-14, "0"), (2.6e-16, ".3e", 0.0, "2.600e-16"),
    (-0.004, ".2f", 0.0, "0"), (float("nan"), ".3g", 0.0, "-"),
    (1.5, ".3g", 0.0, "1.5")])
def test_numerical_zeros_print_as_zero(x, spec, zero_below, text):
    assert number(x, spec, zero_below=zero_below) == text


def test_inspect_writes_what_its_help_promises(tmp_path):
    from tests.helpers.runs import simulate_run

    run, _, _ = simulate_run(tmp_path / "run.h5", seed=3, days=0.05)
    help_text = _invoke(["inspect", "--help"]).output
    res = _invoke(["inspect", run, "--out", tmp_path / "i"])
    assert res.exit_code == 0, res.output
    written = sorted(p.name for p in (tmp_path / "i").iterdir())
    assert written == sorted(INSPECT_OUTPUTS)
    for stem in ("inspect.txt", "inspect.json", "allan.png", "spectrum.png"):
        assert stem in " ".join(help_text.split())
    assert (tmp_path / "i" / "inspect.txt").read_text("utf-8").strip() in res.stdout
    assert "e-" not in res.stdout.split("turn-to-turn period scatter ")[1].split(";")[0]


def test_plan_rows_that_print_the_same_are_merged():
    rows = collapsed_rows(["10", "15", "20", "40", "50"],
                          [["1"], ["1"], ["1"], ["1"], ["2"]], ["", "", "", "<", ""])
    assert rows == [["10-40", "1", "<"], ["50", "2", ""]]
    assert collapsed_rows(["1", "2"], [["a"], ["b"]]) == [["1", "a", ""], ["2", "b", ""]]


@pytest.mark.parametrize("period,tau0", [(40.0, 1.0), (45.0, 1.0), (600.0, 0.5), (3.0, 0.1)])
def test_the_period_grid_is_round(period, tau0):
    grid = _period_grid(period, tau0)
    assert period in grid and list(grid) == sorted(set(grid))
    for p in grid:
        if p == period:
            continue
        mantissa = float(f"{p:.6e}".split("e")[0])
        assert mantissa in (1.0, 1.5, 2.0, 3.0, 5.0, 7.0), p


def test_the_plan_of_the_example_prints_merged_round_rows(tmp_path):
    sc = tmp_path / "plan.toml"
    shutil.copy(EXAMPLES / "plan_cavity_pair.toml", sc)
    res = _invoke(["plan", sc, "--out", tmp_path / "p"])
    assert res.exit_code == 0, res.output
    table = res.stdout.split("sigma versus rotation period")[1].split("\n\n")[0]
    rows = [line.split() for line in table.splitlines()[2:] if line.startswith("  ")
            and not line.startswith("  (") and not line.startswith("  <")]
    sigmas = [r[1:6] for r in rows]
    assert all(a != b for a, b in zip(sigmas, sigmas[1:]))      # no two rows alike
    assert "< marks the scenario's own period, 45 s" in table
    days = [line.split()[0] for line in res.stdout.split("sigma versus campaign length:")[1]
            .split("\n\n")[0].splitlines()[2:]]
    assert all(len(d.replace(".", "")) <= 3 for d in days), days   # round values


def test_plan_monte_carlo_records_its_seed_and_repeats_with_it(tmp_path):
    import json

    sc = _short(tmp_path, days=0.5)
    res = _invoke(["plan", sc, "--out", tmp_path / "a", "--monte-carlo", "4"])
    assert res.exit_code == 0, res.output
    seed = int(re.search(r"seed (\d+) \(drawn at random", res.stdout).group(1))
    first = json.loads((tmp_path / "a" / "plan_check.json").read_text("utf-8"))
    assert first["seed"] == seed and first["check"]["n_campaigns"] == 4
    again = _invoke(["plan", sc, "--out", tmp_path / "b", "--monte-carlo", "4", "--seed",
                     str(seed)])
    assert again.exit_code == 0, again.output
    second = json.loads((tmp_path / "b" / "plan_check.json").read_text("utf-8"))
    assert second == first                                  # same seed, same check
    assert "drawn at random" not in again.stdout
