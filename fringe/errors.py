"""The one family of errors and warnings fringe raises.

Every error a user can cause is a :class:`FringeError`. Its message is one line that names the
source (file or option), the field and what was expected; the command line prints exactly that
line and exits non-zero, with no traceback. Programming errors (bugs) are ordinary Python
exceptions and are not caught.
"""

from __future__ import annotations

import threading
import warnings
from contextlib import contextmanager


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


@contextmanager
def warnings_kept_in_result():
    """Within: the warnings a fit shows are silenced, when called from the main thread.

    For callers that keep a fit's warnings from its result (``result.warnings``), such as a
    study's campaigns and a joint fit's runs. Python's warnings state is one per process, so
    in another thread (a dask worker's) nothing is changed: the warnings are shown there, and
    two fits side by side cannot undo each other's filters.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        yield


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


def nearest_name(name: str, known) -> str | None:
    """The name of ``known`` closest in spelling to ``name`` (None when none is close).

    Parameters
    ----------
    name : str
        The name given (a field, section, option or coefficient).
    known : iterable of str
        The names that would have been accepted.
    """
    import difflib

    known = [str(k) for k in known]
    close = difflib.get_close_matches(str(name), known, n=1, cutoff=0.6)
    if not close:          # a difference of case only ("KE_XY") is still a near miss
        lower = {k.lower(): k for k in known}
        close = [lower[n] for n in difflib.get_close_matches(str(name).lower(), list(lower),
                                                             n=1, cutoff=0.6)]
    return close[0] if close else None


def closest_hint(name, known) -> str:
    """``"; did you mean NAME?"`` for the known name nearest a misspelt one, else ``""``.

    For messages that list the known names themselves; :func:`nearest_name` finds the name.
    """
    near = nearest_name(name, known)
    return f"; did you mean {near}?" if near is not None else ""


def unknown_name(name: str, known, what: str = "field", *, ordered: bool = False,
                 shown=None) -> str:
    """The one wording of an unknown name: "NAME: unknown WHAT; did you mean X? (known: ...)".

    Every message about an unknown field, section, option, coefficient or setting uses it, so
    that the same mistake reads the same everywhere (a scenario, the import's metadata, the
    options ``--set``, ``--fix``, ``--free``, ``--target``). The caller puts the source (file,
    section, option) in front.

    Parameters
    ----------
    name : str
        The name given.
    known : iterable of str
        The accepted names (listed sorted unless ``ordered``).
    what : str
        What the name should have been ("field", "section", "coefficient of theory 'sme'").
    ordered : bool
        Keep the order of ``known`` in the list (e.g. the order of a theory's coefficients).
    shown : callable, optional
        How a name is written in the message (e.g. ``lambda s: f"[{s}]"`` for a section).
    """
    shown = shown or str
    return f"{shown(name)}: " + unknown_text(name, known, what, ordered=ordered, shown=shown)


def unknown_text(name: str, known, what: str = "field", *, ordered: bool = False,
                 shown=None) -> str:
    """:func:`unknown_name` without the leading "NAME: " (for messages that name it already)."""
    shown = shown or str
    names = list(known) if ordered else sorted(known)
    near = nearest_name(name, names)
    hint = f"; did you mean {shown(near)}?" if near is not None else ""
    return f"unknown {what}{hint} (known: {', '.join(shown(n) for n in names) or 'none'})"


def reject_unknown_fields(given, allowed, where: str, what: str = "field") -> None:
    """Raise ConfigError for the first (sorted) name of ``given`` that is not in ``allowed``.

    The message reads "WHERE NAME: unknown WHAT; did you mean X? (known: ...)"
    (:func:`unknown_name`); ``where`` ends with ":" or a section label.
    """
    unknown = sorted(set(given) - set(allowed))
    if unknown:
        raise ConfigError(f"{where} {unknown_name(unknown[0], allowed, what)}")


def output_exists(path) -> OutputError:
    """The one wording of an output that exists when replacing it was not asked for.

    The command line spells ``overwrite=True`` as its option ``--overwrite``.
    """
    return OutputError(f"{path}: exists (pass overwrite=True to replace it)")


def missing_input(path, expected: str) -> InputFileError:
    """The one wording of an input file that does not exist ("PATH: file: not found; ...").

    Parameters
    ----------
    path : str or os.PathLike
        The input as given.
    expected : str
        What it should be, e.g. ``"a scenario (TOML) file"``.
    """
    return InputFileError(path, "file", f"not found; expected {expected}; check the path")


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
        raise missing_input(path, expected) from None
    except OSError as exc:
        raise InputFileError(path, "file", f"expected a readable file: {expected} "
                                           f"({exc.strerror})") from None
    if stat.S_ISREG(mode):
        return path
    kind = ("a directory" if stat.S_ISDIR(mode) else "a FIFO (named pipe)" if stat.S_ISFIFO(mode)
            else "a socket" if stat.S_ISSOCK(mode) else "a device")
    raise InputFileError(path, "file", f"expected a regular file: {expected}, got {kind}")


def check_dataclass_keywords(cls, kwargs, where: str, what: str = "field") -> None:
    """Refuse keywords a dataclass ``cls`` does not take, or required ones that are missing.

    What would otherwise be a Python ``TypeError`` naming ``__init__`` becomes a
    :class:`ConfigError` in the words of a settings file: "WHERE NAME: unknown field; did you
    mean X? (known: ...)" or "WHERE NAME: missing (a required field)". Not a dataclass: nothing
    is checked.
    """
    import dataclasses

    if not dataclasses.is_dataclass(cls):
        return
    fields = [f for f in dataclasses.fields(cls) if f.init]
    reject_unknown_fields(kwargs, [f.name for f in fields], where, what)
    for f in fields:
        required = f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING
        if required and f.name not in kwargs:
            raise ConfigError(f"{where} {f.name}: missing (a required field)")


def not_utf8(path, exc: UnicodeDecodeError) -> InputFileError:
    """The one wording of a text input that is not UTF-8: the first bad byte and its offset.

    Parameters
    ----------
    path : str or os.PathLike
        The input.
    exc : UnicodeDecodeError
        The decoder's complaint (its codec text is not shown).
    """
    return InputFileError(path, "file", f"expected UTF-8 text, got byte "
                                        f"0x{exc.object[exc.start]:02x} at byte offset "
                                        f"{exc.start}; save it as UTF-8")
