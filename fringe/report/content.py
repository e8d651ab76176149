"""What a report holds: the fit result, its turns, comparisons and solved combinations."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from fringe.io.fit_result import FitResult
from fringe.report.rms_solve import RmsSolution


@dataclass(frozen=True, eq=False)
class ReportContent:
    """Everything a report states, computed from the inputs; nothing written yet.

    ``fit`` is the checked fit result (a diagonal covariance filled in when the file gives
    none), ``turns`` the accepted per-turn arrays (:func:`load_turns`) or None, ``comparison``
    the user's earlier results, ``rms`` the alpha, beta, delta solution or None, ``headline``
    as :func:`headline`.
    """

    fit: FitResult
    fit_path: Path
    turns: dict | None = None
    turns_path: Path | None = None
    comparison: tuple = ()
    compare_path: Path | None = None
    rms: RmsSolution | None = None
    headline: dict = field(default_factory=dict)
    notes: tuple[str, ...] = ()
    provenance: dict = field(default_factory=dict)

    @property
    def warnings(self) -> tuple[str, ...]:
        """The sentence of every warning the fit raised (the records: ``fit.warnings``)."""
        return tuple(w.sentence for w in self.fit.warnings)

    @property
    def inputs(self) -> list[Path]:
        """The input files (never written over)."""
        return [p for p in (self.fit_path, self.turns_path, self.compare_path) if p]
