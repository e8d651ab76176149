"""Run-file format rules (HDF5, format version 2; version 1 read too): constants and checks.

This module holds what a run file must look like, shared by the reader
(:mod:`fringe.io.runreader`) and the writer (:mod:`fringe.io.runwriter`): the format constants
(name, version, allowed units, core channels, reserved groups, default chunk length), the
apparatus-kind registry :data:`APPARATUS_KINDS` (the kinds and signal units of the apparatus
models, :data:`fringe.experiment.apparatus.APPARATUS_KINDS`, with the attributes a file must and
may carry), the metadata checks (:func:`check_apparatus`,
:func:`check_site`, :func:`check_epoch_utc`, :func:`parse_utc_iso`) and the streamed value checks
of ``samples/time``, ``samples/azimuth``, ``samples/signal`` and ``samples/weight``. Version 2
adds optional attributes of ``samples/signal`` (the counter's gate, the calibration of
instrument units: :func:`check_signal_attrs`) and the optional ``samples/weight`` channel; a
file using none of them is written as version 1. Value rules raise
:class:`Invalid`; the caller turns it into its own one-line error. The format itself is
specified in ``docs/run-format.md``.
"""

from __future__ import annotations

import datetime
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass

import h5py
import numpy as np
from numpy.typing import NDArray

from fringe.conventions import DEFAULT_PATH_SEPARATION_DEG
from fringe.errors import ConfigError
from fringe.experiment.apparatus import APPARATUS_KINDS as APPARATUS_MODELS
from fringe.site import Site

__all__ = ["APPARATUS_KINDS", "AZIMUTH_UNITS", "CORE_CHANNELS", "DEFAULT_CHUNK_SAMPLES",
           "FORMAT_NAME", "FORMAT_VERSION", "GATE_KINDS", "READABLE_VERSIONS", "RESERVED_GROUPS",
           "SIGNAL_ATTRS", "SIGNAL_UNITS", "TIME_UNITS", "WEIGHT_CHANNEL", "ApparatusKind",
           "Invalid", "check_apparatus", "check_azimuth_values", "check_epoch_utc",
           "check_signal_attrs", "check_signal_values", "check_site", "check_time_values",
           "check_weight_values", "parse_utc_iso", "plain", "show", "to_number", "to_string",
           "version_needed"]

# -- the format, version 2 -------------------------------------------------------------------
FORMAT_NAME = "run"
#: The version this fringe writes when a file uses a version-2 feature (otherwise 1).
FORMAT_VERSION = 2
#: Versions the reader accepts (1: no gate, calibration or weight).
READABLE_VERSIONS = (1, 2)
#: Version 2: the optional per-sample weight channel (units "1", finite and > 0, or NaN).
WEIGHT_CHANNEL = "weight"
#: Version 2: frequency-counter gate kinds: "plain" (one gate of length gate_s, uniform
#: weight) and "overlapping" (overlapping gates averaged: triangular weight over 2 gate_s).
GATE_KINDS = ("plain", "overlapping")
TIME_UNITS = ("s",)
AZIMUTH_UNITS = ("rad", "deg")
SIGNAL_UNITS = ("Hz", "1", "fringe")
CORE_CHANNELS = ("time", "azimuth", "signal")
RESERVED_GROUPS = ("site", "apparatus", "samples")
#: 2**17 float64 samples = 1 MiB per channel (practice: 1 MiB chunks read at full speed).
DEFAULT_CHUNK_SAMPLES = 2**17

_UTC_RE = re.compile(r"(\d{4})-(\d{2})-(\d{2})T(\d{2}):(\d{2}):(\d{2}(?:\.\d+)?)(Z|\+00:00)")
#: Also accepted where a person types the time (writer arguments, CSV cells): a space for T and
#: no suffix or " UTC" (the time is then taken as UTC), as in :class:`fringe.frames.Epoch`.
_UTC_LOOSE_RE = re.compile(
    r"(\d{4})-(\d{2})-(\d{2})[T ](\d{2}):(\d{2}):(\d{2}(?:\.\d+)?)(Z|\+00:00| ?UTC)?")
_EPOCH_HINT = "an ISO 8601 UTC time like '2027-02-03T00:00:00Z'"


class Invalid(Exception):
    """A value broke a format rule; ``expected`` is the text after ``OBJECT:``."""

    def __init__(self, expected: str, obj: str = ""):
        super().__init__(expected)
        self.expected = expected
        self.obj = obj


def plain(value):
    """An HDF5/TOML attribute value as a plain Python value (arrays stay numpy arrays)."""
    if isinstance(value, np.ndarray) and value.ndim == 0:
        value = value[()]
    if isinstance(value, np.ndarray) and value.dtype.kind == "S":  # fixed-length strings
        try:
            return np.char.decode(value, "utf-8")
        except UnicodeDecodeError:  # not UTF-8: left as bytes (refused where text is needed)
            return value
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bytes):
        try:
            value = value.decode("utf-8")
        except UnicodeDecodeError:
            pass
    return value


def show(value) -> str:
    """Short text for a value in an error message."""
    value = plain(value)
    if isinstance(value, np.ndarray):
        return f"an array of shape {value.shape}"
    if isinstance(value, h5py.Empty):
        return "an empty attribute"
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def to_string(value) -> str:
    """The value as a str, or :class:`Invalid`."""
    v = plain(value)
    if not isinstance(v, str):
        raise Invalid(f"expected a string, got {show(value)}")
    return v


def to_number(value) -> float:
    """The value as a finite float (bools and strings refused), or :class:`Invalid`."""
    v = plain(value)
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise Invalid(f"expected a number, got {show(value)}")
    x = float(v)
    if not math.isfinite(x):
        raise Invalid(f"expected a finite number, got {x!r}")
    return x


def _positive(value) -> float:
    x = to_number(value)
    if not x > 0:
        raise Invalid(f"expected a positive number, got {x!r}")
    return x


def _nonzero(value) -> float:
    x = to_number(value)
    if x == 0:
        raise Invalid("expected a non-zero number, got 0.0")
    return x


def _positive_int(value) -> int:
    v = plain(value)
    if isinstance(v, float) and v.is_integer():
        v = int(v)
    if isinstance(v, bool) or not isinstance(v, int) or v < 1:
        raise Invalid(f"expected a positive integer, got {show(value)}")
    return v


def _passthrough(value):
    """Type sanity for optional attributes: string, boolean, number or 1-D numeric array."""
    v = plain(value)
    if isinstance(v, (str, bool, int, float)):
        return v
    if isinstance(v, (list, tuple)):
        v = np.asarray(v)
    if isinstance(v, np.ndarray) and v.ndim == 1 and v.dtype.kind in "biuf":
        return v.tolist()
    raise Invalid(f"expected a string, number, boolean or one-dimensional numeric array, "
                  f"got {show(value)}")


@dataclass(frozen=True)
class ApparatusKind:
    """What the ``apparatus`` group of one kind must and may carry.

    Attributes
    ----------
    name : str
        The ``kind`` attribute value.
    signal_units : tuple of str
        Allowed ``samples/signal`` units.
    required : tuple of (attribute, rule, description)
    optional : tuple of (attribute, rule, default)
    """

    name: str
    signal_units: tuple[str, ...]
    required: tuple = ()
    optional: tuple = ()


_SEPARATION = ("path_separation_deg", to_number, DEFAULT_PATH_SEPARATION_DEG)
_CARRIER = ("carrier_hz", _positive, "the carrier frequency in Hz, > 0")

#: The format's rules for the attributes of each kind: (required, optional), see ApparatusKind.
_ATTRIBUTE_RULES: dict[str, tuple[tuple, tuple]] = {
    "cavity-pair": ((_CARRIER,), (_SEPARATION,)),
    "cavity-vs-reference": ((_CARRIER,), ()),
    "michelson": ((("arm_length_m", _positive, "the arm length in m, > 0"),
                   ("wavelength_m", _positive, "the optical wavelength in m, > 0")),
                  (("passes", _positive_int, 1), _SEPARATION)),
    "clock": ((("sensitivity_hz", _nonzero, "the frequency response in Hz, non-zero"),), ()),
}
if set(_ATTRIBUTE_RULES) != set(APPARATUS_MODELS):    # pragma: no cover - a developer's slip
    raise ImportError("fringe.io.runformat: the attribute rules must name exactly the apparatus "
                      f"kinds {sorted(APPARATUS_MODELS)}, got {sorted(_ATTRIBUTE_RULES)}")

#: Registry of apparatus kinds in run files (drives validation, messages and tests): one per
#: apparatus model of :data:`fringe.experiment.apparatus.APPARATUS_KINDS`, with that model's
#: name and signal units and the format's attribute rules.
APPARATUS_KINDS: dict[str, ApparatusKind] = {
    kind: ApparatusKind(kind, model.units_allowed, *_ATTRIBUTE_RULES[kind])
    for kind, model in APPARATUS_MODELS.items()}


def _kinds_text() -> str:
    return ", ".join(repr(k) for k in APPARATUS_KINDS)


def check_apparatus(attrs: Mapping, err, prefix: str = "apparatus") -> dict:
    """Validate apparatus attributes; return them as plain Python types with defaults filled.

    ``err(obj, expected)`` builds the exception to raise (file-specific).
    """
    if "kind" not in attrs:
        raise err(f"{prefix}.kind", f"missing attribute; expected one of {_kinds_text()}")
    kind = plain(attrs["kind"])
    if not isinstance(kind, str) or kind not in APPARATUS_KINDS:
        raise err(f"{prefix}.kind", f"expected one of {_kinds_text()}, got {show(kind)}")
    spec = APPARATUS_KINDS[kind]
    out: dict = {"kind": kind}
    for name, _rule, what in spec.required:
        if name not in attrs:
            raise err(f"{prefix}.{name}", f"missing attribute; kind {kind!r} requires {what}")
    checked = {name: rule for name, rule, _ in spec.required + spec.optional}
    for name, value in attrs.items():
        if name == "kind":
            continue
        try:
            out[name] = checked.get(name, _passthrough)(value)
        except Invalid as exc:
            raise err(f"{prefix}.{name}", exc.expected) from None
    for name, _, default in spec.optional:
        out.setdefault(name, default)
    return out


def check_site(attrs: Mapping, err, prefix: str = "site") -> Site:
    """Validate site attributes (latitude_deg, longitude_deg, optional height_m and name)."""
    rules = (("latitude_deg", -90.0, 90.0, "geodetic latitude in degrees, north positive"),
             ("longitude_deg", -360.0, 360.0, "east longitude in degrees"),
             ("height_m", -12_000.0, 100_000.0, "height above the ellipsoid in m"))
    values = {}
    for name, lo, hi, what in rules:
        if name not in attrs:
            if name == "height_m":
                continue
            raise err(f"{prefix}.{name}", f"missing attribute; expected {what}")
        try:
            x = to_number(attrs[name])
        except Invalid as exc:
            raise err(f"{prefix}.{name}", exc.expected) from None
        if not lo <= x <= hi:
            raise err(f"{prefix}.{name}", f"expected a value in [{lo:g}, {hi:g}], got {x!r}")
        values[name] = x
    if "name" in attrs:
        try:
            values["name"] = to_string(attrs["name"])
        except Invalid as exc:
            raise err(f"{prefix}.name", exc.expected) from None
    return Site(**values)


def parse_utc_iso(text: str, *, strict: bool = True) -> tuple[int, int, int, int, int, float]:
    """Split an ISO 8601 UTC time ``YYYY-MM-DDThh:mm:ss[.fff]Z`` (or ``+00:00``).

    Parameters
    ----------
    text : str
        The time.
    strict : bool
        If False, also accept a space for ``T`` and no suffix or ``UTC`` (taken as UTC).

    Returns
    -------
    tuple
        (year, month, day, hour, minute, second); second may be in [60, 61) only at 23:59 (a
        leap second, not checked against the leap-second table here).

    Raises
    ------
    ValueError
        If the text is not such a time.
    """
    regex = _UTC_RE if strict else _UTC_LOOSE_RE
    match = regex.fullmatch(text.strip()) if isinstance(text, str) else None
    if match is None:
        raise ValueError(text)
    y, mo, d, h, mi = (int(g) for g in match.groups()[:5])
    sec = float(match.group(6))
    datetime.date(y, mo, d)  # raises ValueError for a day that does not exist
    leap = h == 23 and mi == 59 and sec < 61.0
    if h > 23 or mi > 59 or not (sec < 60.0 or leap):
        raise ValueError(text)
    return y, mo, d, h, mi, sec


def check_epoch_utc(value, err, obj: str, *, strict: bool = True) -> str:
    """Validate an epoch; return it (strict) or its canonical ``...Z`` form (not strict)."""
    v = plain(value)
    try:
        parse_utc_iso(v, strict=strict)
    except ValueError:
        raise err(obj, f"expected {_EPOCH_HINT}, got {show(value)}") from None
    if strict:
        return v
    m = _UTC_LOOSE_RE.fullmatch(v.strip())
    return f"{m.group(1)}-{m.group(2)}-{m.group(3)}T{m.group(4)}:{m.group(5)}:{m.group(6)}Z"


def _first(mask: NDArray[np.bool_]) -> int:
    return int(np.argmax(mask))


def check_time_values(t_s: NDArray, start: int, prev_s: float | None,
                      obj: str = "samples/time") -> float | None:
    """Check that times t_s (s) are finite and strictly increasing; return the last time (s).

    The first time must also come after ``prev_s`` (the last time of the previous chunk, s);
    ``start`` is the index of ``t_s[0]`` in the record, for the message. An empty chunk returns
    ``prev_s``. A broken rule raises :class:`Invalid` naming ``obj`` and the index.
    """
    # the common case in one comparison pass: strictly increasing between finite ends is
    # finite throughout (NaN compares False); anything else goes through the full checks below
    if t_s.size and np.isfinite(t_s[0]) and np.isfinite(t_s[-1]) \
            and (prev_s is None or t_s[0] > prev_s) and bool(np.all(t_s[1:] > t_s[:-1])):
        return float(t_s[-1])
    bad = ~np.isfinite(t_s)
    if bad.any():
        i = _first(bad)
        raise Invalid(f"expected finite values, got {float(t_s[i])!r} at index {start + i}", obj)
    if t_s.size == 0:
        return prev_s
    if prev_s is not None and not t_s[0] > prev_s:
        _order_error(float(t_s[0]), prev_s, start, obj)
    step = t_s[1:] <= t_s[:-1]
    if step.any():
        i = _first(step) + 1
        _order_error(float(t_s[i]), float(t_s[i - 1]), start + i, obj)
    return float(t_s[-1])


def _order_error(value: float, before: float, index: int, obj: str):
    if value == before:
        raise Invalid(f"expected strictly increasing values, got {value!r} repeated at index "
                      f"{index}", obj)
    raise Invalid(f"expected strictly increasing values, got {value!r} at index {index} after "
                  f"{before!r}", obj)


#: Largest |azimuth|, rad: float64 resolves 2**-20 rad (about 1e-6 rad) there; beyond, an
#: unwrapped azimuth loses the resolution of a sample step (1e15 rad resolves only 0.125 rad).
AZIMUTH_MAX_RAD = 2.0 ** 32


def check_azimuth_values(azimuth: NDArray, start: int, obj: str = "samples/azimuth", *,
                         rad_per_unit: float = 1.0) -> None:
    """Azimuth must be finite and within :data:`AZIMUTH_MAX_RAD`.

    ``start`` is the index of ``azimuth[0]``; ``rad_per_unit`` converts the values given to
    radians (pi/180 for degrees).
    """
    # the common case by two reductions (NaN propagates through max and min; rounding of the
    # product is monotonic, so the largest |A| decides): else the full checks below
    if azimuth.size and max(float(azimuth.max()), -float(azimuth.min())) * rad_per_unit \
            <= AZIMUTH_MAX_RAD:
        return
    bad = ~np.isfinite(azimuth)
    if bad.any():
        i = _first(bad)
        raise Invalid(f"expected finite values (azimuth has no dropped samples), got "
                      f"{float(azimuth[i])!r} at index {start + i}", obj)
    bad = np.abs(azimuth) * rad_per_unit > AZIMUTH_MAX_RAD
    if bad.any():
        i = _first(bad)
        raise Invalid(f"expected |azimuth| <= 2**32 rad (float64 resolves about 1e-6 rad "
                      f"there; store the azimuth wrapped, e.g. to [0, 2 pi)), got "
                      f"{float(azimuth[i])!r} at index {start + i}", obj)


def check_signal_values(signal: NDArray, start: int, obj: str = "samples/signal") -> None:
    """Signal values must be finite or NaN (a dropped sample); ±inf is refused."""
    if signal.size and np.isfinite(signal.max()) and np.isfinite(signal.min()):
        return                   # finite extremes, no NaN: no inf either (else checked below)
    bad = np.isinf(signal)
    if bad.any():
        i = _first(bad)
        raise Invalid(f"expected finite values or NaN (a dropped sample), got "
                      f"{float(signal[i])!r} at index {start + i}", obj)


def _gate_kind(value) -> str:
    v = to_string(value)
    if v not in GATE_KINDS:
        raise Invalid(f"expected {' or '.join(map(repr, GATE_KINDS))}, got {show(value)}")
    return v


def _nonnegative(value) -> float:
    x = to_number(value)
    if not x >= 0:
        raise Invalid(f"expected a number >= 0, got {x!r}")
    return x


def _text(value) -> str:
    v = to_string(value)
    if not v.strip():
        raise Invalid("expected a non-empty string, got ''")
    return v


#: Version 2: optional attributes of ``samples/signal`` -> (rule, meaning).
SIGNAL_ATTRS = {
    "gate_s": (_positive, "the counter's gate time in s, > 0 (with gate_kind)"),
    "gate_kind": (_gate_kind, "the counter's gate kind, 'plain' or 'overlapping' (with "
                              "gate_s)"),
    "scale_factor": (_nonzero, "signal units per instrument unit applied at import"),
    "scale_rel_sigma": (_nonnegative, "relative standard uncertainty of scale_factor, >= 0"),
    "instrument_units": (_text, "the units the readings were recorded in"),
}


def check_signal_attrs(attrs: Mapping, err, prefix: str = "samples/signal") -> dict:
    """Validate the version-2 attributes of ``samples/signal`` among ``attrs``.

    Other attributes (``units``) are left to the caller. ``gate_s`` and ``gate_kind`` come
    together or not at all. Returns the attributes present, as plain Python values;
    ``err(obj, expected)`` builds the exception.
    """
    out = {}
    for name, (rule, _what) in SIGNAL_ATTRS.items():
        if name in attrs:
            try:
                out[name] = rule(attrs[name])
            except Invalid as exc:
                raise err(f"{prefix}.{name}", exc.expected) from None
    for a, b in (("gate_s", "gate_kind"), ("gate_kind", "gate_s")):
        if a in out and b not in out:
            raise err(f"{prefix}.{b}", f"missing attribute; expected {SIGNAL_ATTRS[b][1]}")
    return out


def version_needed(signal_attrs: Mapping, weighted: bool) -> int:
    """The lowest format version that holds a file: 2 with gate, calibration or weight, else 1."""
    return 2 if signal_attrs or weighted else 1


def check_weight_values(weight: NDArray, start: int, obj: str = "samples/weight") -> None:
    """Weights must be finite and > 0, or NaN (a dropped sample); ``start`` as for time."""
    if weight.size and weight.min() > 0 and np.isfinite(weight.max()):
        return                   # no NaN (min would be NaN), all > 0 and finite
    bad = ~(weight > 0) & ~np.isnan(weight) | np.isinf(weight)
    if bad.any():
        i = _first(bad)
        raise Invalid(f"expected finite values > 0 or NaN (a dropped sample), got "
                      f"{float(weight[i])!r} at index {start + i}", obj)


def _check_chunk_size(chunk_samples) -> int:
    if isinstance(chunk_samples, bool) or not isinstance(chunk_samples, (int, np.integer)) \
            or chunk_samples < 1:
        raise ConfigError(f"chunk_samples: expected a positive integer, got {chunk_samples!r}")
    return int(chunk_samples)
