r"""Round a value to its uncertainty (Particle Data Group rule) and format it.

Which function for which job:

* :func:`pdg_round` -- the rounded pair as mantissa strings and a common power of ten,
  ``(value_str, sigma_str, exponent)``; the building block of every table.
* :func:`format_value` -- one string, ``"(1.2 ± 3.4)×10⁻¹⁷"`` (``style="unicode"``),
  ``"$(1.2 \pm 3.4)\times10^{-17}$"`` (``"latex"``) or ``"1.2e-17 ± 3.4e-17"`` (``"plain"``).
* :func:`pdg_place` and :func:`format_interval` -- round other numbers (interval ends) to the
  decimal place the rule chose for the uncertainty, so a table row is rounded consistently.
* :func:`format_bound` -- a one-sided bound (``|value| + k sigma``), rounded *up* to two
  significant digits so the printed bound is never below the computed one (common practice).

The rule (Particle Data Group, Review of Particle Physics, Introduction, section 5.3
"Rounding"; section number as quoted in secondary sources, the PDG document itself not in hand):
take the three highest-order digits of the uncertainty; if they lie in 100-354 keep two
significant digits, in 355-949 keep one, in 950-999 round the uncertainty up to 1000 and keep
two. The value is rounded to the same decimal place.

All arithmetic is decimal (on the shortest decimal representation of each float, ``repr``), so
``0.0355`` is treated as the digits 355 and not as its binary neighbour 0.035499999...
"""

from __future__ import annotations

import math
from decimal import ROUND_CEILING, ROUND_FLOOR, ROUND_HALF_UP, Decimal, localcontext

from fringe.errors import ConfigError

__all__ = ["PLAIN_EXPONENTS", "STYLES", "ZERO_SIGMA_DIGITS", "format_bound", "format_interval",
           "format_mantissas", "format_value", "mantissa_str", "pdg_place", "pdg_round",
           "round_to_place", "superscript"]

#: Output styles of the formatters.
STYLES = ("unicode", "latex", "plain")

#: Significant digits kept for a value whose uncertainty is exactly zero (common practice).
ZERO_SIGMA_DIGITS = 3

#: Default display: no power of ten when the leading exponent lies in this closed range, so
#: 0.279 +- 0.012 and 1299.85 +- 0.12 print as they are (common practice).
PLAIN_EXPONENTS = (-2, 3)

_SUPERSCRIPT = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")
_PRECISION = 1200        # decimal digits: enough for |value| / sigma up to ~1e600


def _finite(x, field: str) -> Decimal:
    if isinstance(x, bool) or not isinstance(x, (int, float)) and not hasattr(x, "__float__"):
        raise ConfigError(f"rounding: {field}: expected a number, got {x!r}")
    try:
        f = float(x)
    except (TypeError, ValueError):
        raise ConfigError(f"rounding: {field}: expected a number, got {x!r}") from None
    if not math.isfinite(f):
        raise ConfigError(f"rounding: {field}: expected a finite number, got {f!r}")
    return Decimal(repr(f))


def _check_style(style: str) -> None:
    if style not in STYLES:
        raise ConfigError(f"rounding: style: expected one of {', '.join(STYLES)}, got {style!r}")


def superscript(n: int) -> str:
    """Unicode superscript digits of an integer, e.g. ``-17`` -> ``'⁻¹⁷'``."""
    return str(int(n)).translate(_SUPERSCRIPT)


def pdg_place(sigma: float) -> tuple[int, Decimal]:
    """Decimal place of the last kept digit, and the rounded uncertainty, by the PDG rule.

    Parameters
    ----------
    sigma : float
        Uncertainty (> 0, finite), any unit.

    Returns
    -------
    place : int
        Power of ten of the last kept digit (``-3`` for 0.012).
    sigma_rounded : Decimal
        The uncertainty rounded by the rule (exact decimal).

    Raises
    ------
    ConfigError
        ``sigma`` not finite or not positive.

    Examples
    --------
    >>> pdg_place(0.0354)
    (-3, Decimal('0.035'))
    >>> pdg_place(0.0355)
    (-2, Decimal('0.04'))
    >>> pdg_place(0.0950)
    (-2, Decimal('0.10'))
    """
    d = _finite(sigma, "sigma")
    if not d > 0:
        raise ConfigError(f"rounding: sigma: expected a positive number, got {float(sigma)!r}")
    with localcontext() as ctx:
        ctx.prec = _PRECISION
        e = d.adjusted()                           # power of ten of the leading digit
        digits = int(d.scaleb(2 - e).to_integral_value(rounding=ROUND_FLOOR))
        if digits <= 354:
            place = e - 1
            rounded = d.quantize(Decimal(1).scaleb(place), rounding=ROUND_HALF_UP)
        elif digits <= 949:
            place = e
            rounded = d.quantize(Decimal(1).scaleb(place), rounding=ROUND_HALF_UP)
        else:                                      # 950-999: up to 1000, two digits
            place = e
            rounded = Decimal(1).scaleb(e + 1).quantize(Decimal(1).scaleb(place))
    return place, rounded


def round_to_place(x: float | Decimal, place: int) -> Decimal:
    """``x`` rounded half away from zero to the decimal place ``10**place`` (exact decimal).

    A result of zero carries no sign.
    """
    d = x if isinstance(x, Decimal) else _finite(x, "value")
    with localcontext() as ctx:
        ctx.prec = _PRECISION
        r = d.quantize(Decimal(1).scaleb(place), rounding=ROUND_HALF_UP)
        if r == 0:
            r = abs(r)
    return r


def mantissa_str(d: Decimal, place: int, exponent: int) -> str:
    """Digits of ``d`` (already rounded to ``place``) in units of ``10**exponent``.

    The mantissa keeps ``max(0, exponent - place)`` decimals, i.e. exactly the rounded digits.
    ASCII minus sign.
    """
    decimals = max(0, exponent - place)
    with localcontext() as ctx:
        ctx.prec = _PRECISION
        m = d.scaleb(-exponent)
        text = format(m, f".{decimals}f")
    if text.startswith("-") and Decimal(text) == 0:
        text = text[1:]
    return text


def _display_exponent(*numbers: Decimal) -> int:
    biggest = max((abs(n) for n in numbers), default=Decimal(0))
    exp = 0 if biggest == 0 else biggest.adjusted()
    return 0 if PLAIN_EXPONENTS[0] <= exp <= PLAIN_EXPONENTS[1] else exp


def pdg_round(value: float, sigma: float, *, exponent: int | None = None) -> tuple[str, str, int]:
    """Round ``value`` and ``sigma`` by the PDG rule; mantissas in units of ``10**exponent``.

    Parameters
    ----------
    value : float
        Central value (finite, any sign), same unit as ``sigma``.
    sigma : float
        Uncertainty (finite, >= 0). For ``sigma == 0`` the rule does not apply: the value keeps
        :data:`ZERO_SIGMA_DIGITS` significant digits and the uncertainty prints as ``"0"``.
    exponent : int, optional
        Power of ten to display. Default: that of the leading digit of the larger of the
        rounded ``|value|`` and ``sigma``, or 0 when that lies in :data:`PLAIN_EXPONENTS`
        (or both are zero).

    Returns
    -------
    value_str, sigma_str : str
        Mantissas (ASCII minus), each with the decimals the rounding kept.
    exponent : int
        The power of ten they are in units of.

    Raises
    ------
    ConfigError
        A NaN or infinite input, or a negative ``sigma``.

    References
    ----------
    Particle Data Group, Review of Particle Physics, Introduction, section 5.3 "Rounding"
    (e.g. Phys. Rev. D 98, 030001 (2018); section number as quoted in secondary sources).

    Examples
    --------
    >>> pdg_round(12.2135, 0.03215)
    ('12.214', '0.032', 0)
    >>> pdg_round(12.2135, 0.03215, exponent=1)
    ('1.2214', '0.0032', 1)
    >>> pdg_round(-1.9e-15, 3.2e-15)
    ('-1.9', '3.2', -15)
    >>> pdg_round(-1.9e-15, 5.2e-15)      # digits 520: one significant digit
    ('-2', '5', -15)
    """
    v = _finite(value, "value")
    s = _finite(sigma, "sigma")
    if s < 0:
        raise ConfigError(f"rounding: sigma: expected a number >= 0, got {float(sigma)!r}")
    if exponent is not None and (isinstance(exponent, bool) or not isinstance(exponent, int)):
        raise ConfigError(f"rounding: exponent: expected an integer, got {exponent!r}")
    if s == 0:
        place = 0 if v == 0 else v.adjusted() - (ZERO_SIGMA_DIGITS - 1)
        v_r = round_to_place(v, place)
        exp = _display_exponent(v_r) if exponent is None else exponent
        return mantissa_str(v_r, place, exp), "0", exp
    place, s_r = pdg_place(float(s))
    v_r = round_to_place(v, place)
    exp = _display_exponent(v_r, s_r) if exponent is None else exponent
    return mantissa_str(v_r, place, exp), mantissa_str(s_r, place, exp), exp


def _unicode_minus(text: str) -> str:
    return text.replace("-", "−")


def format_mantissas(value_str: str, sigma_str: str, exponent: int, style: str = "unicode"
                     ) -> str:
    """Join :func:`pdg_round` output into one string in ``style`` (see :data:`STYLES`).

    With ``exponent == 0`` no power of ten is written.
    """
    _check_style(style)
    if style == "unicode":
        body = f"{_unicode_minus(value_str)} ± {sigma_str}"
        return body if exponent == 0 else f"({body})×10{superscript(exponent)}"
    if style == "latex":
        body = f"{value_str} \\pm {sigma_str}"
        return f"${body}$" if exponent == 0 else f"$({body})\\times10^{{{exponent}}}$"
    if exponent == 0:
        return f"{value_str} ± {sigma_str}"
    return f"{value_str}e{exponent} ± {sigma_str}e{exponent}"


def format_value(value: float, sigma: float, style: str = "unicode", *,
                 exponent: int | None = None) -> str:
    r"""``value ± sigma`` rounded by the PDG rule, as one string.

    Parameters
    ----------
    value, sigma : float
        Central value and 1-sigma uncertainty (same unit).
    style : {"unicode", "latex", "plain"}
        ``"(1.2 ± 3.4)×10⁻¹⁷"``, ``"$(1.2 \pm 3.4)\times10^{-17}$"`` or
        ``"1.2e-17 ± 3.4e-17"``.
    exponent : int, optional
        Power of ten to display (default as in :func:`pdg_round`).

    Examples
    --------
    >>> format_value(1.234e-17, 0.345e-17)
    '(1.23 ± 0.35)×10⁻¹⁷'
    >>> format_value(1.234e-17, 0.345e-17, "latex")
    '$(1.23 \\pm 0.35)\\times10^{-17}$'
    >>> format_value(1.234e-17, 0.345e-17, "plain")
    '1.23e-17 ± 0.35e-17'
    """
    _check_style(style)
    return format_mantissas(*pdg_round(value, sigma, exponent=exponent), style)


def format_interval(low: float, high: float, place: int, exponent: int,
                    style: str = "unicode") -> str:
    """Interval ``[low, high]`` rounded to the decimal place ``10**place``, in ``10**exponent``.

    Use the ``place`` of the value's uncertainty (:func:`pdg_place`) and the exponent of its
    :func:`pdg_round` so that the interval reads in the same digits as the value.

    Examples
    --------
    >>> format_interval(-2.2e-17, 4.6e-17, -18, -17)
    '[−2.2, 4.6]×10⁻¹⁷'
    """
    _check_style(style)
    lo = mantissa_str(round_to_place(low, place), place, exponent)
    hi = mantissa_str(round_to_place(high, place), place, exponent)
    if style == "unicode":
        body = f"[{_unicode_minus(lo)}, {_unicode_minus(hi)}]"
        return body if exponent == 0 else f"{body}×10{superscript(exponent)}"
    if style == "latex":
        return f"$[{lo}, {hi}]$" if exponent == 0 else f"$[{lo}, {hi}]\\times10^{{{exponent}}}$"
    if exponent == 0:
        return f"[{lo}, {hi}]"
    return f"[{lo}e{exponent}, {hi}e{exponent}]"


def format_bound(x: float, style: str = "unicode", digits: int = 2, *,
                 upward: bool = True) -> str:
    """A non-negative bound rounded *up* to ``digits`` significant digits.

    Rounding up keeps the printed bound at or above the computed one (common practice).
    ``upward=False`` rounds to the nearest instead (half up): for a size that is not a bound,
    such as an uncertainty in a table beside lines that print the same number.

    Examples
    --------
    >>> format_bound(3.01e-17)
    '3.1×10⁻¹⁷'
    >>> format_bound(9.96e-18, "plain")
    '1.0e-17'
    >>> format_bound(98.4)
    '99'
    """
    _check_style(style)
    d = _finite(x, "bound")
    if d < 0:
        raise ConfigError(f"rounding: bound: expected a number >= 0, got {float(x)!r}")
    if isinstance(digits, bool) or not isinstance(digits, int) or digits < 1:
        raise ConfigError(f"rounding: digits: expected an integer >= 1, got {digits!r}")
    if d == 0:
        return "0"
    with localcontext() as ctx:
        ctx.prec = _PRECISION
        mode = ROUND_CEILING if upward else ROUND_HALF_UP
        r = d.quantize(Decimal(1).scaleb(d.adjusted() - (digits - 1)), rounding=mode)
        e = r.adjusted()
        place = e - (digits - 1)
        r = r.quantize(Decimal(1).scaleb(place), rounding=mode)
    if PLAIN_EXPONENTS[0] <= e <= PLAIN_EXPONENTS[1]:
        e = 0
    m = mantissa_str(r, place, e)
    if style == "unicode":
        return m if e == 0 else f"{m}×10{superscript(e)}"
    if style == "latex":
        return f"${m}$" if e == 0 else f"${m}\\times10^{{{e}}}$"
    return m if e == 0 else f"{m}e{e}"
