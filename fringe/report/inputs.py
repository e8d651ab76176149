"""Read and validate the inputs of a report: the fit result, its turns file, earlier results.

Use :func:`load_fit` for a fit result JSON (format "fit", version 1), :func:`load_turns` for the
per-turn amplitudes HDF5 file it names (format "turns", version 1) and :func:`load_comparison` for
a CSV or TOML table of earlier results. Each validates its file and raises
:class:`~fringe.errors.InputFileError` with one line "PATH: FIELD: EXPECTED"; nothing is written
and the files are never modified. :func:`fringe.report.build.assemble_report` calls them (and
:mod:`fringe.report.build` re-exports them).
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np

from fringe.errors import InputFileError

__all__ = ["COMPARE_COLUMNS", "TURN_FIELDS", "load_comparison", "load_fit", "load_turns"]

TURN_FIELDS = ("t_mid_s", "phi_rad", "C", "B", "sigma_C", "sigma_B", "accepted", "model_C",
               "model_B")
COMPARE_COLUMNS = ("name", "value", "sigma", "citation")


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
