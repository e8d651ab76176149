"""Check a scenario file or a CSV-import metadata file without running anything.

:func:`check_input_file` tells the two kinds of TOML file apart by their sections, validates
the file as the stage that reads it would (a scenario: every section, including ``[noise]``,
``[systematics]`` and ``[plan]``, as ``fringe simulate`` and ``fringe plan`` read them; import
metadata: every section and the cross-checks of ``fringe import``, but not the CSV itself) and
returns a one-line summary. Nothing is simulated, fitted or written. It lives with the plan
because the plan is the lowest stage that reads every section of a scenario.
"""

from __future__ import annotations

import os
from dataclasses import dataclass

try:
    import tomllib
except ModuleNotFoundError:  # Python < 3.11
    import tomli as tomllib

from fringe.errors import InputFileError, check_regular_file

__all__ = ["FILE_KINDS", "CheckedFile", "check_input_file", "file_kind"]

#: Keys found only in a scenario, and only in import metadata (their common keys: site,
#: apparatus).
SCENARIO_ONLY = ("title", "campaign", "turntable", "theory", "coefficients", "noise",
                 "systematics", "plan")
METADATA_ONLY = ("epoch_utc", "columns", "units", "csv", "calibration", "gate", "azimuth_log")
#: The tables of a systematic budget file (``fringe fit --budget``).
BUDGET_ONLY = ("term", "scale")
#: The kinds of file :func:`check_input_file` recognises.
FILE_KINDS = ("scenario", "import metadata", "systematic budget")


@dataclass(frozen=True)
class CheckedFile:
    """A file that passed :func:`check_input_file`.

    Attributes
    ----------
    path : str
        The file as given.
    kind : str
        One of :data:`FILE_KINDS`.
    summary : str
        What the file describes, in a few words (one line).
    """

    path: str
    kind: str
    summary: str

    def line(self) -> str:
        """``PATH: valid KIND (SUMMARY)``."""
        return f"{self.path}: valid {self.kind} ({self.summary})"


def _read(path: str) -> dict:
    if os.path.lexists(path):             # a FIFO would block the read forever
        check_regular_file(path, "a scenario or import-metadata (TOML) file")
    try:
        with open(path, "rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError:
        raise InputFileError(path, "file", "expected an existing file") from None
    except OSError as exc:
        raise InputFileError(path, "file", f"cannot be read ({exc.strerror})") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputFileError(path, "TOML", f"not valid TOML ({exc})") from None
    except UnicodeDecodeError as exc:
        raise InputFileError(path, "file", f"expected UTF-8 text, got byte "
                             f"0x{exc.object[exc.start]:02x} at byte offset {exc.start}") \
            from None
    except RecursionError:
        raise InputFileError(path, "TOML", "expected tables and arrays nested less deeply "
                             "(too deep to read)") from None


def file_kind(doc: dict, path: str) -> str:
    """Which kind of file the parsed TOML ``doc`` is: the kind with more of its own keys.

    Raises
    ------
    InputFileError
        When it has keys of neither kind.
    """
    scenario = sum(k in doc for k in SCENARIO_ONLY)
    metadata = sum(k in doc for k in METADATA_ONLY)
    if scenario == metadata == 0 and any(k in doc for k in BUDGET_ONLY):
        return "systematic budget"
    if scenario == metadata == 0:
        found = ", ".join(sorted(doc)) or "nothing"
        raise InputFileError(path, "file", "expected a scenario (sections [campaign], "
                             "[turntable], [theory], ...), import metadata (epoch_utc, "
                             "[columns], [units], ...) or a systematic budget ([[term]], "
                             f"[[scale]]), found {found}")
    return "scenario" if scenario >= metadata else "import metadata"


def check_input_file(path: str | os.PathLike) -> CheckedFile:
    """Validate a scenario or import-metadata file; return what it describes.

    Parameters
    ----------
    path : str or os.PathLike
        A TOML file.

    Returns
    -------
    CheckedFile

    Raises
    ------
    FringeError
        The one-line error the stage reading the file would give (file, field, expected).

    Examples
    --------
    >>> check_input_file("examples/cavity_pair.toml").line()         # doctest: +SKIP
    'examples/cavity_pair.toml: valid scenario (cavity-pair at ..., 2 days ...)'
    """
    path = os.fspath(path)
    kind = file_kind(_read(path), path)
    summary = {"scenario": _scenario_summary, "import metadata": _metadata_summary,
               "systematic budget": _budget_summary}[kind](path)
    return CheckedFile(path, kind, summary)


def _budget_summary(path: str) -> str:
    """The declared terms of a budget file (whether they fit a theory is the fit's check)."""
    from fringe.io.budget_file import read_budget

    budget = read_budget(path)
    parts = [f"{len(budget.terms)} term(s)", f"{len(budget.scales)} scale(s)"]
    names = [t.name for t in budget.terms] + [s.name for s in budget.scales]
    return ", ".join(parts) + (": " + "; ".join(names) if names else "")


def _duration(seconds: float) -> str:
    if seconds >= 86400.0:
        return f"{seconds / 86400.0:g} days"
    if seconds >= 3600.0:
        return f"{seconds / 3600.0:g} h"
    return f"{seconds:g} s"


def _scenario_summary(path: str) -> str:
    from fringe.experiment.scenario import load_scenario
    from fringe.plan.settings import plan_settings
    from fringe.simulation.campaign import Systematics, noise_model_from_section

    sc = load_scenario(path)
    noise = noise_model_from_section(sc.sections.get("noise"), sc.source, sc.sample_interval_s)
    syst = Systematics.from_section(sc.sections.get("systematics"), sc.source)
    if "plan" in sc.sections:
        plan_settings(sc)
    where = sc.site.name or f"{sc.site.latitude_deg:g} deg N, {sc.site.longitude_deg:g} deg E"
    motion = sc.motion.to_dict()
    turning = f"{motion['motion']} rotation" + (f", {motion['period_s']:g} s per turn"
                                                 if "period_s" in motion else "")
    set_values = sum(1 for v in sc.coefficients.values() if v)
    parts = [f"{sc.apparatus.kind} at {where}",
             f"{_duration(sc.duration_s)} at {sc.sample_interval_s:g} s ({sc.n_samples} "
             "samples)",
             turning,
             f"theory {sc.theory.name}, {set_values} non-zero coefficient"
             + ("" if set_values == 1 else "s")]
    quiet = not (noise.h0 or noise.h2 or noise.hm1 or noise.hm2)
    parts.append("noise-free (no noise level)" if quiet else "noise model")
    active = [k for k, v in syst.to_dict().items() if v and k != "gap_length_s"
              and not k.endswith("_azimuth_deg")]
    parts.append(f"systematics: {', '.join(active)}" if active else "no systematics")
    if "plan" in sc.sections:
        parts.append("plan settings")
    return "; ".join(parts)


def _metadata_summary(path: str) -> str:
    from fringe.io.csvimport import check_import_metadata

    meta = check_import_metadata(path)
    site = meta["site"]
    where = site.name or f"{site.latitude_deg:g} deg N, {site.longitude_deg:g} deg E"
    cols = meta["columns"]
    units = meta["units"]
    shown = [f"{k} = {cols[k]!r} ({units[k]})" for k in ("time", "azimuth", "signal")
             if k in cols]
    extra = [k for k in cols if k not in ("time", "azimuth", "signal")]
    parts = [f"{meta['apparatus']['kind']} at {where}", "columns " + ", ".join(shown)]
    if extra:
        parts[-1] += ", " + ", ".join(f"{k} = {cols[k]!r} ({units[k]})" for k in extra)
    if "azimuth_log" in meta:
        parts.append("azimuth from a second device's log")
    optional = [f"[{k}]" for k in ("calibration", "gate", "azimuth_log") if k in meta]
    if optional:
        parts.append(" ".join(optional))
    return "; ".join(parts)
