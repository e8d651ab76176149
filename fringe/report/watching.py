"""Following a folder of run files: pick up finished pieces, update the fit, keep a history.

:class:`Watch` is what ``fringe watch FOLDER --out DIR`` runs. Each call of :meth:`Watch.poll`
looks for run files (``*.h5``) in the folder that the fit has not seen, in name order, and adds
each to the :class:`~fringe.fit.growing.IncrementalFit` kept in ``DIR/state``. Only final
names are taken: fringe's writer writes to a hidden temporary name (``.NAME.fringe-...``) and
renames it when the file is whole, so a file still being written is never seen; a file that
fails to open or to read (a copy in progress, a foreign writer) is left for the next poll and
named in :attr:`Watch.waiting`, never fatal.

A run file that a writer holds in HDF5's SWMR mode (:class:`fringe.io.livewriter
.LiveRunWriter`) is followed while it grows: each poll takes its flushed whole turns after those
already in the fit, and the rest once the writer closes it; the files after it in name order
wait until then (their samples follow its own).

After the pieces of a poll, the outputs are rewritten, each whole or not at all:
``DIR/fit.json`` (the fit of all pieces so far, a fit result like ``fringe fit`` writes, without
a per-turn amplitudes file), ``DIR/report/`` (the report page of :mod:`fringe.report.build`),
``DIR/history.json`` (one entry per piece: days, each coefficient's value and sigma, the
forecast sigma of ``--plan`` at that span, the B0 / C0 diagnostics and the nuisances) and
``DIR/history.png``.
"""

from __future__ import annotations

import logging
from pathlib import Path

from fringe.errors import FitError, FringeError, InputFileError
from fringe.fit.growing import IncrementalFit, StillWritten
from fringe.io.atomic import TEMP_PATTERN, write_json_atomic

logger = logging.getLogger(__name__)

#: File names taken as run files (final names only; hidden temporary names are skipped).
RUN_SUFFIXES = (".h5", ".hdf5")


def finished_run_files(folder: Path) -> list[Path]:
    """Run files under their final names in ``folder``, in name order."""
    out = []
    for p in sorted(folder.iterdir()):
        if p.name.startswith(".") or TEMP_PATTERN.search(p.name) or not p.is_file():
            continue
        if p.suffix.lower() in RUN_SUFFIXES:
            out.append(p)
    return out


def forecast_sigmas(plan, days: float) -> dict[str, float]:
    """Forecast sigma of each coefficient at ``days`` (log-log interpolation of the plan)."""
    import numpy as np

    if plan is None or not plan.days:
        return {}
    d = np.asarray(plan.days, float)
    out = {}
    for name, sig in plan.sigma_vs_days.items():
        s = np.asarray(sig, float)
        ok = (d > 0) & np.isfinite(s) & (s > 0)
        if np.count_nonzero(ok) >= 2 and days > 0:
            out[name] = float(np.exp(np.interp(np.log(days), np.log(d[ok]), np.log(s[ok]))))
    return out


def history_entry(result, piece: dict, days: float, plan) -> dict:
    """One history entry for the fit ``result`` after ``piece``."""
    entry = {"piece": piece["name"], "days": days, **_range_of(piece),
             "n_accepted": result.statistics.n_turns_used,
             "coefficients": {n: {"value": e.value, "sigma": e.sigma}
                              for n, e in result.coefficients.items()},
             "forecast_sigma": forecast_sigmas(plan, days),
             "nuisance": {n: {"value": e.value, "sigma": e.sigma}
                          for n, e in result.nuisance.items()},
             "chi2_reduced": result.statistics.chi2_reduced,
             "warnings": [w.code for w in result.warnings]}
    h = result.harmonics
    if h is not None:
        for key in ("B0", "C0"):
            i = list(h.names).index(key)
            entry[key] = {"value": float(h.value[i]), "sigma": float(h.sigma[i])}
    return entry


def _range_of(piece: dict) -> dict:
    """The history's ``samples`` [start, stop) and ``being_written`` of a part of a file."""
    if piece.get("sha256_of", "file") == "file":
        return {}
    return {"samples": [piece["start"], piece["stop"]],
            "being_written": piece["being_written"]}


class Watch:
    """The watch of one folder into one output directory (module docstring).

    Parameters
    ----------
    folder : path
        Where the acquisition drops run files.
    out_dir : path
        Outputs and state (created).
    settings : FitSettings
    demod : DemodSettings, optional
    plan : PlanResult, optional
        The campaign's forecast (:func:`fringe.plan.forecast`), for the history.
    report : bool
        Rewrite the report page after each poll that added pieces.
    """

    def __init__(self, folder, out_dir, settings, demod=None, plan=None, report: bool = True):
        self.folder, self.out = Path(folder), Path(out_dir)
        if not self.folder.is_dir():
            raise InputFileError(self.folder, "folder", "an existing directory of run files")
        (self.out / "state").mkdir(parents=True, exist_ok=True)
        self.fit = IncrementalFit(self.out / "state", settings, demod)
        self.plan, self.report = plan, report
        self.history: list[dict] = self._read_history()
        #: file name -> reason, for files left for a later poll
        self.waiting: dict[str, str] = {}
        #: file name -> reason, for files that cannot join this campaign (not retried while
        #: this watch runs: a different site or apparatus, out of time order, ...)
        self.refused: dict[str, str] = {}

    def _read_history(self) -> list[dict]:
        import json

        path = self.out / "history.json"
        if not path.exists():
            return []
        try:
            return list(json.loads(path.read_text(encoding="utf-8"))["entries"])
        except (OSError, ValueError, KeyError, TypeError):
            logger.warning("%s: unreadable history, starting a new one", path)
            return []

    def pending(self) -> list[Path]:
        """Finished run files not yet in the fit."""
        return [p for p in finished_run_files(self.folder)
                if not self.fit.known(p.name) and p.name not in self.refused]

    def poll(self, limit: int | None = None) -> list[dict]:
        """Add the pending pieces (at most ``limit``); rewrite the outputs; return the entries."""
        added, held = [], None
        for path in self.pending():
            if limit is not None and len(added) >= limit:
                break
            if held is not None:          # its samples follow those of a file still written
                self.waiting[path.name] = f"after {held}, which is still being written"
                continue
            try:
                piece = self.fit.add_piece(str(path))
            except StillWritten as exc:
                self.waiting[path.name] = str(exc)
                held = path.name
                continue
            except (InputFileError, OSError) as exc:
                self.waiting[path.name] = str(exc).splitlines()[0]
                logger.info("%s: not readable yet, left for the next poll (%s)", path, exc)
                continue
            except FitError as exc:           # a piece that does not belong: never fatal
                self.refused[path.name] = str(exc).splitlines()[0]
                continue
            self.waiting.pop(path.name, None)
            added.append(self._after_piece(piece))
            if not piece.get("complete", True):
                held = path.name
        if added:
            self._write_outputs()
        return added

    def _after_piece(self, piece: dict) -> dict:
        days = self.fit.span_days()
        try:
            result = self.fit.result(str(self.folder))
        except FitError as exc:              # too little data for these coefficients yet
            result, why = None, str(exc)
        else:
            why = "fewer than 4 sidereal hours covered" if result is None else None
        if result is None:
            entry = {"piece": piece["name"], "days": days, **_range_of(piece), "waiting": why}
        else:
            entry = history_entry(result, piece, days, self.plan)
            self._result = result
        self.history.append(entry)
        return entry

    def _write_outputs(self) -> None:
        result = getattr(self, "_result", None)
        if result is not None:
            write_json_atomic(self.out / "fit.json", result.to_dict(), overwrite=True)
            if self.report:
                from fringe.report.build import build_report

                try:
                    build_report(self.out / "fit.json", self.out / "report", overwrite=True)
                except FringeError as exc:
                    logger.warning("report not rewritten: %s", exc)
        write_json_atomic(self.out / "history.json", {"format": "fringe-watch-history",
                                                      "version": 1, "entries": self.history},
                          overwrite=True)
        if any("coefficients" in e for e in self.history):
            from fringe.io.atomic import save_figure_atomic
            from fringe.report.figures.watch import plot_history

            fig = plot_history(self.history)[0].figure
            save_figure_atomic(fig, self.out / "history.png", overwrite=True)

