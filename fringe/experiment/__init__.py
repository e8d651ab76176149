"""The experiment: apparatus, turntable motion, scenario files, basis signals, harmonics.

Layer 3 of the data path. Which function for which job:

* :func:`load_scenario` reads a scenario file (TOML) into a :class:`Scenario` (site, calendar,
  apparatus, turntable, theory); :func:`scenario_from_dict` does the same for a mapping.
* :func:`basis` gives the signal g_k(t) of a unit value of each coefficient for a
  :class:`Setup` (apparatus + site + theory + calendar); :func:`signal` sums them for given
  values; :func:`two_theta_amplitudes` gives their 2θ amplitudes per turn.
* :func:`harmonic_table` gives the sidereal and annual harmonics of each coefficient's signal;
  :func:`predict` the whole prediction of a scenario.
* :func:`clear_setup_caches` empties the per-process caches of work that depends only on the
  setup (:mod:`fringe.experiment.memo`: the turn model's grid, the one-instant harmonics).
* Turntable motions: :class:`ContinuousRotation`, :class:`SteppedRotation`,
  :class:`ReversingRotation`, :class:`SwingingRotation`, :class:`RecordedAzimuth`, with an
  optional :class:`AxisTilt`; :func:`make_motion` builds one from a scenario section.
"""

from fringe.experiment.apparatus import (
    APPARATUS_KINDS,
    Apparatus,
    CavityPair,
    CavityVsReference,
    Michelson,
    OrientedClock,
    make_apparatus,
)
from fringe.experiment.basis import Setup, basis, signal, two_theta_amplitudes
from fringe.experiment.harmonics import HarmonicTable, harmonic_table, harmonics_at
from fringe.experiment.memo import clear_setup_caches
from fringe.experiment.prediction import Prediction, iter_prediction_chunks, predict, signal_map
from fringe.experiment.scenario import (
    Scenario,
    load_scenario,
    parse_assignments,
    scenario_from_dict,
)
from fringe.experiment.turntable import (
    AxisTilt,
    ContinuousRotation,
    RecordedAzimuth,
    ReversingRotation,
    SteppedRotation,
    SwingingRotation,
    make_motion,
)

__all__ = ["APPARATUS_KINDS", "Apparatus", "AxisTilt", "CavityPair", "CavityVsReference",
           "ContinuousRotation", "HarmonicTable", "Michelson", "OrientedClock", "Prediction",
           "RecordedAzimuth", "ReversingRotation", "Scenario", "Setup", "SteppedRotation",
           "SwingingRotation", "basis", "clear_setup_caches", "harmonic_table",
           "harmonics_at", "iter_prediction_chunks", "load_scenario", "make_apparatus",
           "make_motion", "parse_assignments", "predict", "scenario_from_dict", "signal",
           "signal_map", "two_theta_amplitudes"]
