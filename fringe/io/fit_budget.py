"""Two optional parts of the fit result: ``systematics`` (the budget) and ``blinding``.

* :class:`Systematics`: per free coefficient the statistical sigma, each systematic term's
  sigma (and, for an auxiliary channel, the shift its regression removed) and the total in
  quadrature; the list of terms (kind, source); the auxiliary channels' couplings and their own
  C10 harmonics. Written by ``fringe fit --regress`` and ``--budget``
  (:mod:`fringe.fit.budget`).
* :class:`Blinding`: whether the values are blinded, the key's id, the settings hash, and
  after unblinding when and with which settings hash it was done (:mod:`fringe.fit.blinding`).

A result file without these parts reads as before (None). ``docs/fit.md`` documents both.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

from fringe.io.records import Fields, FrozenMap, freeze, plain

__all__ = ["TERM_KINDS", "Blinding", "Systematics", "quadrature_total"]

#: Kinds of budget terms: an auxiliary channel's coupling, a declared size on a coefficient,
#: on a harmonic, a relative scale (declared, or the run file's calibration), and in a joint
#: result a run's scale carried through the run's weights (a fixed size).
TERM_KINDS = ("aux-channel", "aux-channel-noise", "declared-coefficient", "declared-harmonic",
              "scale", "run-scale")

_SYS_KEYS = ("coefficients", "terms", "channels", "aux_joint_variance", "correlations",
             "budget_file", "withheld")
_TERM_KEYS = ("name", "kind", "source", "relative", "note")
_COEF_KEYS = ("statistical", "fit_sigma", "terms", "shift", "direction", "total")


def quadrature_total(statistical: float, terms: Mapping[str, float | None],
                     aux_joint_variance: float | None = None,
                     aux_names: tuple[str, ...] = ()) -> float:
    """Total 1 sigma: statistical, the auxiliary part and every other term in quadrature.

    The auxiliary channels' coupling terms (``aux_names``) enter through
    ``aux_joint_variance`` (their joint variance, with the correlations of the couplings)
    when it is given; terms that are None (withheld) are left out.
    """
    var = statistical ** 2
    for name, s in terms.items():
        if s is None or (aux_joint_variance is not None and name in aux_names):
            continue
        var += float(s) ** 2
    if aux_joint_variance is not None:
        var += aux_joint_variance
    return math.sqrt(var)


@dataclass(frozen=True)
class Systematics:
    """The systematic budget of a fit (see module docstring and ``docs/fit.md``).

    Attributes
    ----------
    coefficients : mapping
        ``{name: {"statistical", "fit_sigma", "terms": {term: sigma or None}, "shift":
        {term: value}, "direction": {term: signed value}, "total"}}`` (coefficient units).
        ``direction`` holds the signed one-sigma effect of a term that moves every coefficient
        along one direction (a declared harmonic term), so that a joint result can carry it
        exactly; ``terms`` holds its size. ``statistical`` is the fit's sigma
        without the auxiliary couplings' part, ``fit_sigma`` the fit's own sigma.
    terms : tuple of mapping
        ``{"name", "kind" (TERM_KINDS), "source", "relative" (scale terms), "note"}``.
    channels : mapping
        ``{channel: {"units", "coupling": {"value", "sigma"}, "harmonics": {"names",
        "value", "sigma"}}}``: the fitted coupling (observable units per channel unit) and
        the channel's own C10 harmonics of its per-turn 2 theta amplitudes (channel units).
    aux_joint_variance : mapping
        Per coefficient, the joint variance of the auxiliary coupling terms (with their
        correlations), coefficient units squared.
    correlations : str
        How correlated terms are treated.
    budget_file : mapping or None
        ``{"path", "sha256"}`` of the budget file, when one was given.
    withheld : tuple of str
        Terms whose sizes are withheld while the result is blinded (scale terms, which follow
        the values).
    """

    coefficients: Mapping
    terms: tuple
    channels: Mapping = field(default_factory=FrozenMap)
    aux_joint_variance: Mapping = field(default_factory=FrozenMap)
    correlations: str = ""
    budget_file: Mapping | None = None
    withheld: tuple = ()

    def __post_init__(self):
        for name in ("coefficients", "channels", "aux_joint_variance", "budget_file"):
            v = getattr(self, name)
            if v is not None:
                object.__setattr__(self, name, freeze(v))
        object.__setattr__(self, "terms", tuple(freeze(t) for t in self.terms))
        object.__setattr__(self, "withheld", tuple(self.withheld))

    def to_dict(self) -> dict:
        """Plain JSON of the part."""
        out = {k: getattr(self, k) for k in _SYS_KEYS if getattr(self, k) is not None}
        return plain(out)

    @property
    def scale_terms(self) -> tuple:
        """The terms of kind ``scale`` (relative sizes)."""
        return tuple(t for t in self.terms if t["kind"] == "scale")

    def aux_names(self) -> tuple[str, ...]:
        """Names of the auxiliary coupling terms (kind ``aux-channel``)."""
        return tuple(t["name"] for t in self.terms if t["kind"] == "aux-channel")

    def with_scales(self, values: Mapping[str, float] | None) -> Systematics:
        """A copy with the scale terms set from ``values`` (None: withheld) and totals redone.

        ``values`` maps each coefficient to its (unblinded) value; a scale term's sigma is
        its relative size times abs(value).
        """
        coefs, aux = {}, self.aux_names()
        for name, c in self.coefficients.items():
            terms = dict(c["terms"])
            for t in self.scale_terms:
                terms[t["name"]] = (None if values is None
                                    else float(t["relative"]) * abs(float(values[name])))
            total = quadrature_total(c["statistical"], terms,
                                     self.aux_joint_variance.get(name), aux)
            coefs[name] = {**plain(c), "terms": terms, "total": total}
        withheld = tuple(t["name"] for t in self.scale_terms) if values is None else ()
        return Systematics(coefs, self.terms, self.channels, self.aux_joint_variance,
                           self.correlations, self.budget_file, withheld)

    @classmethod
    def read(cls, f: Fields, key: str) -> Systematics | None:
        """Read and check the part (None when absent)."""
        s = f.sub(key, required=False)
        if s is None:
            return None
        s.unknown(_SYS_KEYS)
        t = s.elements("terms")
        terms = []
        for k in t.data if isinstance(t.data, Mapping) else ():
            e = t.sub(k)
            e.unknown(_TERM_KEYS)
            kind = e.string("kind")
            if kind not in TERM_KINDS:
                raise e.error("kind", "one of " + ", ".join(TERM_KINDS), kind)
            rel = e.number("relative", required=kind == "scale", minimum=0.0)
            terms.append({"name": e.string("name"), "kind": kind,
                          "source": e.string("source", required=False, empty=True) or "",
                          **({"relative": rel} if rel is not None else {}),
                          "note": e.string("note", required=False, empty=True) or ""})
        names = {x["name"] for x in terms}
        c = s.sub("coefficients")
        coefs = {}
        for name, _ in c.items():
            e = c.sub(name)
            e.unknown(_COEF_KEYS)
            sig = e.sub("terms")
            shift = e.sub("shift", required=False)
            direction = e.sub("direction", required=False)
            for term, _ in sig.items():
                if term not in names:
                    raise sig.error(term, "a term listed in systematics.terms", term)
            coefs[name] = {
                "statistical": e.number("statistical", minimum=0.0),
                "fit_sigma": e.number("fit_sigma", minimum=0.0),
                "terms": {k: sig.number(k, null=True, minimum=0.0) if sig.has(k) else None
                          for k, _ in sig.items()},
                "shift": {} if shift is None else {k: shift.number(k) for k, _ in
                                                   shift.items()},
                "total": e.number("total", minimum=0.0),
                **({} if direction is None else {"direction": {
                    k: direction.number(k) for k, _ in direction.items()}})}
        joint = s.sub("aux_joint_variance", required=False)
        budget = s.sub("budget_file", required=False)
        if budget is not None:
            budget.string("path")
            budget.string("sha256")
        return cls(coefs, terms, s.record("channels", required=False) or {},
                   {} if joint is None else {k: joint.number(k, minimum=0.0)
                                             for k, _ in joint.items()},
                   s.string("correlations", required=False, empty=True) or "",
                   None if budget is None else s.record("budget_file"),
                   s.strings("withheld", required=False) or ())


_BLIND_KEYS = ("blinded", "key_id", "spread_sigmas", "settings_sha256", "withheld",
               "unblinded_utc", "settings_sha256_at_unblinding", "blinded_result_sha256",
               "settings_changed_after_unblinding")


@dataclass(frozen=True)
class Blinding:
    """The blinding state of a result (see module docstring and ``docs/fit.md``).

    Attributes
    ----------
    blinded : bool
        The values are blinded (a secret offset is added to every free coefficient).
    key_id : str
        The id of the key file (random hex, also written in the key).
    spread_sigmas : float
        The offsets' spread, in units of each coefficient's sigma.
    settings_sha256 : str
        Hash of the fit's settings and inputs (:func:`fringe.fit.blinding.settings_hash`).
    withheld : tuple of str
        What the blinded result leaves out or changes besides the coefficient values.
    unblinded_utc : str or None
        When the key was used to unblind (UTC), for an unblinded result or a later fit.
    settings_sha256_at_unblinding : str or None
    blinded_result_sha256 : str or None
        SHA-256 of the blinded result file that was unblinded.
    settings_changed_after_unblinding : bool or None
        For a fit made with a key already used: whether its settings hash differs from the
        one at unblinding.
    """

    blinded: bool
    key_id: str
    spread_sigmas: float
    settings_sha256: str
    withheld: tuple = ()
    unblinded_utc: str | None = None
    settings_sha256_at_unblinding: str | None = None
    blinded_result_sha256: str | None = None
    settings_changed_after_unblinding: bool | None = None

    def __post_init__(self):
        object.__setattr__(self, "withheld", tuple(self.withheld))

    def to_dict(self) -> dict:
        """Plain JSON of the part (unset fields left out)."""
        return plain({k: getattr(self, k) for k in _BLIND_KEYS if getattr(self, k) is not None})

    def sentence(self) -> str:
        """What a person reads about the blinding state."""
        if self.blinded:
            return (f"BLINDED: every coefficient value carries a secret offset (key "
                    f"{self.key_id}, spread {self.spread_sigmas:g} sigma); limits and "
                    "headline numbers are blinded too")
        if self.settings_changed_after_unblinding is not None:
            changed = ("settings changed after unblinding" if
                       self.settings_changed_after_unblinding else
                       "settings unchanged since unblinding")
            return (f"fit made after unblinding (key {self.key_id} used {self.unblinded_utc}): "
                    f"{changed}")
        return (f"unblinded {self.unblinded_utc} with key {self.key_id}; settings hash at "
                f"unblinding {self.settings_sha256_at_unblinding}")

    @classmethod
    def read(cls, f: Fields, key: str) -> Blinding | None:
        """Read and check the part (None when absent)."""
        s = f.sub(key, required=False)
        if s is None:
            return None
        s.unknown(_BLIND_KEYS)
        flags = {}
        for k in ("blinded", "settings_changed_after_unblinding"):
            v = s.data.get(k)
            if (v is not None or k == "blinded") and not isinstance(v, bool):
                raise s.error(k, "true or false", v)
            flags[k] = v
        return cls(flags["blinded"], s.string("key_id"),
                   s.number("spread_sigmas", minimum=0.0), s.string("settings_sha256"),
                   s.strings("withheld", required=False) or (),
                   s.string("unblinded_utc", required=False),
                   s.string("settings_sha256_at_unblinding", required=False),
                   s.string("blinded_result_sha256", required=False),
                   flags["settings_changed_after_unblinding"])
