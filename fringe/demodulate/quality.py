"""The quality summary of a run file, read before fitting (``fringe inspect``).

:func:`inspect_run` streams the record once for the sample statistics (span, rate, gaps, NaNs),
runs stage 1 (:func:`fringe.demodulate.engine.run_stage1`) for the turns (count, period, rate
stability, glitches), states the turntable motion found in the azimuth with its block rule and
the samples left out (:mod:`fringe.demodulate.motion`), lists the per-session 2 theta
amplitudes with the chi^2 of their agreement (:mod:`fringe.demodulate.sessions`), and computes,
on the first ``max_spectral_samples`` samples laid on a regular grid (missing samples NaN), the
overlapping Allan deviation of the fractional signal and its amplitude spectrum around twice the
rotation frequency, where the sidereal sidebands 2 f_R +- f_sid, 2 f_R +- 2 f_sid are marked.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fringe.constants import STELLAR_DAY_S
from fringe.demodulate.engine import run_stage1
from fringe.demodulate.motion import moving_mask
from fringe.demodulate.sessions import MIN_SIDEREAL_PHASES, SessionBuilder
from fringe.demodulate.settings import DemodSettings
from fringe.frames import Epoch, sidereal_angle_rad
from fringe.io.fit_result import session_lines
from fringe.io.fit_sections import Motion, Sessions
from fringe.io.records import plain
from fringe.io.runreader import open_run
from fringe.noise.allan import AllanResult, overlapping_adev
from fringe.text_table import number, text_table

MAX_SPECTRAL_SAMPLES = 1 << 22


@dataclass(frozen=True)
class InspectReport:
    """What ``fringe inspect`` prints and plots (plain numbers; arrays for the figures)."""

    meta: dict
    stats: dict
    allan: AllanResult
    spectrum_f_hz: np.ndarray
    spectrum_amp: np.ndarray
    lines_hz: dict
    motion: Motion | None = None
    sessions: Sessions | None = None

    def summary(self) -> str:
        """The report as plain text lines.

        Site, apparatus, epoch and span; sampling, gaps and NaN samples; turns (period, scatter,
        accepted/glitch/partial); median per-turn residual RMS in signal units; and the Allan
        deviation of the fractional signal per averaging time tau (s).
        """
        s, m = self.stats, self.meta
        lines = [f"run file {m['path']}",
                 f"site: lat {m['site']['latitude_deg']:.4f} deg, lon "
                 f"{m['site']['longitude_deg']:.4f} deg; apparatus {m['apparatus']['kind']}; "
                 f"signal units {m['signal_units']}",
                 f"epoch {m['epoch_utc']}; span {s['span_s'] / 86400:.3f} d "
                 f"({s['span_s']:.1f} s); {s['n_samples']} samples at "
                 f"{s['sample_interval_s']:.4g} s (median)",
                 f"gaps (> 2 x median interval): {s['n_gaps']}, total {s['gap_total_s']:.1f} s, "
                 f"longest {s['gap_longest_s']:.1f} s",
                 f"NaN samples: {s['n_nan']} ({100 * s['n_nan'] / max(s['n_samples'], 1):.3f} %)",
                 f"turns: {s['n_turns']} (period {s['turn_period_s']:.6g} s, turn-to-turn "
                 f"period scatter {_scatter_text(s)}); accepted "
                 f"{s['n_accepted']}, glitch {s['n_glitch']}, partial {s['n_partial']}",
                 f"per-turn residual rms (median): {s['residual_rms']:.3g} {m['signal_units']}"]
        if self.motion is not None:
            lines += [f"motion: {self.motion.describe()}", f"  a block is {self.motion.block_rule}"]
            if self.motion.excluded_samples_rule:
                lines.append(f"  left out: {self.motion.excluded_samples_rule} "
                             f"({s.get('n_moving_excluded', 0)} samples)")
        if self.sessions is not None:
            lines += session_lines(self.sessions)
            if self.sessions.n_sidereal_phases < MIN_SIDEREAL_PHASES:
                lines.append(f"  fewer than {MIN_SIDEREAL_PHASES} distinct sidereal phases: "
                             "fringe fit skips the sidereal stage; these amplitudes are the "
                             "result")
        lines.append("Allan deviation of the fractional signal:")
        lines += text_table(["tau [s]", "sigma_y"],
                            [[number(tau, ".4g"), number(dev, ".3e")]
                             for tau, dev in zip(self.allan.tau_s, self.allan.adev)
                             if np.isfinite(dev)], left=0)
        return "\n".join(lines)

    def to_dict(self) -> dict:
        """The run's metadata, sample and turn statistics, Allan deviation and marked lines (Hz).

        Plain JSON-ready types; the spectrum arrays are left out.
        """
        out = {"meta": self.meta, "stats": self.stats, "allan": self.allan.to_dict(),
               "lines_hz": self.lines_hz}
        if self.motion is not None:
            out["motion"] = self.motion.to_dict()
        if self.sessions is not None:
            out["sessions"] = plain(self.sessions.to_dict())     # NaN (one session) -> null
        return out


def _scatter_text(s: dict) -> str:
    """The turn-to-turn period scatter in words; 0 below the rounding of the time stamps.

    Float64 times of magnitude up to the span T carry a rounding of about eps * T, so a
    relative scatter below 4 eps T / T_R (T_R the turn period) is rounding, not motion.
    """
    rel, period = s.get("turn_duration_rel_std"), s.get("turn_period_s")
    if rel is None or not np.isfinite(rel):
        return "- (too few turns)"
    floor = 0.0
    if period and np.isfinite(period) and period > 0:
        floor = 4.0 * np.finfo(float).eps * max(s.get("span_s", 0.0), period) / period
    text = number(rel, ".2e", zero_below=floor)
    return "0, below the rounding of the time stamps" if text == "0" else f"{text} relative rms"


class _TurnClock:
    """Instants at which the unwrapped table angle passes whole turns, streamed over chunks.

    Crossing instants are interpolated linearly between the two samples around each crossing,
    so the turn periods they give are not limited by the sampling interval.
    """

    def __init__(self):
        self.prev = None          # (t, unwrapped theta) of the last sample seen
        self.ref = None
        self.sign = 1.0
        self.times = []

    def feed(self, t: np.ndarray, azimuth_rad: np.ndarray) -> None:
        th = np.unwrap(np.pi - azimuth_rad)
        if self.prev is None:
            self.ref = th[0]
            self.sign = 1.0 if th[-1] >= th[0] else -1.0
            tt, tht = t, th
        else:
            th = th + (self.prev[1] + np.angle(np.exp(1j * (th[0] - self.prev[1]))) - th[0])
            tt, tht = np.concatenate([[self.prev[0]], t]), np.concatenate([[self.prev[1]], th])
        u = self.sign * (tht - self.ref) / (2 * np.pi)
        k = np.floor(u)
        i = np.flatnonzero(np.diff(k) > 0)
        level = k[i + 1]
        frac = (level - u[i]) / np.maximum(u[i + 1] - u[i], 1e-300)
        self.times.append(tt[i] + frac * (tt[i + 1] - tt[i]))
        self.prev = (float(t[-1]), float(th[-1]))

    def periods(self) -> np.ndarray:
        c = np.concatenate(self.times) if self.times else np.zeros(0)
        p = np.diff(c)
        if p.size:
            p = p[p < 1.5 * np.median(p)]        # drop periods spanning a gap
        return p


class _RestCounter:
    """Samples not at rest (:func:`fringe.demodulate.motion.moving_mask`), streamed.

    Each chunk is judged when the next arrives, so its last sample sees its successor.
    """

    def __init__(self, tolerance_rad: float):
        self.tol = tolerance_rad
        self.prev = None          # azimuth of the sample before the held chunk
        self.held = None
        self.count = 0

    def feed(self, azimuth_rad: np.ndarray) -> None:
        if self.held is not None and azimuth_rad.size:
            self._judge(float(azimuth_rad[0]))
        self.held = np.array(azimuth_rad, float)

    def _judge(self, next_rad) -> None:
        self.count += int(np.sum(moving_mask(self.held, self.tol, self.prev, next_rad)))
        self.prev = float(self.held[-1]) if self.held.size else self.prev

    def finish(self) -> int:
        if self.held is not None:
            self._judge(None)
            self.held = None
        return self.count


def _fractional_scale(meta: dict) -> float:
    if meta["signal_units"] == "Hz" and meta["apparatus"].get("carrier_hz"):
        return 1.0 / float(meta["apparatus"]["carrier_hz"])
    return 1.0


def inspect_run(path: str, demod: DemodSettings | None = None,
                max_spectral_samples: int = MAX_SPECTRAL_SAMPLES) -> InspectReport:
    """Build the :class:`InspectReport` of a run file."""
    demod = demod or DemodSettings()
    with open_run(path) as run:
        meta = run.to_dict()
        n_nan = 0
        gaps = []
        last_t = None
        dts = []
        head_t, head_y = [], []
        kept = 0
        clock = _TurnClock()
        rest = _RestCounter(np.radians(demod.rest_tolerance_deg))
        for ch in run.iter_chunks(channels=("time", "signal", "azimuth")):
            t, y = ch["time"], ch["signal"]
            clock.feed(t, ch["azimuth"])
            rest.feed(ch["azimuth"])
            n_nan += int(np.sum(~np.isfinite(y)))
            d = np.diff(t) if last_t is None else np.diff(np.concatenate([[last_t], t]))
            dts.append(d[: 10000])
            gaps.append(d)
            last_t = float(t[-1])
            if kept < max_spectral_samples:
                take = min(t.size, max_spectral_samples - kept)
                head_t.append(t[:take].copy())
                head_y.append(y[:take].copy())
                kept += take
        dt_all = np.concatenate(gaps) if gaps else np.zeros(0)
    tau0 = float(np.median(np.concatenate(dts))) if dts else 1.0
    big = dt_all[dt_all > 2 * tau0]
    table, info = run_stage1(path, demod)
    ok = table.accepted
    dur = clock.periods()
    if info.motion is not None and info.motion.reverses:     # legs: block durations instead
        dur = (table.t_stop_s - table.t_start_s)[ok]
    epoch = Epoch(meta["epoch_utc"])
    lon = np.radians(meta["site"]["longitude_deg"])
    sessions = SessionBuilder(lambda tt: sidereal_angle_rad(epoch, tt, lon),
                              meta["signal_units"])
    sessions.add(table)
    stats = {"n_samples": meta["n_samples"], "span_s": meta["time_last_s"] - meta["time_first_s"],
             "sample_interval_s": tau0, "n_gaps": int(big.size),
             "gap_total_s": float(np.sum(big - tau0)),
             "gap_longest_s": float(big.max()) if big.size else 0.0, "n_nan": n_nan,
             "n_turns": table.n_blocks,
             "turn_period_s": float(np.mean(dur)) if dur.size else info.turn_period_s,
             "turn_duration_rel_std": float(np.std(dur) / np.mean(dur)) if dur.size > 1 else 0.0,
             "n_accepted": int(np.sum(ok)), "n_glitch": int(np.sum(table.status == 2)),
             "n_partial": int(np.sum(table.status == 1)),
             "residual_rms": float(np.median(table.residual_rms[ok])) if np.any(ok) else np.nan,
             "n_moving_excluded": rest.finish() if info.excludes_moving else 0}
    # regular grid of the head of the record
    t = np.concatenate(head_t)
    y = np.concatenate(head_y) * _fractional_scale(meta)
    # grid cells of the head samples; cells beyond max_spectral_samples (after a long gap) are
    # dropped, so the grid never grows past the sample budget
    cell = (t - t[0]) / tau0
    keep = cell < max_spectral_samples
    idx = np.rint(cell[keep]).astype(np.int64)
    grid = np.full(int(idx[-1]) + 1, np.nan)
    grid[idx] = y[keep]
    allan = overlapping_adev(grid, tau0)
    filled = np.where(np.isfinite(grid), grid - np.nanmean(grid), 0.0)
    # remove a linear drift before the spectrum
    x = np.arange(filled.size)
    good = np.isfinite(grid)
    if good.sum() > 2:
        coef = np.polyfit(x[good], filled[good], 1)
        filled = np.where(good, filled - np.polyval(coef, x), 0.0)
    win = np.hanning(filled.size)
    spec = np.fft.rfft(filled * win)
    amp = 2.0 * np.abs(spec) / max(np.sum(win), 1.0)
    f = np.fft.rfftfreq(filled.size, tau0)
    f_r = 1.0 / info.turn_period_s
    f_s = 1.0 / STELLAR_DAY_S
    lines = {"2f_R": 2 * f_r, "2f_R-f_sid": 2 * f_r - f_s, "2f_R+f_sid": 2 * f_r + f_s,
             "2f_R-2f_sid": 2 * f_r - 2 * f_s, "2f_R+2f_sid": 2 * f_r + 2 * f_s, "f_R": f_r}
    band = (f > 2 * f_r - 6 * f_s) & (f < 2 * f_r + 6 * f_s)
    if np.sum(band) < 16:
        band = (f > 1.5 * f_r) & (f < 2.5 * f_r)
    return InspectReport(meta=meta, stats=stats, allan=allan, spectrum_f_hz=f[band],
                         spectrum_amp=amp[band], lines_hz=lines, motion=info.motion,
                         sessions=sessions.finish() if np.any(ok) else None)
