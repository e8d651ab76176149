"""Stage-1 settings: the per-turn model, the rejection rules and the leakage columns per turn.

The per-turn model is a drift polynomial plus harmonics of the turntable angle; the leakage
columns are recorded per turn (``TurnTable.leak``).
"""

from __future__ import annotations

from dataclasses import dataclass, fields

from fringe.errors import ConfigError

#: Registry of the per-turn drift polynomials: name -> number of terms (also the CLI's choices).
DRIFT_TERMS = {"offset": 1, "linear": 2, "quadratic": 3}


#: Highest power of tau whose leakage into (C, B) is recorded per block (TurnTable.leak).
LEAK_ORDER = 3


@dataclass(frozen=True)
class DemodSettings:
    """Stage-1 settings.

    Parameters
    ----------
    drift : {"offset", "linear", "quadratic"}
        Per-block drift polynomial.
    max_harmonic : int
        Highest harmonic of theta in the block model (2, 3 or 4); 1 theta is always included.
    max_angle_gap_deg : float
        Largest allowed gap in turntable angle within a block of a motion that covers whole
        turns (continuous, reversing), degrees.
    max_2theta_gap_deg : float
        Largest allowed gap in 2 theta (twice the table angle, mod 360 degrees) among the valid
        samples of a block of a swinging or stepped motion, degrees: the coverage that defines
        the 2 theta pair (C, B) of a sweep or of a cycle of marks (``docs/fit.md``).
    rest_tolerance_deg : float
        A sample is at rest when its azimuth is within this of the previous or the next
        sample's, degrees (motion detection; a stepped table's samples while moving, i.e. not
        at rest, are left out of the block fits).
    min_samples : int
        Least number of valid samples in a block.
    max_gap_s : float or None
        A time gap longer than this starts a new block, s (default: a quarter of the estimated
        turn period).
    glitch_threshold : float
        Robust rejection threshold in units of the MAD-estimated sigma (see the glitch rule in
        :mod:`fringe.demodulate.blocks`).
    """

    drift: str = "linear"
    max_harmonic: int = 2
    max_angle_gap_deg: float = 60.0
    min_samples: int = 12
    max_gap_s: float | None = None
    glitch_threshold: float = 5.0
    max_2theta_gap_deg: float = 120.0
    rest_tolerance_deg: float = 1e-3

    def __post_init__(self):
        if self.drift not in DRIFT_TERMS:
            raise ConfigError(f"demodulation: drift: expected one of {', '.join(DRIFT_TERMS)}, "
                              f"got {self.drift!r}")
        if self.max_harmonic not in (2, 3, 4):
            raise ConfigError(f"demodulation: max_harmonic: expected 2, 3 or 4, "
                              f"got {self.max_harmonic!r}")
        if not 0 < self.max_angle_gap_deg <= 360:
            raise ConfigError("demodulation: max_angle_gap_deg: expected a value in (0, 360]")
        if not 0 < self.max_2theta_gap_deg < 180:
            raise ConfigError("demodulation: max_2theta_gap_deg: expected a value in (0, 180)")
        if not 0 <= self.rest_tolerance_deg < 1:
            raise ConfigError("demodulation: rest_tolerance_deg: expected a value in [0, 1)")
        if self.glitch_threshold <= 0:
            raise ConfigError("demodulation: glitch_threshold: expected a positive number")

    @property
    def term_names(self) -> tuple[str, ...]:
        """Names of the block-model terms, in column order.

        Drift terms a0, a1[, a2] (powers of tau), then c1, s1, ..., cM, sM (cos and sin of
        m theta up to ``max_harmonic``).
        """
        drift = ("a0", "a1", "a2")[:DRIFT_TERMS[self.drift]]
        harm = []
        for m in range(1, self.max_harmonic + 1):
            harm += [f"c{m}", f"s{m}"]
        return drift + tuple(harm)

    @property
    def n_terms(self) -> int:
        """Number of block-model terms (columns of ``TurnTable.coef``)."""
        return len(self.term_names)

    def index(self, name: str) -> int:
        """Column of the term ``name`` (one of :attr:`term_names`) in the block model."""
        return self.term_names.index(name)

    def to_dict(self) -> dict:
        """The settings as a dict field name -> value."""
        return {f.name: getattr(self, f.name) for f in fields(self)}


def leak_terms(settings: DemodSettings) -> tuple[tuple[str, int], ...]:
    """The unit columns of ``TurnTable.leak``, in order.

    ("C", j) is tau^j cos 2 theta, ("B", j) is tau^j sin 2 theta (j = 1 ... LEAK_ORDER) and
    ("A", j) is tau^j for the powers above the drift polynomial (up to LEAK_ORDER); tau is the
    block's normalised time (:mod:`fringe.demodulate.blocks`). Lower powers are in the block
    model, whose (C, B) responses are exactly 1 (cos 2 theta -> C, sin 2 theta -> B) or 0.
    """
    nd = DRIFT_TERMS[settings.drift]
    return (tuple(("C", j) for j in range(1, LEAK_ORDER + 1))
            + tuple(("B", j) for j in range(1, LEAK_ORDER + 1))
            + tuple(("A", j) for j in range(nd, LEAK_ORDER + 1)))
