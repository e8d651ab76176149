"""Stage 1: per-turn demodulation of a record, and its quality summary.

Layer 5 of the data path.

* :class:`DemodSettings` states the per-turn model and the rejection rules.
* :func:`demodulate_blocks` fits the turns of a sample range (compiled kernel,
  :mod:`fringe.demodulate.kernel`); :func:`turn_boundaries` finds where the turns start.
* :func:`stage1_store` and :func:`run_stage1` run stage 1 over a whole run file, range by range,
  on this machine or a dask cluster; the per-turn results are a :class:`TurnTable` (in memory) or
  a :class:`TurnStore` (in scratch files, for long records).
* :func:`inspect_run` summarises a record's quality (turns, Allan deviation, spectrum).
"""

from fringe.demodulate.blocks import demodulate_blocks, turn_boundaries
from fringe.demodulate.engine import ENGINES, RecordInfo, run_stage1, stage1_store, survey
from fringe.demodulate.quality import InspectReport, inspect_run
from fringe.demodulate.settings import DRIFT_TERMS, DemodSettings, leak_terms
from fringe.demodulate.turn_store import Scratch, TurnStore
from fringe.demodulate.turns import TurnTable, TurnTableBuilder

__all__ = ["DRIFT_TERMS", "ENGINES", "DemodSettings", "InspectReport", "RecordInfo", "Scratch",
           "TurnStore", "TurnTable", "TurnTableBuilder", "demodulate_blocks", "inspect_run",
           "leak_terms", "run_stage1", "stage1_store", "survey", "turn_boundaries"]
