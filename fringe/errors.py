"""The one family of errors and warnings fringe raises.

Every error a user can cause is a :class:`FringeError`. Its message is one line that names the
source (file or option), the field and what was expected; the command line prints exactly that
line and exits non-zero, with no traceback. Programming errors (bugs) are ordinary Python
exceptions and are not caught.
"""

from __future__ import annotations


class FringeError(Exception):
    """Base class of every user-facing fringe error (one-line message)."""

    exit_code = 2

    def __init__(self, message: str):
        one_line = " ".join(str(message).split())
        super().__init__(one_line)

    def __reduce__(self):
        # pickled as (class, message, attributes): a subclass whose __init__ takes other
        # arguments (InputFileError) is rebuilt in a process pool or on a dask worker as is
        return _rebuild, (type(self), self.args, dict(self.__dict__))


def _rebuild(cls, args, state):
    """Rebuild a pickled :class:`FringeError` without calling its ``__init__``."""
    exc = cls.__new__(cls)
    exc.args = args
    exc.__dict__.update(state)
    return exc


class ConfigError(FringeError):
    """A scenario, option or configuration value is invalid."""


class InputFileError(FringeError):
    """An input file is missing, unreadable or violates its format specification."""

    def __init__(self, path, obj: str, expected: str):
        self.path = str(path)
        self.obj = obj
        self.expected = expected
        super().__init__(f"{self.path}: {obj}: {expected}")


class OutputError(FringeError):
    """An output cannot be written (exists without overwrite, would replace an input, ...)."""


class FitError(FringeError):
    """The data cannot support the requested fit (too few turns, singular design, ...)."""


class FringeWarning(UserWarning):
    """Base class of fringe's warnings (diagnostics a user should read)."""


class SystematicsWarning(FringeWarning):
    """A diagnostic points to a systematic effect (e.g. B0 inconsistent with zero)."""


class DegeneracyWarning(FringeWarning):
    """The fit's normal matrix is ill-conditioned: some coefficients are nearly degenerate."""


class TimeScaleWarning(FringeWarning):
    """Leap-second table or UT1 information is dubious for the requested dates."""


class SimulationWarning(FringeWarning):
    """A simulated record is not what it may seem (e.g. no noise: no ``[noise]`` section)."""


class CampaignWarning(FringeWarning):
    """One campaign of a study failed (its seed and reason); the others were kept."""


def check_finite_number(value, source: str, field: str, *, positive: bool = False,
                        minimum: float | None = None, maximum: float | None = None) -> float:
    """Return ``value`` as a float, or raise :class:`ConfigError` naming ``source`` and ``field``.

    Parameters
    ----------
    value : object
        The value to check (bools and strings are rejected).
    source : str
        Where the value came from (file name, option, section).
    field : str
        The name of the field.
    positive : bool
        Require ``value > 0``.
    minimum, maximum : float, optional
        Inclusive bounds.
    """
    import math

    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ConfigError(f"{source}: {field}: expected a number, got {value!r}")
    x = float(value)
    if not math.isfinite(x):
        raise ConfigError(f"{source}: {field}: expected a finite number, got {value!r}")
    if positive and not x > 0:
        raise ConfigError(f"{source}: {field}: expected a positive number, got {value!r}")
    if minimum is not None and x < minimum:
        raise ConfigError(f"{source}: {field}: expected a value >= {minimum}, got {value!r}")
    if maximum is not None and x > maximum:
        raise ConfigError(f"{source}: {field}: expected a value <= {maximum}, got {value!r}")
    return x


def reject_unknown_fields(given, allowed, where: str, what: str = "unknown field") -> None:
    """Raise ConfigError for the first (sorted) name of ``given`` that is not in ``allowed``.

    The message reads "WHERE NAME: WHAT (expected some of ...)"; ``where`` ends with ":" or a
    section label.
    """
    unknown = sorted(set(given) - set(allowed))
    if unknown:
        raise ConfigError(f"{where} {unknown[0]}: {what} (expected some of "
                          f"{', '.join(sorted(allowed))})")


def check_regular_file(path, expected: str):
    """Refuse (:class:`InputFileError`) an input that is missing or not a regular file.

    A FIFO or a device would block a reader forever and a directory cannot be read as a file;
    nothing is opened here (``os.stat`` only). Returns ``path``.

    Parameters
    ----------
    path : str or os.PathLike
        The input.
    expected : str
        What the input should be, e.g. ``"a scenario (TOML) file"``.
    """
    import os
    import stat

    try:
        mode = os.stat(path).st_mode
    except FileNotFoundError:
        raise InputFileError(path, "file", f"expected an existing file: {expected}") from None
    except OSError as exc:
        raise InputFileError(path, "file", f"expected a readable file: {expected} "
                                           f"({exc.strerror})") from None
    if stat.S_ISREG(mode):
        return path
    kind = ("a directory" if stat.S_ISDIR(mode) else "a FIFO (named pipe)" if stat.S_ISFIFO(mode)
            else "a socket" if stat.S_ISSOCK(mode) else "a device")
    raise InputFileError(path, "file", f"expected a regular file: {expected}, got {kind}")
