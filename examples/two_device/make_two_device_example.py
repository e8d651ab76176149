"""Write an invented two-device record: a frequency-counter log and a turntable-encoder log.

Every number here is invented for demonstration ("Kestrel Fen optics cellar" does not exist).
A rotating cavity pair (table period 30 s) is simulated with fringe's own simulator on a fine
time grid; a counter with a gate of ``gate_s`` then averages the beat over each gate
("plain": back-to-back gates, uniform weight; "overlapping": overlapping gates, a triangular
weight over two gates) and stamps the reading with the time at the END of its averaging window,
on its own clock. The encoder logs the table azimuth in degrees, wrapped to [0, 360), at its own
rate on a clock that runs ``clock_offset_s`` behind the counter's.

Files written into OUTDIR:

* ``counter.csv``: ISO 8601 UTC time at the end of each window, beat in Hz;
* ``encoder.csv``: seconds since the encoder's own epoch, azimuth in degrees (wrapped);
* ``two_device.toml``: import metadata for ``fringe import counter.csv --azimuth-log
  encoder.csv``;
* ``synchronous.csv`` and ``synchronous.toml``: the same record as one synchronous file (time
  at the centre of each window, the true azimuth there, the same beat), for comparison;
* ``truth.json``: the injected coefficients.

Run::

    python examples/two_device/make_two_device_example.py OUTDIR [--days 1.0] [--gate-s 2.0]
        [--kind plain] [--seed 7]
    fringe import OUTDIR/counter.csv --meta OUTDIR/two_device.toml
        --azimuth-log OUTDIR/encoder.csv --out OUTDIR/two_device.h5   (one line)
    fringe import OUTDIR/synchronous.csv --meta OUTDIR/synchronous.toml --out OUTDIR/sync.h5
"""

from __future__ import annotations

import argparse
import datetime
import json
import os
import tempfile

import numpy as np

from fringe.experiment.scenario import scenario_from_dict
from fringe.io.runreader import open_run
from fringe.simulation.campaign import simulate

EPOCH = "2027-03-10T00:00:00Z"                  # invented
ENCODER_EPOCH = "2027-03-09T23:59:00Z"          # the encoder's own (invented) epoch
SITE = {"name": "Kestrel Fen optics cellar (invented)", "latitude_deg": 47.62,
        "longitude_deg": 11.38, "height_m": 610.0}
CARRIER_HZ = 2.82e14
PERIOD_S = 30.0
#: Invented injected coefficients (a few sigma for a day of this record).
TRUTH = {"ke_XY": 4.0e-16, "ke_XZ": -3.0e-16, "ke_YZ": 2.0e-16, "ke_XXmYY": -5.0e-16,
         "ke_ZZ": 3.0e-16}
SUBSAMPLES = 8                                  # fine samples per gate


def _scenario(days: float, interval_s: float, truth: dict):
    doc = {"title": "two-device example (invented)", "site": SITE,
           "campaign": {"start_utc": EPOCH, "duration_days": days,
                        "sample_interval_s": interval_s},
           "apparatus": {"kind": "cavity-pair", "carrier_hz": CARRIER_HZ,
                         "path_separation_deg": 90.0, "units": "Hz"},
           "turntable": {"motion": "continuous", "period_s": PERIOD_S, "sense": "ccw",
                         "start_azimuth_deg": 0.0},
           "theory": {"name": "sme"}, "noise": {"white_fm_adev_1s": 2e-15},
           "coefficients": dict(truth)}
    return scenario_from_dict(doc, "two-device example")


def fine_record(days: float, gate_s: float, seed: int, truth: dict | None = None,
                workdir: str | None = None) -> dict:
    """The simulated beat on a grid of gate_s / SUBSAMPLES (time s, azimuth rad, beat Hz)."""
    with tempfile.TemporaryDirectory(dir=workdir) as tmp:
        path = os.path.join(tmp, "fine.h5")
        simulate(_scenario(days, gate_s / SUBSAMPLES, TRUTH if truth is None else truth), path,
                 seed=seed)
        with open_run(path) as run:
            data = run.read_all()
    data["azimuth"] = np.unwrap(data["azimuth"])
    return data


def counter_readings(fine: dict, gate_s: float, kind: str) -> tuple[np.ndarray, np.ndarray]:
    """(window centre s, reading Hz) of a counter with back-to-back gates of gate_s.

    A plain reading is the mean of the SUBSAMPLES fine samples of one gate; an overlapping one
    averages the plain means of the SUBSAMPLES gates started across one gate (a discrete
    triangle over two gates). The centre is the weighted mean time of the samples used.
    """
    m = SUBSAMPLES
    box = np.full(m, 1.0 / m)
    weights = box if kind == "plain" else np.convolve(box, box)
    t, y = fine["time"], fine["signal"]
    width = weights.size
    starts = np.arange(0, t.size - width + 1, m)
    idx = starts[:, None] + np.arange(width)[None, :]
    return t[idx] @ weights, y[idx] @ weights


def _iso(epoch: datetime.datetime, t_s: np.ndarray) -> list[str]:
    return [(epoch + datetime.timedelta(seconds=float(x))).strftime("%Y-%m-%dT%H:%M:%S.%fZ")
            for x in t_s]


def write_example(out: str, *, days: float = 1.0, gate_s: float = 2.0, kind: str = "plain",
                  seed: int = 7, clock_offset_s: float = 0.35, encoder_interval_s: float = 0.5,
                  truth: dict | None = None) -> dict:
    """Write the example's files into ``out``; returns their paths and the truth.

    ``truth`` replaces the invented TRUTH (the validation study draws one per campaign).
    """
    os.makedirs(out, exist_ok=True)
    truth = dict(TRUTH if truth is None else truth)
    fine = fine_record(days, gate_s, seed, truth, workdir=out)
    centre, reading = counter_readings(fine, gate_s, kind)
    window = gate_s * (2.0 if kind == "overlapping" else 1.0)
    az_centre = np.interp(centre, fine["time"], fine["azimuth"])
    # keep the counter inside the encoder's span (the encoder starts first and stops last)
    inside = (centre > fine["time"][0] + 2.0) & (centre < fine["time"][-1] - 2.0)
    centre, reading, az_centre = centre[inside], reading[inside], az_centre[inside]
    epoch = datetime.datetime(2027, 3, 10)
    stamp = centre + 0.5 * window                         # counter stamps the window's end
    paths = {k: os.path.join(out, k) for k in ("counter.csv", "encoder.csv", "synchronous.csv",
                                               "two_device.toml", "synchronous.toml",
                                               "truth.json")}
    with open(paths["counter.csv"], "w", encoding="utf-8") as fh:
        fh.write("# invented counter log: time at the end of each gate window, beat in Hz\n")
        fh.write("stamp_utc,beat_hz\n")
        for s, r in zip(_iso(epoch, stamp), reading):
            fh.write(f"{s},{r:.9g}\n")
    # encoder: its clock reads clock_offset_s less than the counter's; seconds since its epoch
    t_enc_true = np.arange(fine["time"][0], fine["time"][-1], encoder_interval_s)
    az_enc = np.degrees(np.interp(t_enc_true, fine["time"], fine["azimuth"])) % 360.0
    t_enc = t_enc_true - clock_offset_s + 60.0                # its epoch is 60 s earlier
    with open(paths["encoder.csv"], "w", encoding="utf-8") as fh:
        fh.write("# invented encoder log: seconds since 2027-03-09T23:59:00Z, azimuth deg\n")
        fh.write("t_s,az_deg\n")
        for a, b in zip(t_enc, az_enc):
            fh.write(f"{a:.6f},{b:.6f}\n")
    with open(paths["synchronous.csv"], "w", encoding="utf-8") as fh:
        fh.write("# the same record as one synchronous file: window centres, true azimuth\n")
        fh.write("t_s,az_deg,beat_hz\n")
        for a, b, c in zip(centre, np.degrees(az_centre), reading):
            fh.write(f"{a:.6f},{b:.9f},{c:.9g}\n")
    common = (f'[site]\nname = "{SITE["name"]}"\nlatitude_deg = {SITE["latitude_deg"]}\n'
              f'longitude_deg = {SITE["longitude_deg"]}\nheight_m = {SITE["height_m"]}\n\n'
              f'[apparatus]\nkind = "cavity-pair"\ncarrier_hz = {CARRIER_HZ:.6g}\n\n')
    with open(paths["two_device.toml"], "w", encoding="utf-8") as fh:
        fh.write("# Import metadata of the invented two-device example (counter + encoder).\n"
                 f'epoch_utc = "{EPOCH}"\n\n' + common
                 + '[columns]\ntime = "stamp_utc"\nsignal = "beat_hz"\n\n'
                 '[units]\ntime = "iso8601"\nsignal = "Hz"\n\n'
                 f'[gate]\ngate_s = {gate_s}\nkind = "{kind}"\nstamp = "end"\n\n'
                 '[azimuth_log]\ncolumns = { time = "t_s", azimuth = "az_deg" }\n'
                 'units = { time = "s", azimuth = "deg" }\n'
                 f'epoch_utc = "{ENCODER_EPOCH}"\n'
                 f"clock_offset_s = {clock_offset_s}   # encoder clock + this = counter clock\n"
                 f"max_gap_s = {4 * encoder_interval_s}\n")
    with open(paths["synchronous.toml"], "w", encoding="utf-8") as fh:
        fh.write("# The same record as one synchronous file (times at the window centres).\n"
                 f'epoch_utc = "{EPOCH}"\n\n' + common
                 + '[columns]\ntime = "t_s"\nazimuth = "az_deg"\nsignal = "beat_hz"\n\n'
                 '[units]\ntime = "s"\nazimuth = "deg"\nsignal = "Hz"\n\n'
                 f'[gate]\ngate_s = {gate_s}\nkind = "{kind}"\nstamp = "centre"\n')
    with open(paths["truth.json"], "w", encoding="utf-8") as fh:
        json.dump({"coefficients": truth, "gate_s": gate_s, "kind": kind}, fh, indent=1)
    return {"paths": paths, "truth": truth}


def main() -> None:
    """Command line: write the example into OUTDIR."""
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("outdir")
    p.add_argument("--days", type=float, default=1.0)
    p.add_argument("--gate-s", type=float, default=2.0)
    p.add_argument("--kind", choices=("plain", "overlapping"), default="plain")
    p.add_argument("--seed", type=int, default=7)
    a = p.parse_args()
    got = write_example(a.outdir, days=a.days, gate_s=a.gate_s, kind=a.kind, seed=a.seed)
    print("\n".join(got["paths"].values()))


if __name__ == "__main__":
    main()
