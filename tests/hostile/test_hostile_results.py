"""Hostile input: property tests of fit result files, read on their own and into a report (all
files under tmp_path; docs/hostile-input.md, item 5).

A result file is hand-edited or damaged, starting from the stored example (version 1 and the
same as version 2): leaves set to values of the wrong kind or of absurd magnitude, sections
replaced by values of the wrong type, names replaced by integers or by text with control
characters or lone surrogates, covariance matrices made asymmetric, indefinite, with
correlations beyond [-1, 1] or a diagonal that disagrees with the sigmas, nesting made deep.
Property: the reader either refuses with one line naming the file, or gives a result every part
of which the report can state (strings printable as one UTF-8 line, numbers finite and of sane
magnitude, correlations in [-1, 1], variances equal to sigma squared), and the report's
documents are then built without an exception.
"""

from __future__ import annotations

import copy
import json
import math
import shutil
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import example, given
from hypothesis import strategies as st

from fringe.cli import main
from fringe.errors import InputFileError
from fringe.io.fit_result import FitResult, read_fit_result
from fringe.io.records import MAX_MAGNITUDE, MIN_MAGNITUDE, check_text
from fringe.report.build import assemble_report
from fringe.report.documents import html_report, latex_report, markdown_report, summary
from fringe.report.latex import numbers_tex
from tests.helpers.hostile import _settings, assert_one_line_naming, digest
from tests.helpers.latex import unbalanced, unknown_commands

DATA = Path(__file__).resolve().parents[1] / "data"
EXAMPLE = json.loads((DATA / "fit_example.json").read_text("utf-8"))   # format version 1


def _v2(d: dict) -> dict:
    d = copy.deepcopy(d)
    d["fringe_format_version"] = 2
    d["warnings"] = [{"code": "unnamed", "message": w, "values": {"n_sigma": 5.2}}
                     for w in d["warnings"]]
    return d


BASES = (EXAMPLE, _v2(EXAMPLE))

HOSTILE = (-1.0, 0.0, 3.0, 1e308, -1e308, 1e-320, 5e-324, 1e200, 10 ** 30, 2 ** 64, True,
           None, "x", "", "two\nerror: faked line", "\ud800", "\x1b[31mred", "a\u2028b", "\t",
           [], {}, [1, 2], {"a": 1}, [None], ["ke_XY", 3], 7, "ke_XY")
values = st.sampled_from(HOSTILE) | st.floats(allow_nan=False, allow_infinity=True) | \
    st.integers() | st.text(max_size=6)
names = st.sampled_from((1, 2.5, "a\nb", "\ud83d", "\x00", "ke_XY", "", "x\u2029y")) | \
    st.text(max_size=4)


@dataclass(frozen=True)
class Leaf:
    index: int       # which leaf (number, string, bool or null), modulo their count
    value: object


@dataclass(frozen=True)
class Section:
    index: int       # which object or list (not the top level)
    value: object


@dataclass(frozen=True)
class Scale:
    index: int       # which number leaf
    factor: float


@dataclass(frozen=True)
class Cov:
    where: str       # "covariance" or "harmonics"
    what: str        # "pair" (both off-diagonals scaled), "rho" (correlation set to factor),
    #                  "one" (asymmetric), "diag", "negate", "all" (whole matrix scaled)
    i: int
    j: int
    factor: float


@dataclass(frozen=True)
class At:
    path: str        # a dotted field (list elements by index); its value is replaced
    value: object


@dataclass(frozen=True)
class Rename:
    index: int       # which object
    name: object


@dataclass(frozen=True)
class Deep:
    index: int       # which leaf becomes a nest of lists
    depth: int


@dataclass(frozen=True)
class Delete:
    index: int


def _nodes(doc, kinds):
    """(parent, key) of every node of ``kinds`` below the top, in a fixed order."""
    out, stack = [], [doc]
    while stack:
        node = stack.pop(0)
        items = node.items() if isinstance(node, dict) else enumerate(node)
        for k, v in items:
            if isinstance(v, kinds):
                out.append((node, k))
            if isinstance(v, (dict, list)):
                stack.append(v)
    return out


def _leaves(doc):
    return _nodes(doc, (int, float, str, bool, type(None)))


def _apply(doc: dict, p) -> None:
    if isinstance(p, Cov):
        _apply_cov(doc, p)
        return
    if isinstance(p, At):
        *parents, last = p.path.split(".")
        node = doc
        for k in parents:
            node = node[int(k)] if isinstance(node, list) else node[k]
        node[int(last) if isinstance(node, list) else last] = copy.deepcopy(p.value)
        return
    if isinstance(p, (Leaf, Deep, Delete)):
        nodes = _leaves(doc) if not isinstance(p, Delete) else _nodes(doc, object)
    elif isinstance(p, Scale):
        nodes = [(n, k) for n, k in _leaves(doc)
                 if isinstance(n[k], (int, float)) and not isinstance(n[k], bool)]
    else:
        nodes = _nodes(doc, (dict, list))
    if isinstance(p, Rename):
        nodes = [(n, k) for n, k in nodes if isinstance(n[k], dict) and n[k]]
    if not nodes:
        return
    node, key = nodes[p.index % len(nodes)]
    if isinstance(p, (Leaf, Section)):
        node[key] = copy.deepcopy(p.value)
    elif isinstance(p, Scale):
        node[key] = node[key] * p.factor
    elif isinstance(p, Deep):
        nest = node[key]
        for _ in range(p.depth):
            nest = [nest]
        node[key] = nest
    elif isinstance(p, Delete):
        del node[key]
    else:                                       # Rename: the first name of the object
        obj = node[key]
        first = next(iter(obj))
        node[key] = {(p.name if k == first else k): v for k, v in obj.items()}


def _apply_cov(doc: dict, p: Cov) -> None:
    part = doc.get(p.where)
    if not isinstance(part, dict):
        return
    m = part.get("matrix" if p.where == "covariance" else "covariance")
    if not isinstance(m, list) or not m or not all(
            isinstance(r, list) and len(r) == len(m) and all(
                isinstance(x, (int, float)) and not isinstance(x, bool) for x in r) for r in m):
        return                                  # already broken by another perturbation
    n = len(m)
    i, j = p.i % n, p.j % n
    if p.what == "pair":
        m[i][j] *= p.factor
        if i != j:
            m[j][i] *= p.factor
    elif p.what == "rho":
        if i != j:
            m[i][j] = m[j][i] = p.factor * math.sqrt(abs(m[i][i] * m[j][j]))
    elif p.what == "one":
        m[i][j] = m[i][j] * p.factor + (m[i][i] if i != j else 0.0)
    elif p.what == "diag":
        m[i][i] *= p.factor
    elif p.what == "negate":
        m[i][i] = -m[i][i]
    else:
        for row in m:
            row[:] = [x * p.factor for x in row]


factors = st.sampled_from((-1.0, 0.0, 0.5, 1.0000001, 1.01, 3.0, 100.0, 1e-4)) | \
    st.floats(-1e3, 1e3, allow_nan=False)
perturbations = st.one_of(
    st.builds(Leaf, st.integers(0, 500), values),
    st.builds(Section, st.integers(0, 100), values),
    st.builds(Scale, st.integers(0, 500), factors),
    st.builds(Cov, st.sampled_from(("covariance", "harmonics")),
              st.sampled_from(("pair", "rho", "one", "diag", "negate", "all")),
              st.integers(0, 9), st.integers(0, 9), factors),
    st.builds(Rename, st.integers(0, 100), names),
    st.builds(Deep, st.integers(0, 500), st.sampled_from((2, 5, 40, 100, 3000))),
    st.builds(Delete, st.integers(0, 500)))
result_cases = st.tuples(st.sampled_from((0, 1)), st.lists(perturbations, max_size=3))

#: Cases found by the campaign of issue 14 (each failed before the checks were added).
FOUND = [
    (0, [Cov("covariance", "negate", 0, 0, 1.0)]),                   # a negative variance
    (0, [Cov("covariance", "rho", 0, 1, 3.0)]),                      # a correlation of +3
    (0, [Cov("covariance", "one", 1, 2, 1.0)]),                      # asymmetric
    (0, [Cov("covariance", "all", 0, 0, 100.0)]),                    # x100 off the sigmas
    (0, [Cov("harmonics", "all", 0, 0, 100.0)]),
    (0, [At("stage1", {**EXAMPLE["stage1"], 5: 3})]),                # an integer name
    (0, [At("covariance", None), At("coefficients", {1: {"value": 1.0, "sigma": 1.0}})]),
    (0, [At("harmonics", {"names": ["C0"], "value": [0.0], "sigma": [1.0],
                          "covariance": [[1.0]], "units": ["Hz"]})]),   # wrong type in a part
    (0, [At("coefficients.ke_XY.value", 1e308)]),                    # 1e308
    (0, [At("stage1.turn_period_s", 5e-324)]),
    (0, [At("statistics.dof", 10 ** 400)]),
    (0, [Deep(7, 3000)]),                                            # deep nesting
    (1, [At("warnings.0.message", "\ud800")]),                       # a lone surrogate
    (0, [At("site.name", "\ud800")]),
    (0, [At("warnings.0", "two\nerror: faked line")]),               # a faked error line
    (0, [At("input.path", "a\rerror: x")]),
    (0, [At("amplitudes_file", "0")]),  # no such file (found as a leaf change, 2026-12-04)
]


def _odd_names(doc) -> bool:
    """Whether some object of ``doc`` has a name that is not a string."""
    return any(not isinstance(k, str) for k in doc) or any(
        not isinstance(k, str) for n, key in _nodes(doc, dict) for k in n[key])


def _walk_check(value) -> None:
    """Every name and string printable as UTF-8 on one line, every number finite and sane."""
    stack = [value]
    while stack:
        v = stack.pop()
        if isinstance(v, dict):
            for k, x in v.items():
                assert isinstance(k, str) and check_text(k) is None, repr(k)
                stack.append(x)
        elif isinstance(v, list):
            stack.extend(v)
        elif isinstance(v, str):
            assert check_text(v) is None, repr(v)
            v.encode("utf-8")
        elif isinstance(v, float):
            assert math.isfinite(v) and (v == 0 or MIN_MAGNITUDE <= abs(v) <= MAX_MAGNITUDE)
        elif isinstance(v, int) and not isinstance(v, bool):
            assert abs(v) <= 2 ** 53


def _check_accepted(fit: FitResult) -> None:
    _walk_check(fit.to_dict())
    if fit.covariance is not None:
        m = fit.covariance.array()
        # symmetric on the scale of the correlations (the reader's rule: an element far below
        # sqrt(var_i var_j) may differ from its mirror in sign; its correlation is ~0 both ways)
        scale = np.sqrt(np.outer(np.diag(m), np.diag(m)))
        assert np.all(np.abs(m - m.T) <= 1e-6 * scale), "covariance not symmetric"
        sig = np.array([fit.coefficients[n].sigma for n in fit.covariance.names])
        np.testing.assert_allclose(np.sqrt(np.diag(m)), sig, rtol=1e-3)
        pos = np.diag(m) > 0
        rho = fit.correlation()[np.ix_(pos, pos)]
        assert np.all(np.abs(rho) <= 1 + 1e-6)
        if pos.sum() > 1:
            assert np.linalg.eigvalsh(rho)[0] >= -1e-5 * len(rho)
    h = fit.harmonics
    if h is not None and h.covariance is not None:
        np.testing.assert_allclose(np.sqrt(np.diag(np.array(h.covariance))), h.sigma,
                                   rtol=1e-3)


def check_result_case(tmp_path: Path, case) -> None:
    base, perturbs = case
    doc = copy.deepcopy(BASES[base])
    for p in perturbs:
        _apply(doc, p)
    turns = tmp_path / EXAMPLE["amplitudes_file"]
    if not turns.exists():
        shutil.copy(DATA / EXAMPLE["amplitudes_file"], turns)
    path = tmp_path / "fit.json"
    limit = sys.getrecursionlimit()
    sys.setrecursionlimit(max(limit, 10_000))       # json.dumps of a Deep nest recurses
    try:
        text = json.dumps(doc)
    except (TypeError, ValueError):                 # e.g. a name json cannot write
        text = None
    finally:
        sys.setrecursionlimit(limit)
    try:                                            # the Python face: from_dict on the dict
        direct = FitResult.from_dict(doc, source="fit result")
    except InputFileError as exc:
        assert_one_line_naming(exc, "fit result")
        direct = None
    else:
        _check_accepted(direct)
    if text is None:
        return
    path.write_text(text, "utf-8")
    before = digest(path)
    try:
        fit = read_fit_result(path)
    except InputFileError as exc:
        assert_one_line_naming(exc, path)
        assert digest(path) == before
        return
    assert direct is not None or _odd_names(doc)     # json.dumps wrote such names as text
    _check_accepted(fit)
    try:
        content = assemble_report(path)
    except InputFileError as exc:     # only a result that names another amplitudes file
        assert fit.amplitudes_file != EXAMPLE["amplitudes_file"], exc
        assert_one_line_naming(exc, path)
        assert exc.obj == "amplitudes_file" and digest(path) == before
        return
    assert "\n" not in content.headline["text"]
    for w in content.warnings:
        assert check_text(str(w)) is None
    for text in (markdown_report(content, []), latex_report(content), html_report(content, [])):
        text.encode("utf-8")
    tex = latex_report(content) + numbers_tex(content)
    assert tex.isascii() and unbalanced(tex) == [] and not unknown_commands(tex), tex[:2000]
    json.dumps(summary(content, [], []), allow_nan=False).encode("utf-8")
    assert digest(path) == before


@given(case=result_cases)
@_settings(300, fixed=True)
def _property(tmp_path, case):
    check_result_case(tmp_path, case)


for _case in FOUND:
    _property = example(case=_case)(_property)
test_result_file_property = _property


@pytest.mark.slow
@given(case=result_cases)
@_settings(10_000, fixed=False)
def test_result_file_property_long(tmp_path, case):
    check_result_case(tmp_path, case)


@pytest.mark.parametrize("text", ["[" * 100_000, '{"a":' * 100_000, "[" * 100_000 + "]" * 100_000])
def test_json_nested_100000_deep_is_one_line(tmp_path, text):
    path = tmp_path / "deep.json"
    path.write_text(text, "utf-8")
    with pytest.raises(InputFileError) as info:
        read_fit_result(path)
    assert_one_line_naming(info.value, path)


#: The FOUND cases that survive being written as JSON (a name that is not a string becomes text).
FOUND_IN_FILES = [c for c in FOUND if not any(
    isinstance(p, At) and isinstance(p.value, dict) and not all(isinstance(k, str) for k in p.value)
    for p in c[1])]


@pytest.mark.parametrize("case", FOUND_IN_FILES, ids=[repr(c[1][-1])[:40] for c in FOUND_IN_FILES])
def test_report_command_refuses_found_cases_before_writing(tmp_path, case):
    base, perturbs = case
    doc = copy.deepcopy(BASES[base])
    for p in perturbs:
        _apply(doc, p)
    limit = sys.getrecursionlimit()
    sys.setrecursionlimit(max(limit, 10_000))
    try:
        text = json.dumps(doc)
    finally:
        sys.setrecursionlimit(limit)
    (tmp_path / "fit.json").write_text(text, "utf-8")
    shutil.copy(DATA / EXAMPLE["amplitudes_file"], tmp_path / EXAMPLE["amplitudes_file"])
    with pytest.MonkeyPatch.context() as mp:
        mp.chdir(tmp_path)
        result = CliRunner().invoke(main, ["report", "fit.json", "--out", "out"])
    assert result.exit_code == 2, (result.output, result.exception)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: fit.json: "), result.stderr
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").rglob("*"))


def test_unperturbed_examples_are_read_into_a_report(tmp_path):
    for base in (0, 1):
        check_result_case(tmp_path, (base, []))
        fit = read_fit_result(tmp_path / "fit.json")
        assert fit.covariance is not None and len(fit.coefficients) == 5


@pytest.mark.parametrize(("n", "texts"), [(5, 25), (16, 256), (300, 0)])
def test_correlation_figure_of_many_coefficients_has_no_cell_numbers(n, texts):
    # 300 coefficients: 90 000 cell labels made the report take minutes; colours alone remain
    import matplotlib.pyplot as plt

    from fringe.report.figures.fit import CORRELATION_LABELS_MAX, plot_correlation

    names = [f"c{i:03d}" for i in range(n)]
    ax = plot_correlation(names, np.eye(n) * 4.0)
    try:
        assert len(ax.texts) == texts
        assert len(ax.get_xticklabels()) <= max(n, CORRELATION_LABELS_MAX)
        assert max(ax.figure.get_size_inches()) <= 12.0
    finally:
        plt.close(ax.figure)


@pytest.mark.slow
@given(case=st.tuples(st.sampled_from((0, 1)), st.lists(
    st.builds(Scale, st.integers(0, 500), st.sampled_from((1e100, 1e-100, 0.0, -1.0, 1e140,
                                                           1e-140, 3.0))) | perturbations,
    min_size=1, max_size=3)))
@_settings(40, fixed=False)
def test_accepted_results_render_every_figure_long(tmp_path, case):
    # a result the reader accepts renders whole: figures, documents, summary
    from fringe.report.build import write_report

    check_result_case(tmp_path, case)
    try:
        content = assemble_report(tmp_path / "fit.json")
    except (InputFileError, FileNotFoundError):
        return
    write_report(content, tmp_path / "out", overwrite=True)
