"""Blind analysis: secret offsets on the coefficients, and their removal once.

``fringe fit --blind KEYFILE`` calls :func:`blind_fit` on the fit's result and per-turn columns;
``fringe unblind`` calls :func:`unblind`; a fit given a key already used calls
:func:`after_unblinding`. ``docs/fit.md`` ("Blind analysis") states the rules; in short:

* Every free coefficient k gets an offset o_k drawn from a normal distribution of standard
  deviation SPREAD_SIGMAS x sigma_k, from a generator seeded by 32 bytes of ``os.urandom``.
  A normal (not uniform) law has no edges, so a blinded value b = p + o bounds nothing: for
  any true values p1, p2 within a few sigma of each other the laws of b differ by a shift of
  (p1 - p2) / (SPREAD_SIGMAS sigma), which no single blinded file can reveal.
* Everything derived from the values is offset consistently: the coefficients, the one-stage
  cross-check, the C10 harmonics (by the offsets' own harmonics: the per-turn model of the
  offsets fitted like the data), the B0 / C0 diagnostics of the warnings, and the per-turn
  C, B and model columns of the amplitudes file (by the per-turn model of the offsets; their
  residuals are unchanged) and the coefficients' part of the portable likelihood's solution
  (``likelihood.value``). Values that scale with |value| (the calibration's ``scale_sigma``
  and every scale term of the budget) are withheld; the C, B of rejected turns are written as
  NaN. What does not depend on the values (sigmas, covariance, chi^2, nuisances, efficiency,
  the per-turn residuals) is left as it is.
* The key holds the offsets, their harmonics, the blinded result's SHA-256 and the settings
  hash (:func:`settings_hash`: the fit and demodulation settings, UT1-UTC, the input hashes
  and the budget file's hash); :func:`unblind` refuses another result, subtracts the offsets,
  recomputes what was withheld and records when, and with which settings hash, it was done.

Not covered: nonlinear theories (medium), rms_kt (fitted from per-turn offsets), and records
whose result is the per-session amplitudes (no sidereal stage): the fit refuses to blind them.
"""

from __future__ import annotations

import dataclasses
import datetime
import hashlib
import json
import os

import numpy as np

from fringe.conventions import HARMONIC_NAMES
from fringe.errors import ConfigError, FitError, InputFileError
from fringe.io.blind_key import BlindKey
from fringe.io.fit_budget import Blinding
from fringe.io.fit_sections import Estimate, FitWarning, OneStage

__all__ = ["SPREAD_SIGMAS", "BlindedColumns", "after_unblinding", "blind_fit", "draw_key",
           "settings_hash", "unblind"]

#: Standard deviation of the offsets, in units of each coefficient's sigma (a project choice:
#: the blinded values of true values a few sigma apart are indistinguishable; a true value
#: beyond ~ SPREAD_SIGMAS sigma would still stand out).
SPREAD_SIGMAS = 100.0

#: What a blinded result leaves out or changes besides the coefficient values.
WITHHELD = ("coefficients, one_stage, harmonics, likelihood and B0/C0 warning values offset",
            "calibration.scale_sigma and budget scale terms withheld",
            "per-turn C, B, model_C, model_B offset; C, B of rejected turns withheld (NaN)")


def _now() -> str:
    return datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def settings_hash(result) -> str:
    """SHA-256 of what fixes the analysis: settings, UT1-UTC, input and budget hashes.

    The fit settings (``settings.fit``), the demodulation settings (``stage1.settings``),
    ``settings.dut1_s``, the run file's SHA-256 and the budget file's SHA-256 (when one was
    given), as canonical JSON (sorted keys). The engine is left out: it does not change the
    numbers.
    """
    from fringe.io.records import plain

    settings = plain(result.settings or {})
    budget = (result.systematics.budget_file or {}) if result.systematics is not None else {}
    doc = {"fit": settings.get("fit"), "dut1_s": settings.get("dut1_s"),
           "demodulation": plain(result.stage1.settings) if result.stage1 else None,
           "inputs": [result.input.sha256] if result.input else [],
           "budget_sha256": budget.get("sha256")}
    return hashlib.sha256(json.dumps(doc, sort_keys=True).encode()).hexdigest()


def _check_blindable(result) -> None:
    if result.harmonics is None or result.sessions is not None:
        raise FitError("blind: the result is the per-session amplitudes (no sidereal stage); "
                       "blinding needs the sidereal harmonics")
    if "rms_kt" in result.coefficients:
        raise ConfigError("blind: rms_kt (fitted from per-turn offsets) cannot be blinded; "
                          "fit it in an unblinded run")


def draw_key(result, entropy: bytes | None = None) -> tuple[BlindKey, np.ndarray]:
    """Draw the offsets of a result's free coefficients (normal, SPREAD_SIGMAS x sigma).

    ``entropy``: the generator's seed bytes (default 32 bytes of ``os.urandom``; tests pass
    their own). Returns the key (not yet bound to a result file, without harmonic offsets)
    and the offsets in coefficient order.
    """
    seed = entropy if entropy is not None else os.urandom(32)
    rng = np.random.default_rng(int.from_bytes(seed, "big"))
    names = list(result.coefficients)
    sig = np.array([result.coefficients[n].sigma for n in names], float)
    o = rng.normal(0.0, 1.0, len(names)) * SPREAD_SIGMAS * sig
    key_id = hashlib.sha256(seed + b"key-id").hexdigest()[:16]
    key = BlindKey(key_id, _now(), SPREAD_SIGMAS, dict(zip(names, o.tolist())), (0.0,) * 10)
    return key, o


def _harmonic_offsets(cache, o: np.ndarray) -> np.ndarray:
    """The C10 harmonics of the offsets' per-turn model, fitted like the data (stage 2)."""
    from fringe.fit.budget import _fit_template, _harm_design

    k = o.size
    x, _, _ = _fit_template(cache, lambda r: _harm_design(r["phi"]),
                            lambda r: (r["jc"][:, :k] @ o, r["jb"][:, :k] @ o), 10)
    return x


def _shift_warning(w: FitWarning, dh: dict, units: str) -> FitWarning:
    """A B0 / C0 diagnostic with its data and predicted values moved by the harmonic offset."""
    from fringe.fit.stages import _SYSTEMATICS

    key = next((k for k in ("B0", "C0") if f"{k}_predicted" in w.values), None)
    if key is None:
        return w
    v = dict(w.values)
    v[key] += dh[key]
    v[f"{key}_predicted"] += dh[key]
    msg = (f"{key} = {v[key]:.3g} ± {v['sigma']:.2g} {units} differs from the "
           f"{v[f'{key}_predicted']:.3g} the fitted coefficients predict ({v['n_sigma']:.1f} "
           f"sigma): this points to {_SYSTEMATICS}")
    return FitWarning(w.code, msg, v, w.coefficients)


def _offset_result(result, offsets: dict, harm_offsets, sign: float):
    """The result with ``sign`` x the offsets added to everything derived from the values."""
    def shifted(estimates):
        return {n: Estimate(e.value + sign * offsets[n], e.sigma) if n in offsets else e
                for n, e in estimates.items()}

    dh = dict(zip(HARMONIC_NAMES, sign * np.asarray(harm_offsets, float)))
    h = result.harmonics
    harmonics = dataclasses.replace(h, value=tuple(
        v + dh.get(n, 0.0) for n, v in zip(h.names, h.value))) if h is not None else None
    one = result.one_stage
    if one is not None:
        one = OneStage(shifted(one.coefficients), one.nuisance, one.covariance,
                       one.chi2_reduced, one.noise_rms, one.dof, one.n_samples,
                       one.n_turns_used)
    units = h.units if h is not None and h.units else result.units
    lik = result.likelihood
    if lik is not None:          # the portable likelihood's solution carries the offsets too
        lik = dataclasses.replace(lik, value=tuple(
            v + sign * offsets.get(n, 0.0) if i < lik.n_coefficients else v
            for i, (n, v) in enumerate(zip(lik.columns, lik.value))))
    return dataclasses.replace(
        result, coefficients=shifted(result.coefficients), harmonics=harmonics, one_stage=one,
        warnings=tuple(_shift_warning(w, dh, units) for w in result.warnings), likelihood=lik)


def _with_scales(result, values: dict | None):
    """Calibration ``scale_sigma`` and the budget's scale terms from ``values`` (None: withheld)."""
    from fringe.io.fit_calibration import scale_sigmas

    cal = result.calibration
    if cal is not None and cal.scale_rel_sigma is not None:
        cal = dataclasses.replace(cal, scale_sigma={} if values is None else scale_sigmas(
            values, cal.scale_rel_sigma))
    sys = result.systematics.with_scales(values) if result.systematics is not None else None
    return dataclasses.replace(result, calibration=cal, systematics=sys)


def blind_fit(result, columns, entropy: bytes | None = None):
    """Blind a fit: (blinded result, blinded per-turn columns, key not yet bound).

    ``columns``: the :class:`~fringe.io.turns_file.TurnColumns` of the fit (its row cache
    gives the per-turn model of the offsets).
    """
    _check_blindable(result)
    cache = columns.models.cache
    if cache is None:
        raise ConfigError(f"blind: theory {result.theory!r} is not linear; blinding covers "
                          "linear theories")
    key, o = draw_key(result, entropy)
    dh = _harmonic_offsets(cache, o)
    key = dataclasses.replace(key, harmonic_offsets=tuple(dh.tolist()),
                              settings_sha256=settings_hash(result))
    blinded = _with_scales(_offset_result(result, key.offsets, dh, +1.0), None)
    blinding = Blinding(True, key.key_id, SPREAD_SIGMAS, key.settings_sha256, WITHHELD)
    blinded = dataclasses.replace(
        blinded, blinding=blinding,
        notes=blinded.notes + (blinding.sentence() + "; " + "; ".join(WITHHELD),))
    return blinded, BlindedColumns(columns, cache, o), key


class BlindedColumns:
    """Per-turn columns with the offsets' per-turn model added (see module docstring).

    Wraps a :class:`~fringe.io.turns_file.TurnColumns`: C, B, model_C and model_B of each
    accepted turn get the offsets' C and B for that turn (the row cache's design times the
    offsets); rejected turns' C and B become NaN. Closing it closes the wrapped columns.
    """

    def __init__(self, columns, cache, offsets: np.ndarray):
        self._columns, self._cache, self._o = columns, cache, np.asarray(offsets, float)

    def __len__(self) -> int:
        return len(self._columns)

    def segments(self):
        """Per segment, the blinded dict of turn columns."""
        k = self._o.size
        for i, part in enumerate(self._columns.segments()):
            part = dict(part)
            sel = part["accepted"].astype(bool)
            got = self._cache.get(i, ("jc", "jb")) if i < self._cache.n_segments else {}
            dc = np.zeros(int(sel.sum()))
            db = np.zeros_like(dc)
            if "jc" in got:
                dc, db = got["jc"][:, :k] @ self._o, got["jb"][:, :k] @ self._o
            for name, d in (("C", dc), ("B", db), ("model_C", dc), ("model_B", db)):
                col = np.array(part[name], float)
                col[sel] += d
                if name in ("C", "B"):
                    col[~sel] = np.nan
                part[name] = col
            yield part

    def close(self) -> None:
        """Close the wrapped columns (removes the fit's scratch files)."""
        self._columns.close()

    def __enter__(self) -> BlindedColumns:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def unblind(result, key: BlindKey, result_sha256: str, source: str = "fit result",
            key_source: str = "key"):
    """Remove the offsets of a blinded result once: (unblinded result, key marked as used).

    Refuses (InputFileError, one line) a result that is not blinded, a key of another result
    (its ``result_sha256`` or id), and a key already used. The unblinded result names no
    per-turn amplitudes file (the blinded one stays blinded: re-run the fit with the used
    key for unblinded amplitudes).
    """
    b = result.blinding
    if b is None or not b.blinded:
        raise InputFileError(source, "blinding.blinded", "expected a blinded result (the "
                             "result of a blinded fit)")
    if key.unblinded is not None:
        raise InputFileError(key_source, "unblinded", f"expected an unused key; this one was "
                             f"used on {key.unblinded['utc']}")
    if key.key_id != b.key_id or key.result_sha256 != result_sha256:
        raise InputFileError(key_source, "result_sha256", f"expected the key of this result "
                             f"(key {b.key_id}, sha256 {result_sha256[:12]}...); this key "
                             f"belongs to key {key.key_id}, result sha256 "
                             f"{key.result_sha256[:12]}...")
    now, settings = _now(), settings_hash(result)
    plain = _offset_result(result, key.offsets, key.harmonic_offsets, -1.0)
    plain = _with_scales(plain, {n: e.value for n, e in plain.coefficients.items()})
    blinding = Blinding(False, key.key_id, key.spread_sigmas, settings, (), now, settings,
                        result_sha256)
    notes = tuple(n for n in plain.notes if not n.startswith("BLINDED"))
    plain = dataclasses.replace(
        plain, blinding=blinding, amplitudes_file="", amplitudes_sha256="",
        notes=notes + (blinding.sentence() + "; the blinded per-turn amplitudes file is not "
                       "unblinded (re-run the fit with the used key for its amplitudes)",))
    used = dataclasses.replace(key, unblinded={"utc": now, "settings_sha256": settings,
                                               "result_sha256": result_sha256})
    return plain, used


def after_unblinding(result, key: BlindKey):
    """A fit made with a key already used: not blinded, and says whether settings changed."""
    mine = settings_hash(result)
    at = key.unblinded["settings_sha256"]
    blinding = Blinding(False, key.key_id, key.spread_sigmas, mine, (), key.unblinded["utc"],
                        at, key.unblinded["result_sha256"], mine != at)
    return dataclasses.replace(result, blinding=blinding,
                               notes=result.notes + (blinding.sentence(),))
