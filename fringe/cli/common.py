"""Shared helpers of the command-line modules: error guard, output directory, progress bar.

The helpers serve the modules of ``fringe/cli/``: the error guard, the output directory, the
progress bar and the choices drawn from a registry. No physics here.
"""

from __future__ import annotations

import contextlib
import functools
import importlib
import re
import sys
import warnings
from pathlib import Path

import click

from fringe.errors import FringeError, FringeWarning

#: How the commands spell what the library's messages call a settings field or a keyword
#: argument (the library names what a Python caller passed; a user of ``fringe`` passed an
#: option). :func:`run_guarded` rewrites these names in the message of a FringeError.
OPTION_SPELLING = (
    ("FitSettings.free", "--free"),
    ("FitSettings.fixed", "--fix"),
    ("FitSettings.uncertainty", "--uncertainty"),
    ("FitSettings.bootstrap_days", "--bootstrap-days"),
    ("FitSettings.lab_c0", "--lab-c0"),
    ("FitSettings.regress", "--regress"),
    ("DemodSettings.min_samples", "--min-samples"),
    ("Scenario.with_coefficients", "--set"),
    ("plan_settings(free=...)", "--free"),
    ("engine='dask'", "--engine dask"),
    ("scheduler=ADDRESS", "--scheduler ADDRESS"),
    ("scratch_dir=DIR", "--scratch-dir DIR"),
    ("kt/is_", "--kt/--is"),
    ("overwrite=True", "--overwrite"),
    ("azimuth_log=PATH", "--azimuth-log FILE"),
    ("simulate(seed=...)", "--seed"),
)
# a name counts only where it stands alone (not inside a longer name or a path)
_SPELLING = re.compile(r"(?<![\w./\\-])(" + "|".join(re.escape(a) for a, _ in OPTION_SPELLING)
                       + r")(?![\w/\\-])")


def as_options(message: str) -> str:
    """Spell the library's field and argument names in ``message`` as the command's options.

    The spellings come from :data:`OPTION_SPELLING`.
    """
    table = dict(OPTION_SPELLING)
    return _SPELLING.sub(lambda m: table[m.group(1)], message)


def run_guarded(func):
    """Turn user errors into a one-line message and exit status 2."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        import warnings

        def show_warning(message, category, filename, lineno, file=None, line=None):
            if issubclass(category, FringeWarning):
                click.echo(f"warning: {message}", err=True)
            else:
                click.echo(f"warning: {category.__name__}: {message}", err=True)

        import signal as _signal

        def on_term(signum, frame):          # batch schedulers stop jobs with SIGTERM
            raise KeyboardInterrupt

        old = warnings.showwarning
        warnings.showwarning = show_warning
        try:
            old_term = _signal.signal(_signal.SIGTERM, on_term)
        except ValueError:                   # not in the main thread
            old_term = None
        try:
            return func(*args, **kwargs)
        except FringeError as exc:
            click.echo(f"error: {as_options(str(exc))}", err=True)
            sys.exit(exc.exit_code)
        except KeyboardInterrupt:
            click.echo("error: interrupted; no partial output was kept", err=True)
            sys.exit(130)
        finally:
            warnings.showwarning = old
            if old_term is not None:
                _signal.signal(_signal.SIGTERM, old_term)

    return wrapper


@contextlib.contextmanager
def warnings_once():
    """Around a fit: print each of its warnings once, as the result's summary does.

    Yields a list; append the :class:`~fringe.io.fit_result.FitResult` to it. A FringeWarning
    raised inside whose sentence is one of the result's warning records is not echoed to
    stderr (the summary prints it); any other warning is shown as usual when the block ends.
    """
    results: list = []
    try:
        with warnings.catch_warnings(record=True) as caught:
            yield results
    finally:
        recorded = {w.sentence for r in results for w in r.warnings}
        for w in caught:
            if not (issubclass(w.category, FringeWarning) and str(w.message) in recorded):
                warnings.showwarning(w.message, w.category, w.filename, w.lineno)


def out_dir(path: str) -> Path:
    """Return ``path`` as a Path, creating the directory (and its parents) if missing."""
    out = Path(path)
    out.mkdir(parents=True, exist_ok=True)
    return out


def progress(total: int, label: str):
    """A click progress bar on stderr when the job is long, else a no-op context."""
    import contextlib

    if total < 2_000_000 or not sys.stderr.isatty():
        @contextlib.contextmanager
        def _null():
            class _P:
                def update(self, n):
                    pass
            yield _P()
        return _null()
    return click.progressbar(length=total, label=label, file=sys.stderr)




class RegistryChoice(click.Choice):
    """A :class:`click.Choice` whose names are the keys of a registry of the library.

    The registry (``module`` and ``attribute``, e.g. ``"fringe.theories", "THEORIES"``) is
    imported when click first needs the names (help, parsing, completion), so ``fringe --help``
    and the other commands do not import the fit or the demodulation.
    """

    def __init__(self, module: str, attribute: str, case_sensitive: bool = True):
        self.registry = (module, attribute)
        self.case_sensitive = case_sensitive

    @property
    def choices(self) -> tuple[str, ...]:
        """The registry's names, imported on first use."""
        module, attribute = self.registry
        return tuple(getattr(importlib.import_module(module), attribute))
