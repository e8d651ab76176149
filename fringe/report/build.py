"""Assemble a publishable report from a stored fit result (``FIT.json`` + its turns file).

Use :func:`build_report` to go from the file to the output directory in one call. It is
:func:`assemble_report` (read and validate the inputs, compute the headline, the comparison and
the RMS solution; nothing is written) followed by :func:`write_report` (render report.md,
report.tex, report.html, figures/*.png and *.pdf, summary.json). Every output file is written
whole or not at all; nothing is written if any target exists without ``overwrite``; inputs are
never written over.

The readers :func:`load_fit`, :func:`load_turns` and :func:`load_comparison` validate their
file and raise :class:`~fringe.errors.InputFileError` with one line "PATH: FIELD: EXPECTED".
"""

from __future__ import annotations

import csv
import datetime
import json
import math
import os
import platform
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import __version__
from ..errors import ConfigError, InputFileError, OutputError
from ..io.atomic import save_figure_atomic, write_json_atomic, write_text_atomic
from . import figures as F
from .rms_solve import RmsSolution, solve_rms
from .rounding import format_bound, format_interval, format_mantissas, pdg_place, pdg_round
from .tables import Z95, bound95, latex_escape, report_tables, to_html, to_latex, to_markdown

__all__ = ["FIGURE_DIR", "OUTPUT_FILES", "ReportContent", "assemble_report", "build_report",
           "headline", "html_report", "latex_report", "load_comparison", "load_fit",
           "load_turns", "markdown_report", "summary", "write_report"]

OUTPUT_FILES = ("report.md", "report.tex", "report.html", "summary.json")
FIGURE_DIR = "figures"
TURN_FIELDS = ("t_mid_s", "phi_rad", "C", "B", "sigma_C", "sigma_B", "accepted", "model_C",
               "model_B")
COMPARE_COLUMNS = ("name", "value", "sigma", "citation")
#: Tables after the main ones, in report order: (key of report_tables, heading).
EXTRA_TABLES = (("nuisance", "Nuisance parameters"), ("cross_check", "One-stage cross-check"),
                ("harmonics", "C10 harmonics"), ("correlation", "Correlations"))


# ---------------------------------------------------------------------------------- inputs

def _num(x, path, obj, *, minimum=None) -> float:
    if isinstance(x, bool) or not isinstance(x, (int, float)) or not math.isfinite(x):
        raise InputFileError(path, obj, f"expected a finite number, got {x!r}")
    if minimum is not None and x < minimum:
        raise InputFileError(path, obj, f"expected a number >= {minimum}, got {x!r}")
    return float(x)


def _finite_pair(e: dict) -> bool:
    v, s = e.get("value"), e.get("sigma")
    return all(isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)
               for x in (v, s)) and s >= 0


def _matrix(m, n, path, obj) -> np.ndarray:
    try:
        a = np.array(m, dtype=float)
    except (TypeError, ValueError):
        a = None
    if a is None or a.shape != (n, n) or not np.all(np.isfinite(a)):
        raise InputFileError(path, obj, f"expected a {n}x{n} matrix of finite numbers")
    return a


def load_fit(path) -> dict:
    """Read and validate a fit result JSON (format "fit", version 1); returns the dict.

    The covariance, when present, is reordered to the order of ``coefficients``.
    """
    path = Path(path)
    if not path.is_file():
        raise InputFileError(path, "file", "expected an existing fit result (JSON) file")
    try:
        d = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise InputFileError(path, "file", f"expected a readable UTF-8 JSON file ({exc})") \
            from None
    except json.JSONDecodeError as exc:
        raise InputFileError(path, "JSON", f"expected valid JSON ({exc.msg} at line "
                                           f"{exc.lineno})") from None
    if not isinstance(d, dict):
        raise InputFileError(path, "top level", "expected a JSON object")
    if d.get("fringe_format") != "fit":
        raise InputFileError(path, "fringe_format", "expected 'fit' (a result of fringe fit), "
                                                    f"got {d.get('fringe_format')!r}")
    if d.get("fringe_format_version") != 1:
        raise InputFileError(path, "fringe_format_version", "expected 1, got "
                                                            f"{d.get('fringe_format_version')!r}")
    for key in ("theory", "units"):
        if not isinstance(d.get(key), str) or not d[key]:
            raise InputFileError(path, key, f"expected a non-empty string, got {d.get(key)!r}")
    coefs = d.get("coefficients")
    if not isinstance(coefs, dict) or not coefs:
        raise InputFileError(path, "coefficients", "expected a non-empty object "
                                                   "{NAME: {value, sigma}}")
    for name, e in coefs.items():
        if not isinstance(e, dict):
            raise InputFileError(path, f"coefficients.{name}", "expected {value, sigma}")
        e["value"] = _num(e.get("value"), path, f"coefficients.{name}.value")
        e["sigma"] = _num(e.get("sigma"), path, f"coefficients.{name}.sigma", minimum=0.0)
    fixed = d.setdefault("fixed", {})
    if not isinstance(fixed, dict):
        raise InputFileError(path, "fixed", "expected an object {NAME: value}")
    for name, v in fixed.items():
        _num(v, path, f"fixed.{name}")
    if d.get("covariance") is not None:
        cov = d["covariance"]
        names = cov.get("names") if isinstance(cov, dict) else None
        if not isinstance(names, list) or sorted(names) != sorted(coefs):
            raise InputFileError(path, "covariance.names", "expected the names of the free "
                                                           f"coefficients {list(coefs)}")
        m = _matrix(cov.get("matrix"), len(names), path, "covariance.matrix")
        order = [names.index(n) for n in coefs]
        d["covariance"] = {"names": list(coefs), "matrix": m[np.ix_(order, order)].tolist()}
    h = d.get("harmonics")
    if h is not None:
        if not isinstance(h, dict) or not all(isinstance(h.get(k), list)
                                              for k in ("names", "value", "sigma")):
            raise InputFileError(path, "harmonics", "expected an object with lists names, "
                                                    "value, sigma")
        if not len(h["names"]) == len(h["value"]) == len(h["sigma"]):
            raise InputFileError(path, "harmonics", "expected names, value and sigma of equal "
                                                    "length")
        for i, (v, s) in enumerate(zip(h["value"], h["sigma"], strict=True)):
            _num(v, path, f"harmonics.value[{i}]")
            _num(s, path, f"harmonics.sigma[{i}]", minimum=0.0)
    w = d.setdefault("warnings", [])
    if not isinstance(w, list) or not all(isinstance(x, str) for x in w):
        raise InputFileError(path, "warnings", "expected a list of strings")
    af = d.get("amplitudes_file")
    if af is not None and not isinstance(af, str):
        raise InputFileError(path, "amplitudes_file", "expected a file name relative to the "
                                                      f"JSON file, got {af!r}")
    d["amplitudes_file"] = af or None
    notes = d.setdefault("notes", [])
    if not isinstance(notes, list) or not all(isinstance(x, str) for x in notes):
        raise InputFileError(path, "notes", "expected a list of strings")
    for key in ("nuisance", "one_stage"):          # shown for information: lenient
        part = d.get(key)
        if not isinstance(part, dict):
            d[key] = {}
            continue
        entries = part.get("coefficients") if key == "one_stage" else part
        good = {n: {"value": float(e["value"]), "sigma": float(e["sigma"])}
                for n, e in (entries.items() if isinstance(entries, dict) else ())
                if isinstance(e, dict) and _finite_pair(e)}
        d[key] = {**part, "coefficients": good} if key == "one_stage" else good
    return d


def load_turns(path, fit: dict | None = None) -> dict:
    """Read the per-turn amplitudes (HDF5, format "turns" v1); accepted turns, time-sorted.

    Returns the arrays of :data:`TURN_FIELDS` (accepted turns only) plus ``turn_period_s``
    (``stage1.turn_period_s`` of ``fit`` if given, else the median turn spacing), ``n_turns``
    and ``n_rejected``.
    """
    import h5py

    path = Path(path)
    if not path.is_file():
        raise InputFileError(path, "file", "expected the per-turn amplitudes file named by "
                                           "amplitudes_file of the fit result")
    try:
        fh = h5py.File(path, "r")
    except OSError:
        raise InputFileError(path, "file", "expected a readable HDF5 file") from None
    with fh:
        def attr(name):
            v = fh.attrs.get(name)
            return v.decode() if isinstance(v, bytes) else v
        if attr("fringe_format") != "turns":
            raise InputFileError(path, "fringe_format", "expected 'turns', got "
                                                        f"{attr('fringe_format')!r}")
        if attr("fringe_format_version") != 1:
            raise InputFileError(path, "fringe_format_version", "expected 1, got "
                                 f"{attr('fringe_format_version')!r}")
        if "turns" not in fh or not isinstance(fh["turns"], h5py.Group):
            raise InputFileError(path, "turns", "expected a group of per-turn datasets")
        out, n = {}, None
        for name in TURN_FIELDS:
            ds = fh["turns"].get(name)
            if not isinstance(ds, h5py.Dataset) or ds.ndim != 1 or ds.dtype.kind not in "biuf":
                raise InputFileError(path, f"turns/{name}", "expected a 1-D numeric dataset")
            if n is not None and ds.shape[0] != n:
                raise InputFileError(path, f"turns/{name}", f"expected {n} values (one per "
                                                            f"turn), got {ds.shape[0]}")
            n = ds.shape[0]
            out[name] = ds[()].astype(float)
    ok = out.pop("accepted") == 1
    if ok.sum() < 4:
        raise InputFileError(path, "turns/accepted", f"expected at least 4 accepted turns, "
                                                     f"got {int(ok.sum())}")
    order = np.argsort(out["t_mid_s"][ok], kind="stable")
    out = {k: v[ok][order] for k, v in out.items()}
    for name, arr in out.items():
        if not np.all(np.isfinite(arr)):
            raise InputFileError(path, f"turns/{name}", "expected finite values on accepted "
                                                        "turns")
    for name in ("sigma_C", "sigma_B"):
        if not np.all(out[name] > 0):
            raise InputFileError(path, f"turns/{name}", "expected positive values on "
                                                        "accepted turns")
    tp = (fit or {}).get("stage1", {}).get("turn_period_s")
    if not (isinstance(tp, (int, float)) and not isinstance(tp, bool) and tp > 0):
        tp = float(np.median(np.diff(out["t_mid_s"])))
        if not tp > 0:
            raise InputFileError(path, "turns/t_mid_s", "expected distinct turn times")
    out.update(turn_period_s=float(tp), n_turns=int(n), n_rejected=int(n - ok.sum()))
    return out


def load_comparison(path) -> list[dict]:
    """Earlier results from a CSV (header ``name,value,sigma,citation``; ``#`` comments) or a
    TOML file (``[[limits]]`` tables with those keys). A quoted bound |c| < L is entered as
    value L, sigma 0. Returns rows ``{"name", "value", "sigma", "citation"}``.
    """
    path = Path(path)
    if not path.is_file():
        raise InputFileError(path, "file", "expected an existing .csv or .toml table of "
                                           "earlier results")
    suffix = path.suffix.lower()
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputFileError(path, "file", f"expected a readable UTF-8 text file ({exc})") \
            from None
    if suffix == ".csv":
        lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
        reader = csv.DictReader(lines, skipinitialspace=True)
        missing = [c for c in COMPARE_COLUMNS if c not in (reader.fieldnames or [])]
        if missing:
            raise InputFileError(path, "header", f"expected columns {', '.join(COMPARE_COLUMNS)}"
                                                 f" (missing {', '.join(missing)})")
        raw = list(reader)
        first = 2
    elif suffix == ".toml":
        try:
            import tomllib
        except ModuleNotFoundError:           # Python 3.10
            import tomli as tomllib
        try:
            raw = tomllib.loads(text).get("limits")
        except tomllib.TOMLDecodeError as exc:
            raise InputFileError(path, "TOML", f"expected valid TOML ({exc})") from None
        if not isinstance(raw, list) or not all(isinstance(r, dict) for r in raw):
            raise InputFileError(path, "limits", "expected an array of tables [[limits]] with "
                                                 f"keys {', '.join(COMPARE_COLUMNS)}")
        first = 1
    else:
        raise InputFileError(path, "file", f"expected a .csv or .toml file, got {suffix!r}")
    if not raw:
        raise InputFileError(path, "rows", "expected at least one earlier result")
    rows = []
    for i, r in enumerate(raw, start=first):
        where = f"row {i}" if suffix == ".csv" else f"limits[{i - 1}]"
        name, cite = str(r.get("name") or "").strip(), str(r.get("citation") or "").strip()
        if not name:
            raise InputFileError(path, f"{where}: name", "expected a coefficient name")
        if not cite:
            raise InputFileError(path, f"{where}: citation", "expected the source of the "
                                                             "result")
        vals = {}
        for col in ("value", "sigma"):
            x = r.get(col)
            try:
                v = float(x) if not isinstance(x, bool) else math.nan
            except (TypeError, ValueError):
                v = math.nan
            if not math.isfinite(v) or (col == "sigma" and v < 0):
                want = "a finite number >= 0" if col == "sigma" else "a finite number"
                raise InputFileError(path, f"{where}: {col}", f"expected {want}, got {x!r}")
            vals[col] = v
        rows.append({"name": name, **vals, "citation": cite})
    return rows


# --------------------------------------------------------------------------- the headline

def _esc(text: str, style: str) -> str:
    return latex_escape(text) if style == "latex" else text


def headline(fit: dict, style: str = "unicode") -> dict:
    """The result in the trade's terms.

    * theory ``sme``: the orientation-dependent Delta c / c bound, stated as the largest 95 %
      bound |value| + 1.96 sigma among the free ke_* coefficients;
    * ``rms``: delta - beta + 1/2 with 1 sigma, its 95 % interval and bound;
    * ``medium``: ``upper_limits.speed_kms_95`` when present;
    * otherwise (and ``clock``): the largest 95 % bound among the free coefficients.

    Returns ``{"text", "quantity", "bound_95", "statement"}``, text in ``style``
    (``"unicode"`` or ``"latex"``).
    """
    coefs, theory = fit["coefficients"], fit["theory"]
    unc = fit.get("statistics", {}).get("uncertainty")
    tail = _esc(f" Uncertainties: {unc}.", style) if unc else ""
    lat = style == "latex"
    pct, sig, lt = (r"95\,\%", r"$\sigma$", "$<$") if lat else ("95 %", "σ", "<")
    absval = r"$|$value$|$" if lat else "|value|"
    ke = [n for n in coefs if n.startswith("ke_")]
    if theory == "rms" and "rms_mm" in coefs:
        v, s = coefs["rms_mm"]["value"], coefs["rms_mm"]["sigma"]
        q, qabs = ((r"$\delta-\beta+\frac{1}{2}$", r"$|\delta-\beta+\frac{1}{2}|$") if lat
                   else ("δ − β + ½", "|δ − β + ½|"))
        exp = pdg_round(v, s)[2]
        iv = format_interval(v - Z95 * s, v + Z95 * s, pdg_place(s)[0], exp, style) \
            if s > 0 else "n/a"
        b = bound95(v, s)
        text = (_esc("Orientation dependence of the speed of light (Robertson–Mansouri–Sexl): ",
                     style) + f"{q} = {format_mantissas(*pdg_round(v, s), style)} (1{sig}), "
                f"{pct} interval {iv}, i.e. {qabs} {lt} {format_bound(b, style)} at {pct}.")
        return {"text": text + tail, "quantity": "rms_mm", "bound_95": b,
                "statement": "|delta - beta + 1/2| + 1.96 sigma"}
    if theory == "medium" and "speed_kms_95" in (fit.get("upper_limits") or {}):
        x = float(fit["upper_limits"]["speed_kms_95"])
        text = _esc(f"Speed of the laboratory through a stationary medium: < {x:.3g} km/s "
                    "(95 % upper limit).", style)
        return {"text": text + tail, "quantity": "speed_kms_95", "bound_95": x,
                "statement": "upper_limits.speed_kms_95 of the fit"}
    names = ke if theory == "sme" and ke else list(coefs)
    bounds = {n: bound95(coefs[n]["value"], coefs[n]["sigma"]) for n in names}
    name = max(bounds, key=bounds.get)
    b = format_bound(bounds[name], style)
    if theory == "sme" and ke:
        dcc = r"$\Delta c/c$" if lat else "Δc/c"
        kappa = r"$\tilde{\kappa}_{e-}$" if lat else "κ̃_e−"
        text = (f"Orientation-dependent {dcc} {lt} {b} ({pct}), stated as the largest {pct} "
                f"bound {absval} + 1.96{sig} among the {len(ke)} free {kappa} coefficients ("
                + _esc(", ".join(ke), style) + "), here " + _esc(name, style) + ".")
        statement = "largest |value| + 1.96 sigma among the free ke_* coefficients"
    else:
        what = {"clock": "Orientation-dependent clock shift",
                "sme": "No ke_* coefficient was free; largest bound"}.get(theory,
                                                                          "Largest bound")
        text = (_esc(f"{what}: |{name}| < ", style) + f"{b} ({pct}), the largest {pct} bound "
                f"{absval} + 1.96{sig} among the free coefficients.")
        statement = "largest |value| + 1.96 sigma among the free coefficients"
    return {"text": text + tail, "quantity": name, "bound_95": bounds[name],
            "statement": statement}


# ------------------------------------------------------------------------------- assemble

@dataclass(frozen=True, eq=False)
class ReportContent:
    """Everything a report states, computed from the inputs; nothing written yet.

    ``fit`` is the validated fit dict (covariance filled in), ``turns`` the accepted per-turn
    arrays (:func:`load_turns`) or None, ``comparison`` the user's earlier results, ``rms`` the
    alpha, beta, delta solution or None, ``headline`` as :func:`headline`.
    """

    fit: dict
    fit_path: Path
    turns: dict | None = None
    turns_path: Path | None = None
    comparison: tuple = ()
    compare_path: Path | None = None
    rms: RmsSolution | None = None
    headline: dict = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    provenance: dict = field(default_factory=dict)

    @property
    def warnings(self) -> tuple[str, ...]:
        """Every warning the fit raised."""
        return tuple(self.fit.get("warnings", ()))

    @property
    def inputs(self) -> list[Path]:
        """The input files (never written over)."""
        return [p for p in (self.fit_path, self.turns_path, self.compare_path) if p]


def _software() -> dict:
    import h5py
    import matplotlib
    import scipy

    return {"fringe": __version__, "python": platform.python_version(),
            "numpy": np.__version__, "scipy": scipy.__version__,
            "matplotlib": matplotlib.__version__, "h5py": h5py.__version__}


def _file_entry(path) -> dict:
    from ..io.runfile import sha256

    return {"path": str(path), "sha256": sha256(path)}


def assemble_report(fit_json_path, *, compare=None, kt: tuple[float, float] | None = None,
                    is_: tuple[float, float] | None = None) -> ReportContent:
    """Read and validate the inputs and compute what the report states (writes nothing).

    Parameters
    ----------
    fit_json_path : path
        The fit result (``fringe_format = "fit"``, version 1).
    compare : path, optional
        CSV or TOML table of earlier results (:func:`load_comparison`).
    kt, is_ : (value, sigma), optional
        Kennedy-Thorndike (beta - alpha - 1) and Ives-Stilwell (alpha + 1/2) results
        (dimensionless); both, with a fit of theory ``rms``, give alpha, beta, delta.
    """
    fit_path = Path(fit_json_path)
    fit = load_fit(fit_path)
    notes = [f"From the fit: {n}" for n in fit["notes"]]
    turns_path = turns = None
    if fit.get("amplitudes_file"):
        turns_path = fit_path.parent / fit["amplitudes_file"]
        turns = load_turns(turns_path, fit)
    else:
        notes.append("The fit names no per-turn amplitudes file: the figures of the per-turn "
                     "amplitudes, their spectrum and the residual Allan deviation are omitted.")
    if fit.get("covariance") is None:
        fit["covariance"] = {"names": list(fit["coefficients"]), "matrix": np.diag(
            [e["sigma"] ** 2 for e in fit["coefficients"].values()]).tolist()}
        notes.append("The fit gives no covariance matrix: correlations are shown as zero.")
    comparison = tuple(load_comparison(compare)) if compare is not None else ()
    rms = None
    if kt is not None or is_ is not None:
        if kt is None or is_ is None:
            raise ConfigError("--kt/--is: both the Kennedy-Thorndike (beta - alpha - 1) and the "
                              "Ives-Stilwell (alpha + 1/2) results are needed to solve for "
                              "alpha, beta, delta")
        if fit["theory"] != "rms" or "rms_mm" not in fit["coefficients"]:
            raise ConfigError(f"--kt/--is: need a fit of theory 'rms' with rms_mm free; "
                              f"{fit_path} has theory {fit['theory']!r} with free "
                              f"{', '.join(fit['coefficients'])}")
        mm = fit["coefficients"]["rms_mm"]
        rms = solve_rms((mm["value"], mm["sigma"]), kt, is_,
                        sources=("this fit", "user input (--kt)", "user input (--is)"))
    now = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    prov = {
        "report created (UTC)": now,
        "fit file": _file_entry(fit_path),
        "per-turn amplitudes file": _file_entry(turns_path) if turns_path else None,
        "comparison file": _file_entry(compare) if compare is not None else None,
        "run file fitted": fit.get("input"),
        "fit created (UTC)": fit.get("created_utc"),
        "theory": fit["theory"],
        "fit settings": fit.get("settings"),
        "fit statistics": fit.get("statistics"),
        "efficiency (white-noise Cramér–Rao σ / reported σ)": fit.get("efficiency"),
        "stage 1": fit.get("stage1"),
        "site": fit.get("site"),
        "apparatus": fit.get("apparatus"),
        "epoch (UTC), span (s)": [fit.get("epoch_utc"), fit.get("span_s")],
        "conventions of the fit": fit.get("conventions"),
        "conventions of this report": {
            "rounding": "Particle Data Group rule (RPP Introduction, sec. 5.3 'Rounding')",
            "intervals": "Gaussian: 68 % = value ± 1σ, 95 % = value ± 1.96σ",
            "95 % bound": "|value| + 1.96σ, rounded up to two significant digits",
            "rms": "Mansouri–Sexl α, β, δ (SR: −½, ½, 0); P_MM = δ − β + ½ (C13)",
            "harmonics": "C10: S = B sin 2θ + C cos 2θ, two-path normalisation (C9)"},
        "software of the fit": fit.get("software"),
        "software of this report": _software(),
    }
    return ReportContent(fit=fit, fit_path=fit_path, turns=turns, turns_path=turns_path,
                         comparison=comparison,
                         compare_path=Path(compare) if compare is not None else None,
                         rms=rms, headline=headline(fit), notes=tuple(notes),
                         provenance={k: v for k, v in prov.items() if v is not None})


# ------------------------------------------------------------------------------ render

def _rms_lines(sol: RmsSolution, style: str) -> list[str]:
    names = {"unicode": ("α + ½", "β − ½", "δ"),
             "latex": (r"$\alpha+\frac{1}{2}$", r"$\beta-\frac{1}{2}$", r"$\delta$")}[style]
    return [f"{n} = {format_mantissas(*pdg_round(v, s), style)}"
            for n, v, s in zip(names, sol.deviations, sol.sigmas, strict=True)]


def _rms_text(c: ReportContent) -> list[str]:
    """Markdown paragraphs of the RMS section (theory rms only)."""
    out = ["Convention C13: Mansouri–Sexl α, β, δ (SR: α = −½, β = ½, δ = 0). Papers that quote "
           "β − δ − ½ quote −(δ − β + ½).", ""]
    sol = c.rms
    if sol is None:
        out += ["Give --kt VALUE,SIGMA and --is VALUE,SIGMA (Kennedy–Thorndike β − α − 1, "
                "Ives–Stilwell α + ½) to solve for α, β and δ individually.", ""]
        return out
    kt = format_mantissas(*pdg_round(sol.inputs[1], sol.input_sigmas[1]))
    is_ = format_mantissas(*pdg_round(sol.inputs[2], sol.input_sigmas[2]))
    rho = sol.correlation
    out += [f"From this fit's δ − β + ½ and the user's Kennedy–Thorndike β − α − 1 = {kt} and "
            f"Ives–Stilwell α + ½ = {is_} (independent inputs), deviations from SR:", ""]
    out += [f"- {line}" for line in _rms_lines(sol, "unicode")]
    out += ["", f"Correlations: ρ(α, β) = {rho[0, 1]:+.2f}, ρ(α, δ) = {rho[0, 2]:+.2f}, "
            f"ρ(β, δ) = {rho[1, 2]:+.2f} (covariance in summary.json). These deviations are the "
            "offsets α_M, β_M, δ_M of the other convention in use.", ""]
    return out


def _fixed_text(fit: dict) -> str:
    return ", ".join(f"{k} = {v:g}" for k, v in fit.get("fixed", {}).items())


def markdown_report(c: ReportContent, figs: Sequence[tuple[str, str, bytes]]) -> str:
    """report.md: headline, warnings, tables, figures (linked), provenance."""
    fit, tables = c.fit, report_tables(c.fit, c.comparison, "unicode")
    site = fit.get("site", {}).get("name", "")
    out = [f"# fringe report: {fit['theory']} fit" + (f" — {site}" if site else ""), "",
           f"**Result.** {c.headline['text']}", ""]
    if c.warnings:
        out += [f"> **⚠ Warnings raised by the fit ({len(c.warnings)})**", ">"]
        out += [f"> - {w}" for w in c.warnings] + [""]
    else:
        out += ["The fit raised no warnings.", ""]
    out += [f"*Note: {n}*\n" for n in c.notes]
    out += ["## Coefficients", "", to_markdown(tables["coefficients"])]
    if fit.get("fixed"):
        out += [f"Fixed: {_fixed_text(fit)}.", ""]
    if "comparison" in tables:
        out += ["## Comparison with earlier results", "", to_markdown(tables["comparison"])]
    if fit["theory"] == "rms":
        out += ["## Robertson–Mansouri–Sexl parameters", ""] + _rms_text(c)
    for key, title in EXTRA_TABLES:
        if key in tables:
            out += [f"## {title}", "", to_markdown(tables[key])]
    if figs:
        out += ["## Figures", ""]
        for i, (name, caption, _) in enumerate(figs, start=1):
            out += [f"![Figure {i}: {name}]({FIGURE_DIR}/{name}.png)", "",
                    f"**Figure {i}.** {caption} (PDF: `{FIGURE_DIR}/{name}.pdf`)", ""]
    out += ["## Provenance", ""]
    out += [f"- **{k}**: `{json.dumps(v, ensure_ascii=False)}`" for k, v in c.provenance.items()]
    return "\n".join(out) + "\n"


def latex_report(c: ReportContent) -> str:
    """report.tex: a standalone article with the headline paragraph, the warnings and the
    coefficient table (plain tabular; compiles with pdflatex and no extra packages)."""
    table = to_latex(report_tables(c.fit, c.comparison, "latex")["coefficients"])
    out = [r"\documentclass{article}", r"\begin{document}",
           r"\section*{" + latex_escape(f"Result of the {c.fit['theory']} fit") + "}",
           headline(c.fit, "latex")["text"], ""]
    if c.warnings:
        out += [r"\paragraph{Warnings raised by the fit.}", r"\begin{itemize}"]
        out += [r"\item " + latex_escape(w) for w in c.warnings] + [r"\end{itemize}"]
    out.append(table)
    if c.fit.get("fixed"):
        out.append(latex_escape(f"Fixed: {_fixed_text(c.fit)}.") + "\n")
    if c.rms is not None:
        out.append(r"\paragraph{RMS parameters.} Deviations from special relativity from this "
                   r"fit and the user's Kennedy--Thorndike and Ives--Stilwell inputs "
                   r"(independent): " + "; ".join(_rms_lines(c.rms, "latex")) + ".\n")
    out.append(r"\end{document}")
    return "\n".join(out) + "\n"


def html_report(c: ReportContent, figs: Sequence[tuple[str, str, bytes]]) -> str:
    """report.html: one self-contained page (:func:`fringe.report.html.html_page`)."""
    import html as _html

    from .html import html_page

    tables = report_tables(c.fit, c.comparison, "unicode")
    sections = [("Coefficients", to_html(tables["coefficients"]))]
    if c.fit.get("fixed"):
        sections.append(("Fixed coefficients", f"<p>{_html.escape(_fixed_text(c.fit))}</p>"))
    if "comparison" in tables:
        sections.append(("Comparison with earlier results", to_html(tables["comparison"])))
    if c.fit["theory"] == "rms":
        body = "".join(f"<p>{_html.escape(p)}</p>" for p in _rms_text(c)
                       if p and not p.startswith("- "))
        if c.rms is not None:
            body += "<ul>" + "".join(f"<li>{_html.escape(x)}</li>"
                                     for x in _rms_lines(c.rms, "unicode")) + "</ul>"
        sections.append(("Robertson–Mansouri–Sexl parameters", body))
    for key, title in EXTRA_TABLES:
        if key in tables:
            sections.append((title, to_html(tables[key])))
    site = c.fit.get("site", {}).get("name", "")
    return html_page(title=f"fringe report: {c.fit['theory']} fit" + (f" — {site}" if site
                                                                        else ""),
                     headline=c.headline["text"], warnings=c.warnings, notes=c.notes,
                     sections=sections, figures=figs, provenance=c.provenance)


def summary(c: ReportContent, figure_names: Sequence[str], files: Sequence[str]) -> dict:
    """summary.json: the numbers and statements of the report in plain JSON types."""
    coefs = {}
    for n, e in c.fit["coefficients"].items():
        v, s = e["value"], e["sigma"]
        coefs[n] = {"value": v, "sigma": s,
                    "rounded": format_mantissas(*pdg_round(v, s), "plain"),
                    "interval_68": [v - s, v + s], "interval_95": [v - Z95 * s, v + Z95 * s],
                    "bound_95": bound95(v, s)}
    return {"fringe_format": "report", "fringe_format_version": 1,
            "headline": c.headline, "warnings": list(c.warnings), "notes": list(c.notes),
            "coefficients": coefs, "comparison": list(c.comparison),
            "rms": c.rms.to_dict() if c.rms is not None else None,
            "figures": list(figure_names), "files": list(files), "provenance": c.provenance}


# ------------------------------------------------------------------------------- write

def _check_targets(targets: Sequence[Path], protect: Sequence[Path], overwrite: bool) -> None:
    for p in targets:
        for i in protect:
            if os.path.abspath(p) == os.path.abspath(i) or (
                    p.exists() and Path(i).exists() and os.path.samefile(p, i)):
                raise OutputError(f"{p}: refusing to write over an input file")
        if p.exists() and not overwrite:
            raise OutputError(f"{p}: exists (pass --overwrite to replace it)")


def write_report(content: ReportContent, out_dir, *, overwrite: bool = False) -> list[Path]:
    """Render ``content`` into ``out_dir`` (created if missing); return the paths written.

    Refuses with :class:`~fringe.errors.OutputError`, before writing anything, when a target
    exists and ``overwrite`` is false or when a target is one of the inputs.
    """
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise OutputError(f"{out}: exists and is not a directory")
    names = F.report_figure_names(content.fit, content.turns)
    targets = [out / n for n in OUTPUT_FILES]
    targets += [out / FIGURE_DIR / f"{n}.{ext}" for n in names for ext in ("png", "pdf")]
    _check_targets(targets, content.inputs, overwrite)
    (out / FIGURE_DIR).mkdir(parents=True, exist_ok=True)
    kw = {"overwrite": overwrite, "protect": content.inputs}
    written, figs = [], []
    for name, caption, fig in F.report_figures(content.fit, content.turns, content.comparison):
        for ext in ("png", "pdf"):
            written.append(save_figure_atomic(fig, out / FIGURE_DIR / f"{name}.{ext}", **kw))
        # embed the very PNG just written (read back: one rendering, identical bytes)
        figs.append((name, caption, written[-2].read_bytes()))
    written.append(write_text_atomic(out / "report.md", markdown_report(content, figs), **kw))
    written.append(write_text_atomic(out / "report.tex", latex_report(content), **kw))
    written.append(write_text_atomic(out / "report.html", html_report(content, figs), **kw))
    files = [p.relative_to(out).as_posix() for p in written] + ["summary.json"]
    written.append(write_json_atomic(out / "summary.json",
                                     summary(content, [f[0] for f in figs], files), **kw))
    return written


def build_report(fit_json_path, out_dir, *, compare=None, kt=None, is_=None,
                 overwrite: bool = False) -> list[Path]:
    """Read ``fit_json_path`` and write the full report into ``out_dir``.

    Parameters
    ----------
    fit_json_path : path
        Fit result JSON (format "fit", version 1); its ``amplitudes_file`` is read too.
    out_dir : path
        Output directory (created if missing).
    compare : path, optional
        CSV/TOML table of earlier results (columns name, value, sigma, citation).
    kt, is_ : (float, float), optional
        Kennedy-Thorndike (beta - alpha - 1) and Ives-Stilwell (alpha + 1/2) as (value, sigma),
        for the alpha, beta, delta solution (needs a fit of theory ``rms``).
    overwrite : bool
        Replace existing outputs.

    Returns
    -------
    list of Path
        Every file written: figures/*.png and *.pdf, report.md, report.tex, report.html,
        summary.json.

    Examples
    --------
    >>> build_report("fit.json", "report-out", compare="earlier.csv")  # doctest: +SKIP
    """
    content = assemble_report(fit_json_path, compare=compare, kt=kt, is_=is_)
    return write_report(content, out_dir, overwrite=overwrite)
