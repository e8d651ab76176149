"""Shared helpers of the command-line modules: error guard, output directory, progress bar.

The helpers serve the modules of ``fringe/cli/``: the error guard, the output directory, the
progress bar and the choices drawn from a registry. No physics here.
"""

from __future__ import annotations

import contextlib
import functools
import importlib
import logging
import re
import signal
import sys
import warnings
from pathlib import Path

import click

from fringe.errors import FringeError, FringeWarning, OutputError

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
    ("noise_free=True", "--noise-free"),
    ("azimuth_log=PATH", "--azimuth-log FILE"),
    ("simulate(seed=...)", "--seed"),
    ("StudySettings.campaigns", "--campaigns"),
    ("StudySettings.seed", "--seed"),
    ("StudySettings.mode", "--mode"),
    ("StudySettings.inject_sigma", "--inject-sigma"),
    ("StudySettings.vary", "--vary"),
    ("StudySettings.workers", "--workers"),
    ("scheduler_file=FILE", "--scheduler-file FILE"),
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


def _interrupted(signum: int) -> None:
    """Print the one line of an interrupted command and exit 128 + the signal number."""
    name = "SIGTERM" if signum == signal.SIGTERM else "SIGINT"
    click.echo("error: interrupted; no partial output was kept", err=True)
    logging.getLogger(__name__).info("stopped by %s", name)
    sys.exit(128 + signum)


def _exit_unless_interrupted(line: str, code: int) -> None:
    """Print ``line`` and exit ``code``, unless an interrupt came meanwhile (then 130/143)."""
    from fringe.io.atomic import interrupt_received

    if interrupt_received() is not None:
        _interrupted(interrupt_received())
    click.echo(line, err=True)
    sys.exit(code)


def run_guarded(func):
    """Turn user errors, environment failures and interrupts into one line and an exit status.

    A :class:`~fringe.errors.FringeError` exits with its ``exit_code`` (2); an :class:`OSError`
    that no writer or reader turned into one (the operating system refused something) exits 1
    with its path and cause; SIGINT and SIGTERM (what batch schedulers send) exit 130 and 143.
    An interrupt that something swallowed on the way (a clean-up callback) still counts: the
    command's outputs are discarded (:mod:`fringe.io.outputset`) and it exits 130/143.
    """

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        import warnings

        from fringe.io.atomic import clear_interrupt, interrupt_received, note_interrupt

        def show_warning(message, category, filename, lineno, file=None, line=None):
            if issubclass(category, FringeWarning):
                click.echo(f"warning: {message}", err=True)
            else:
                click.echo(f"warning: {category.__name__}: {message}", err=True)

        exiting = []         # once the command is ending, a signal is noted, not raised

        def on_signal(signum, frame):
            note_interrupt(signum)
            if not exiting:
                raise KeyboardInterrupt

        old = warnings.showwarning
        warnings.showwarning = show_warning
        clear_interrupt()
        old_handlers = {}
        for sig in (signal.SIGINT, signal.SIGTERM):
            try:
                old_handlers[sig] = signal.signal(sig, on_signal)
            except ValueError:               # not in the main thread
                pass
        try:
            try:
                result = func(*args, **kwargs)
            except FringeError as exc:
                exiting.append(True)
                _exit_unless_interrupted(f"error: {as_options(str(exc))}", exc.exit_code)
            except KeyboardInterrupt:
                exiting.append(True)
                _interrupted(interrupt_received() or signal.SIGINT)
            except OSError as exc:
                exiting.append(True)
                where = f"{exc.filename}: " if exc.filename else ""
                _exit_unless_interrupted(f"error: {where}{exc.strerror or exc}", 1)
            exiting.append(True)
            if interrupt_received() is not None:     # swallowed on the way, still an interrupt
                _interrupted(interrupt_received())
            return result
        except KeyboardInterrupt:            # raced with the handling of another outcome
            exiting.append(True)
            _interrupted(interrupt_received() or signal.SIGINT)
        finally:
            warnings.showwarning = old
            for sig, handler in old_handlers.items():
                signal.signal(sig, handler)
            clear_interrupt()                # a later write in this process is not refused

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
    """Return ``path`` as a Path, creating the directory (and its parents) if missing.

    A path that exists and is not a directory, or a directory that cannot be created, is an
    :class:`~fringe.errors.OutputError` naming it and the fix.
    """
    from fringe.io.atomic import output_error

    out = Path(path)
    if out.exists() and not out.is_dir():
        raise OutputError(f"{out}: exists and is not a directory; remove it or choose another "
                          "--out")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise output_error(out, exc) from None
    return out


def note_first_compile() -> None:
    """On a terminal, say once that the compiled kernel is built now (first run after install).

    Nothing is printed when stderr is not a terminal or when compiled code is already cached
    (:func:`fringe.demodulate.kernel_cache.cache_is_warm`).
    """
    if not sys.stderr.isatty() or quiet():
        return
    from fringe.demodulate.kernel_cache import cache_is_warm

    if not cache_is_warm():
        click.echo("note: compiling the demodulation kernel (the first run after an install "
                   "takes 6-9 s more; later runs reuse it)", err=True)


# -- verbosity -----------------------------------------------------------------------------
#: The verbosity of the running command: ``verbose`` (count of -v) and ``quiet`` (-q). Reset by
#: the group at the start of every invocation; -v/-q before or after the command both count.
VERBOSITY = {"verbose": 0, "quiet": False}

_LOG_FORMAT = "%(levelname)s %(name)s: %(message)s"


def reset_verbosity(verbose: int = 0, quiet: bool = False) -> None:
    """Start an invocation with the group's -v count and -q flag, and set the log level."""
    VERBOSITY.update(verbose=0, quiet=False)
    _apply_verbosity(verbose, quiet)


def _apply_verbosity(verbose: int, quiet: bool) -> None:
    VERBOSITY["verbose"] = max(VERBOSITY["verbose"], int(verbose or 0))
    VERBOSITY["quiet"] = VERBOSITY["quiet"] or bool(quiet)
    if VERBOSITY["quiet"]:
        level = logging.ERROR
    else:
        level = logging.WARNING - 10 * min(VERBOSITY["verbose"], 2)
    logging.basicConfig(level=level, format=_LOG_FORMAT)
    logging.getLogger().setLevel(level)


def quiet() -> bool:
    """True when -q was given: no info lines, no notes, no progress."""
    return VERBOSITY["quiet"]


def info(line: str) -> None:
    """Print an information line on stderr (a step, a note), unless -q was given."""
    if not quiet():
        click.echo(line, err=True)


def _verbosity_callback(ctx, param, value):
    if param.name == "verbose":
        _apply_verbosity(value, False)
    else:
        _apply_verbosity(0, value)
    return value


VERBOSE_HELP = "More log output on stderr (-vv for debug); also accepted after the command."
QUIET_HELP = ("Only results, warnings and errors: no information lines and no progress bar; "
              "also accepted after the command.")


def verbosity_options(func):
    """Add -v/--verbose and -q/--quiet to a command (the same flags as before the command)."""
    func = click.option("-q", "--quiet", "quiet", is_flag=True, expose_value=False,
                        callback=_verbosity_callback, help=QUIET_HELP)(func)
    return click.option("-v", "--verbose", "verbose", count=True, expose_value=False,
                        callback=_verbosity_callback, help=VERBOSE_HELP)(func)


# -- progress --------------------------------------------------------------------------------
def progress_shown() -> bool:
    """True when a progress bar may be drawn: stderr is a terminal, no -q, not under pytest."""
    import os

    return (sys.stderr.isatty() and not quiet()
            and "PYTEST_CURRENT_TEST" not in os.environ)


class _NoBar:
    """What :func:`progress` yields when no bar is drawn: every call does nothing."""

    def update(self, n: int) -> None:
        """Ignore ``n`` units of progress."""

    def then(self, line: str) -> None:
        """Ignore the next step's line."""


class _Bar:
    """A click progress bar with :meth:`then`: close the bar and say what comes next."""

    def __init__(self, bar):
        self._bar = bar
        self._closed = False

    def update(self, n: int) -> None:
        """Advance the bar by ``n`` units."""
        if not self._closed:
            self._bar.update(n)

    def then(self, line: str) -> None:
        """Finish the bar now and print ``line`` (the step that follows, e.g. stages 2-3)."""
        if not self._closed:
            self._closed = True
            self._bar.render_finish()
            click.echo(line, err=True)

    def close(self) -> None:
        """Finish the bar (once)."""
        if not self._closed:
            self._closed = True
            self._bar.render_finish()


@contextlib.contextmanager
def _bar(total: int, label: str):
    bar = _Bar(click.progressbar(length=int(total), label=label, file=sys.stderr,
                                 show_eta=True, show_percent=True))
    try:
        yield bar
    finally:
        bar.close()


def progress(total: int, label: str, *, min_total: int = 2_000_000):
    """A progress bar on stderr with the time left, on a terminal only; else a no-op.

    Parameters
    ----------
    total : int
        Units of work (samples, bytes, campaigns).
    label : str
        What is being done, e.g. ``"simulate"``.
    min_total : int
        Below this many units the job is short and no bar is drawn (default two million
        samples, a few seconds of work).

    Returns
    -------
    context manager
        Yields an object with ``update(n)`` and ``then(line)`` (finish the bar, print the next
        step's line). Never draws in a pipe, under pytest or with -q.
    """
    if total < max(min_total, 1) or not progress_shown():
        return contextlib.nullcontext(_NoBar())
    return _bar(total, label)


@contextlib.contextmanager
def step(label: str):
    """Say on a terminal that a step without a count has started, and when it is done.

    For steps that can take a few seconds but report no progress of their own (stages 2-3 of
    a fit, a forecast, the report's figures). Prints nothing in a pipe, under pytest or with -q.
    """
    import time

    if not progress_shown():
        yield
        return
    t0 = time.monotonic()
    click.echo(f"{label} ...", err=True, nl=False)
    try:
        yield
    finally:
        click.echo(f" {time.monotonic() - t0:.1f} s", err=True)


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
