"""A growing campaign: its pieces, the exact update after each one, and the state kept on disk.

:class:`IncrementalFit` is what ``fringe watch`` drives: :meth:`IncrementalFit.add_piece` runs
stage 1 on one new run file and updates the accumulated sums of :mod:`fringe.fit.incremental`;
:meth:`IncrementalFit.result` gives the :class:`~fringe.io.fit_result.FitResult` of all pieces so
far. The state lives in a directory:

* ``state.json`` — the settings, the first piece's metadata and one entry per piece (name,
  SHA-256, samples, times, turns);
* ``state.npz`` — the sums, and per turn its stage-1 status, residual RMS and the noise level it
  entered the sums with (17 bytes a turn);
* ``rows-NNNNN.npz`` — the design rows of each piece's turns, written once.

A piece is a sample range [start, stop) of a run file: a whole finished file, or the whole
turns that a writer holding the file in SWMR mode has flushed so far
(:class:`fringe.io.livewriter.LiveRunWriter`). The pieces of one such file follow each other;
the last is taken once the writer has closed it. Stage 1 of a range is the whole record's stage
1 there (the survey reads the file's first :data:`~fringe.demodulate.engine.SURVEY_SAMPLES`
samples, so a file being written is followed once that many are flushed), and a range ends
where a turn starts, so no turn is ever cut in two.

``state.json`` and ``state.npz`` are replaced together at the end of each update (each written
whole under a temporary name and renamed; the piece count in both must agree), so a watch
stopped at any point continues from the last complete update.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
from pathlib import Path

import numpy as np

from fringe.demodulate.engine import SURVEY_SAMPLES, last_turn_start, stage1_store, survey
from fringe.demodulate.sessions import MIN_SIDEREAL_PHASES
from fringe.demodulate.settings import DemodSettings
from fringe.demodulate.turn_store import TurnStore
from fringe.demodulate.turns import TurnTable, glitch_status
from fringe.errors import ConfigError, FitError
from fringe.fit.incremental import (
    add_contribution,
    add_groups,
    check_settings,
    epoch_offset_s,
    groups_zero,
    noise_levels_from,
    passes_from_sums,
    sums_zero,
    window_size,
)
from fringe.fit.passes import design_columns, design_labels
from fringe.fit.settings import FitSettings, default_free
from fringe.frames import sidereal_angle_rad, time_cautions_recorded, time_span_cautions
from fringe.io.atomic import signals_deferred, write_atomic, write_json_atomic
from fringe.io.runreader import open_run, sha256

STATE_VERSION = 2      # 2: pieces are sample ranges (start, stop, complete); 1 still read
_ROW_NAMES = ("c", "b", "jc", "jb", "phi", "ninv", "t")


class StillWritten(Exception):  # noqa: N818 - a state, not a failure
    """A file a writer still holds has nothing new to take yet (the message says why)."""


def _save_npz(path: Path, arrays: dict) -> None:
    def writer(tmp):
        with open(tmp, "wb") as fh:
            np.savez(fh, **arrays)
    write_atomic(path, writer, overwrite=True)


class IncrementalFit:
    """The fit of a campaign that grows piece by piece (module docstring).

    Parameters
    ----------
    state_dir : str or Path
        Directory of the state (created; an existing state is continued).
    settings : FitSettings
    demod : DemodSettings, optional
    """

    def __init__(self, state_dir, settings: FitSettings, demod: DemodSettings | None = None):
        self.dir = Path(state_dir)
        self.settings, self.demod = settings, demod or DemodSettings()
        self.pieces: list[dict] = []
        self.first: dict | None = None          # metadata of the first piece
        self.setup = None
        self.sums: dict | None = None
        self.raw = np.zeros(0, np.int8)          # stage-1 status before the glitch rule
        self.rms = np.zeros(0)
        self.level = np.zeros(0)                 # level in the sums (nan: not in them)
        self.size_used = 0
        self._rows_cache: dict[int, dict] = {}
        if (self.dir / "state.json").exists():
            self._load()

    # ------------------------------------------------------------------ state
    def _settings_record(self) -> dict:
        return {"fit": self.settings.to_dict(), "demodulation": self.demod.to_dict()}

    def _load(self) -> None:
        from fringe.fit.run import setup_from_run

        path = self.dir / "state.json"
        try:
            doc = json.loads(path.read_text(encoding="utf-8"))
            with np.load(self.dir / "state.npz") as z:
                arrays = {k: z[k] for k in z.files}
        except (OSError, ValueError, KeyError) as exc:
            raise ConfigError(f"{path}: unreadable watch state ({exc}); use a new state "
                              "directory") from None
        ours = json.loads(json.dumps(self._settings_record()))
        if doc.get("settings") != ours:
            theirs = doc.get("settings") or {}
            diff = sorted(f"{part}.{k}" for part in ours for k in ours[part]
                          if (theirs.get(part) or {}).get(k) != ours[part][k])
            raise ConfigError(f"{path}: settings: the state was made with other fit settings "
                              f"({', '.join(diff) or 'format'} differ); use a new state "
                              "directory")
        if int(arrays["n_pieces"][0]) != len(doc["pieces"]):
            raise ConfigError(f"{path}: pieces: state.json and state.npz disagree; use a new "
                              "state directory")
        self.pieces, self.first = doc["pieces"], doc["first"]
        if not Path(self.first["path"]).exists():
            raise ConfigError(f"{path}: first: the campaign's first piece "
                              f"{self.first['path']} is gone (it defines the site, apparatus "
                              "and epoch); use a new state directory")
        self.setup, _ = setup_from_run(self.first["path"], self.settings.theory,
                                       while_written=True)
        self.raw, self.rms, self.level = arrays["raw"], arrays["rms"], arrays["level"]
        self.size_used = int(arrays["size_used"][0])
        self.sums = {k[5:]: v for k, v in arrays.items() if k.startswith("sums_")}

    def _save(self) -> None:
        arrays = {"raw": self.raw, "rms": self.rms, "level": self.level,
                  "size_used": np.array([self.size_used]),
                  "n_pieces": np.array([len(self.pieces)]),
                  **{f"sums_{k}": v for k, v in self.sums.items()}}
        with signals_deferred():
            _save_npz(self.dir / "state.npz", arrays)
            write_json_atomic(self.dir / "state.json", {
                "state_version": STATE_VERSION, "settings": self._settings_record(),
                "first": self.first, "pieces": self.pieces}, overwrite=True)

    def _rows(self, i: int) -> dict:
        if i not in self._rows_cache:
            with np.load(self.dir / f"rows-{i:05d}.npz") as z:
                self._rows_cache = {i: {k: z[k] for k in _ROW_NAMES}}
        return self._rows_cache[i]

    # ------------------------------------------------------------------ pieces
    def known(self, name: str) -> bool:
        """True when the whole file of this name is in the fit (its last piece taken)."""
        return any(p["name"] == name and p.get("complete", True) for p in self.pieces)

    def consumed(self, name: str) -> int:
        """Samples of the file of this name already in the fit (0: none)."""
        mine = [p for p in self.pieces if p["name"] == name]
        return int(mine[-1].get("stop", mine[-1]["n_samples"])) if mine else 0

    def _check_piece(self, path: str, meta: dict) -> float:
        """The piece's time offset to the first piece's epoch, s; FitError if it does not fit."""
        for key in ("site", "apparatus", "signal_units"):
            if meta[key] != self.first[key]:
                raise FitError(f"{path}: {key}: {meta[key]} differs from the campaign's first "
                               f"piece ({self.first['name']}: {self.first[key]})")
        shift = epoch_offset_s(self.first["epoch_utc"], meta["epoch_utc"])
        if self.pieces and meta["time_first_s"] + shift <= self.pieces[-1]["time_last_s"]:
            raise FitError(f"{path}: samples/time: starts at or before the end of the previous "
                           f"piece ({self.pieces[-1]['name']}); pieces must follow in time")
        return shift

    def add_piece(self, path: str) -> dict:
        """Stage 1 on the new part of a run file and the exact update of the sums; its entry.

        The new part is the whole file, or for a file that a writer still holds in SWMR mode,
        its flushed whole turns after the samples already taken (then the entry's
        ``complete`` is False and the file is offered again later). On any error (the file, or
        an interrupt) the fit is back at its last saved state.

        Raises
        ------
        StillWritten
            The file is being written and has no new whole turn yet (or fewer than
            SURVEY_SAMPLES flushed samples, or a motion whose blocks need the whole record).
        """
        try:
            return self._add_piece(path)
        except BaseException:
            self._reset()        # the in-memory sums may be half updated: back to the state
            raise

    def _add_piece(self, path: str) -> dict:
        from fringe.fit.run import setup_from_run

        setup, meta = setup_from_run(path, self.settings.theory, while_written=True)
        if self.first is None:
            self.setup = setup
            self.first = {"name": Path(path).name, "path": str(path),
                          **{k: meta[k] for k in ("site", "apparatus", "signal_units",
                                                  "epoch_utc")}}
        candidates = check_settings(self.setup, self.settings)
        for ch in self.settings.regress:
            if ch not in meta["aux_channels"]:
                raise FitError(f"{path}: samples/{ch}: no such auxiliary channel (regress)")
        aux = tuple(self.settings.regress)
        with open_run(path, check_values=False, while_written=True) as run:
            start, stop = self._new_range(path, run, aux)
            shift = self._check_piece(path, {**meta, "time_first_s": _time_at(run, start)})
            store, info = stage1_store(path, self.demod, aux_channels=aux, glitch_rule=False,
                                       run=run, start=start, stop=stop)
            partial = run.being_written or start > 0
            part = {"start": start, "stop": stop, "complete": not run.being_written,
                    "being_written": run.being_written,
                    "file_time_first_s": run.time_first_s,
                    "time_first_s": _time_at(run, start), "time_last_s": _time_at(run, stop - 1),
                    "sha256": run.samples_sha256(start, stop) if partial else None,
                    "sha256_of": "samples" if partial else "file"}
        if part["sha256"] is None:
            part["sha256"] = sha256(path)
        elif part["complete"]:          # the rest of a followed file: also its final bytes
            part["file_sha256"] = sha256(path)
        table = store.load()
        if self.sums is None:
            k = len(design_labels(candidates, self.settings))
            self.sums = {**sums_zero(k), **groups_zero(k)}
        return self._commit_piece(path, {**meta, **part}, table, info, shift, candidates)

    def _new_range(self, path: str, run, aux: tuple[str, ...]) -> tuple[int, int]:
        """Samples [start, stop) of ``run`` not yet in the fit, cut at a turn while written."""
        name = Path(path).name
        start = self.consumed(name)
        if start:
            self._check_same_file(path, run, start)
        if not run.being_written:
            return start, run.n_samples
        n = run.n_samples
        if n < SURVEY_SAMPLES:
            raise StillWritten(f"being written: {n} samples flushed; followed from "
                               f"{SURVEY_SAMPLES} on (stage 1 surveys the first "
                               f"{SURVEY_SAMPLES})")
        info = survey(path, self.demod, aux, run=run)
        if info.block_starts is not None:
            raise StillWritten("being written: its motion reverses, and its blocks are cut "
                               "over the whole record: taken whole once the writer closes it")
        stop = last_turn_start(info, run, start, n)
        if stop is None:
            raise StillWritten(f"being written: {n} samples flushed, no whole turn after "
                               f"sample {start} yet")
        return start, stop

    def _check_same_file(self, path: str, run, start: int) -> None:
        """FitError unless ``run`` is the file whose samples [0, start) are in the fit."""
        last = [p for p in self.pieces if p["name"] == Path(path).name][-1]
        ok = (run.n_samples > start and run.epoch_utc == last.get("epoch_utc")
              and run.time_first_s == last.get("file_time_first_s")
              and _time_at(run, start - 1) + last["shift_s"] == last["time_last_s"])
        if not ok:
            raise FitError(f"{path}: samples: not the file whose samples 0-{start - 1} are "
                           f"in the fit (epoch, first time or time at sample {start - 1} "
                           "differ, or it is shorter now); pieces of a file must continue it")

    def _reset(self) -> None:
        """Forget what is in memory and read the last saved state (or start empty)."""
        self.pieces, self.first, self.sums, self.size_used = [], None, None, 0
        self.setup = None
        self.raw, self.rms, self.level = np.zeros(0, np.int8), np.zeros(0), np.zeros(0)
        self._rows_cache = {}
        if (self.dir / "state.json").exists():
            self._load()

    def _commit_piece(self, path, meta, table, info, shift, candidates) -> dict:
        i = len(self.pieces)
        rows = self._piece_rows(table, shift, candidates)
        _save_npz(self.dir / f"rows-{i:05d}.npz", rows)
        entry = {"name": Path(path).name, "path": str(path), "sha256": meta["sha256"],
                 "sha256_of": meta["sha256_of"],
                 **({"file_sha256": meta["file_sha256"]} if "file_sha256" in meta else {}),
                 "start": meta["start"], "stop": meta["stop"], "complete": meta["complete"],
                 "being_written": meta["being_written"], "epoch_utc": meta["epoch_utc"],
                 "file_time_first_s": meta["file_time_first_s"],
                 "n_samples": int(meta["stop"] - meta["start"]), "shift_s": shift,
                 "time_first_s": float(meta["time_first_s"]) + shift,
                 "time_last_s": float(meta["time_last_s"]) + shift,
                 "first_turn": int(self.raw.size), "n_turns": int(table.n_blocks),
                 "turn_period_s": info.turn_period_s,
                 "motion": info.motion.to_dict() if info.motion is not None else None}
        old_status = self.status()
        self.raw = np.concatenate([self.raw, table.status.astype(np.int8)])
        self.rms = np.concatenate([self.rms, table.residual_rms])
        self.level = np.concatenate([self.level, np.full(table.n_blocks, np.nan)])
        self.pieces.append(entry)
        self._rows_cache[i] = rows
        self._reweight(old_status)
        self._save()
        return entry

    def _piece_rows(self, table: TurnTable, shift: float, candidates) -> dict:
        sel = table.status == TurnTable.ACCEPTED
        t = table.t_mid_s[sel] + shift
        jc, jb = design_columns(self.setup, t, candidates, table, sel, self.settings)
        phi = sidereal_angle_rad(self.setup.epoch, t, self.setup.site.east_longitude_rad)
        return {"c": table.C[sel], "b": table.B[sel], "jc": jc, "jb": jb, "phi": phi,
                "ninv": table.ninv_2[sel], "t": t}

    def status(self) -> np.ndarray:
        """Stage-1 status of every turn so far, with the glitch rule over all of them."""
        status = self.raw.copy()
        glitch_status(status, self.rms, self.demod.glitch_threshold)
        return status

    def _reweight(self, old_status: np.ndarray) -> None:
        """Recompute the levels from the first changed turn on; move changed turns in the sums."""
        status = self.status()
        acc = status == TurnTable.ACCEPTED
        acc_idx = np.flatnonzero(acc)
        size = window_size(acc_idx.size)
        n_old = old_status.size
        flips = np.flatnonzero(old_status != status[:n_old])
        first = min(int(flips[0]) if flips.size else n_old, n_old)
        start = 0 if size != self.size_used else max(
            0, int(np.searchsorted(acc_idx, first)) - size // 2)
        new_level = np.full(status.size, np.nan)
        if acc_idx.size:
            new_level[acc_idx[start:]] = noise_levels_from(self.rms[acc_idx], start, size)
        lo = min(int(acc_idx[start]) if start < acc_idx.size else first, first)
        new_level[:lo] = self.level[:lo]
        old = self.level
        same = (old == new_level) | (np.isnan(old) & np.isnan(new_level))
        changed = np.flatnonzero(~same)
        self._move(changed, old, new_level)
        self.level, self.size_used = new_level, size

    @property
    def bootstrap(self) -> bool:
        """True when the bootstrap groups are kept (``uncertainty`` bootstrap)."""
        return self.settings.uncertainty == "bootstrap"

    def _first_accepted_t(self, status: np.ndarray) -> float:
        j = int(np.flatnonzero(status == TurnTable.ACCEPTED)[0])
        firsts = np.array([p["first_turn"] for p in self.pieces])
        i = int(np.searchsorted(firsts, j, side="right") - 1)
        p = self.pieces[i]
        raw = self.raw[p["first_turn"]:p["first_turn"] + p["n_turns"]]
        return float(self._rows(i)["t"][np.cumsum(raw == TurnTable.ACCEPTED)[j - p[
            "first_turn"]] - 1])

    def _check_groups(self, status: np.ndarray) -> None:
        """Rebuild the bootstrap groups if the first accepted turn is no longer their origin.

        (A glitch-rule change of the first turns: rare; the rebuild reads every piece.)
        """
        t0 = self._first_accepted_t(status)
        if self.sums["grp_t0"][0] == t0:
            return
        k = self.sums["grp_g"].shape[-1]
        self.sums.update(groups_zero(k))
        self.sums["grp_t0"][0] = t0
        for i, p in enumerate(self.pieces):
            lv = self.level[p["first_turn"]:p["first_turn"] + p["n_turns"]]
            raw = self.raw[p["first_turn"]:p["first_turn"] + p["n_turns"]]
            lv = lv[raw == TurnTable.ACCEPTED]
            keep = ~np.isnan(lv)
            rows = self._rows(i)
            add_groups(self.sums, {n: v[keep] for n, v in rows.items()}, lv[keep], 1.0,
                       self.settings.bootstrap_days)

    def _move(self, changed: np.ndarray, old: np.ndarray, new: np.ndarray) -> None:
        """Take the changed turns out of the sums with their old level, in with the new one."""
        firsts = np.array([p["first_turn"] for p in self.pieces])
        piece_of = np.searchsorted(firsts, changed, side="right") - 1
        for i in np.unique(piece_of):
            p = self.pieces[i]
            turns = changed[piece_of == i]
            raw = self.raw[p["first_turn"]:p["first_turn"] + p["n_turns"]]
            local = np.cumsum(raw == TurnTable.ACCEPTED) - 1      # row of each turn
            rows = self._rows(int(i))
            r = local[turns - p["first_turn"]]
            for level, sign in ((old[turns], -1.0), (new[turns], 1.0)):
                keep = ~np.isnan(level)
                sub = {k: v[r[keep]] for k, v in rows.items()}
                add_contribution(self.sums, sub, level[keep], sign)
                if self.bootstrap:
                    try:
                        add_groups(self.sums, sub, level[keep], sign,
                                   self.settings.bootstrap_days)
                    except ValueError:     # a turn before the first: rebuilt in result()
                        self.sums["grp_t0"][0] = -np.inf

    # ------------------------------------------------------------------ result
    def span_days(self) -> float:
        """Span from the first piece's first sample to the last piece's last sample, days."""
        return (self.pieces[-1]["time_last_s"] - self.pieces[0]["time_first_s"]) / 86400.0

    def n_sidereal_phases(self) -> int:
        """Occupied sidereal hours among the accepted turns."""
        return int(np.count_nonzero(np.round(self.sums["bins"]) > 0)) if self.sums else 0

    def result(self, source: str):
        """The :class:`~fringe.io.fit_result.FitResult` of all pieces so far (None: too early).

        None while the accepted turns sit at fewer than MIN_SIDEREAL_PHASES sidereal hours
        (stage 2 would be skipped; the watch waits for more data). ``source`` names the
        result's input (the watched folder).
        """
        from fringe.fit.stages import coefficients_from_passes, systematics_checks
        from fringe.io.fit_sections import FitWarning

        if not self.pieces or self.n_sidereal_phases() < MIN_SIDEREAL_PHASES:
            return None
        setup, settings = self.setup, self.settings
        candidates = check_settings(setup, settings)
        free = tuple(settings.free) if settings.free is not None else \
            default_free(setup, self.span_days())
        labels = design_labels(candidates, settings)
        wanted = design_labels(free, settings)
        idx = np.array([labels.index(n) for n in wanted])
        status = self.status()
        if self.bootstrap:
            self._check_groups(status)
        store = TurnStore(self.demod, status, self.rms)
        p = passes_from_sums(self.sums, idx, len(free), settings, store.median_accepted_rms())
        res = coefficients_from_passes(setup, p, settings, free)
        systematics_checks(setup, p.harmonics, res, free, settings, int(np.sum(store.accepted)))
        files = len({p["name"] for p in self.pieces})
        ranges = "" if files == len(self.pieces) else \
            f" in {len(self.pieces)} pieces (sample ranges of files followed while written)"
        res.notes.append(f"incremental fit of {files} run file(s){ranges} (fringe watch): "
                         "stage 1 per piece, stages 2-3 from accumulated normal equations")
        first, last = self.pieces[0], self.pieces[-1]
        with time_cautions_recorded():     # recorded as cautions, as fringe fit does
            res.warnings[:0] = [FitWarning(c.code, c.sentence, c.values) for c in
                                time_span_cautions(setup.epoch, first["time_first_s"],
                                                   last["time_last_s"])]
        return self._package(source, setup, settings, store, p.harmonics, res)

    def _package(self, source, setup, settings, store, harm, res):
        from types import SimpleNamespace

        from fringe.fit.run import _package
        from fringe.io.fit_sections import Motion

        first, last = self.pieces[0], self.pieces[-1]
        meta = {**self.first, "n_samples": sum(p["n_samples"] for p in self.pieces)}
        motion = Motion(**first["motion"]) if first["motion"] else None
        info = SimpleNamespace(turn_period_s=first["turn_period_s"], motion=motion)
        digest = hashlib.sha256("".join(f"{p['name']} {p['sha256']}\n"
                                        for p in self.pieces).encode()).hexdigest()
        span_s = last["time_last_s"] - first["time_first_s"]
        result = _package(source, setup, meta, settings, self.demod, info, store, harm, res,
                          span_s, digest, "local", 0.0, None)
        from fringe.fit.likelihood import likelihood_of

        likelihood = likelihood_of(setup, res, settings, span_s)   # combinable (fringe combine)
        return result if likelihood is None else dataclasses.replace(result,
                                                                     likelihood=likelihood)


def _time_at(run, i: int) -> float:
    """samples/time at sample ``i`` of an open run file (s since its epoch)."""
    return float(next(run.iter_chunks(1, ("time",), start=i, stop=i + 1))["time"][0])
