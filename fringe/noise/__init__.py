"""Noise: the power-law noise model, its sample stream, and the Allan deviation.

Layer 3 of the data path.

* :class:`PowerLawNoise` holds the h_α coefficients of S_y(f) (white PM to random-walk FM) and
  converts them to Allan variance; :func:`noise_from_section` reads a scenario's ``[noise]``.
* :class:`NoiseStream` draws samples of that noise chunk by chunk (any chunking, same numbers).
* :func:`overlapping_adev` and :func:`adev` estimate the Allan deviation of a record, NaN-aware;
  they return an :class:`AllanResult`.
"""

from fringe.noise.allan import AllanResult, adev, overlapping_adev
from fringe.noise.powerlaw import PowerLawNoise, noise_from_section, noise_scale
from fringe.noise.stream import NoiseStream

__all__ = ["AllanResult", "NoiseStream", "PowerLawNoise", "adev", "noise_from_section",
           "noise_scale", "overlapping_adev"]
