"""Studies of many simulated campaigns: coverage, pulls, null and scrambled-phase tests.

Layer 7 of the data path (above the fit and the plan, below the report).

* :func:`run_study` simulates N campaigns of a scenario with independent seeds, fits each as
  ``fringe fit`` would and reduces them to pulls, coverage with binomial bands, sigma beside
  the plan's forecast and efficiency (study.json's content, ``docs/study.md``).
* :class:`StudySettings` says how many, what is injected, which field varies and where the
  campaigns run (here, a process pool or a dask cluster: :func:`map_tasks`).
* :func:`run_campaign` is one campaign (also what ``validation/run_validation.py`` builds on).
"""

from fringe.study.campaign import (
    CampaignTask,
    campaign_seeds,
    fit_record,
    run_campaign,
    scramble_turns,
    simulate_run,
)
from fringe.study.engines import map_tasks
from fringe.study.run import STUDY_FORMAT, run_study
from fringe.study.settings import (
    STUDY_ENGINES,
    STUDY_MODES,
    VARY_FIELDS,
    StudySettings,
    parse_vary,
)

__all__ = ["STUDY_ENGINES", "STUDY_FORMAT", "STUDY_MODES", "VARY_FIELDS", "CampaignTask",
           "StudySettings", "campaign_seeds", "fit_record", "map_tasks", "parse_vary",
           "run_campaign", "run_study", "scramble_turns", "simulate_run"]
