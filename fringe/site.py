"""The laboratory site: geodetic position on the WGS-84 ellipsoid."""

from __future__ import annotations

import math
from dataclasses import dataclass

from fringe.errors import ConfigError, check_finite_number


@dataclass(frozen=True)
class Site:
    """A laboratory site.

    Parameters
    ----------
    latitude_deg : float
        Geodetic latitude, degrees, north positive, in [-90, 90].
    longitude_deg : float
        East longitude, degrees (west negative), in [-360, 360].
    height_m : float
        Height above the WGS-84 ellipsoid, m.
    name : str
        Free label used in reports.
    """

    latitude_deg: float
    longitude_deg: float
    height_m: float = 0.0
    name: str = ""

    def __post_init__(self):
        lat = check_finite_number(self.latitude_deg, "site", "latitude_deg",
                                  minimum=-90.0, maximum=90.0)
        lon = check_finite_number(self.longitude_deg, "site", "longitude_deg",
                                  minimum=-360.0, maximum=360.0)
        h = check_finite_number(self.height_m, "site", "height_m",
                                minimum=-12_000.0, maximum=100_000.0)
        if not isinstance(self.name, str):
            raise ConfigError(f"site: name: expected a string, got {self.name!r}")
        object.__setattr__(self, "latitude_deg", lat)
        object.__setattr__(self, "longitude_deg", lon)
        object.__setattr__(self, "height_m", h)

    @property
    def colatitude_rad(self) -> float:
        """Colatitude chi = 90 deg - geodetic latitude (convention C4), radians."""
        return math.radians(90.0 - self.latitude_deg)

    @property
    def east_longitude_rad(self) -> float:
        """East longitude, radians."""
        return math.radians(self.longitude_deg)

    @property
    def axis_distance_m(self) -> float:
        """Distance of the site from the Earth's rotation axis, m (WGS-84 via erfa.gd2gc)."""
        import erfa

        xyz = erfa.gd2gc(1, self.east_longitude_rad, math.radians(self.latitude_deg),
                         self.height_m)
        return float(math.hypot(xyz[0], xyz[1]))

    def to_dict(self) -> dict:
        """Latitude and longitude (deg), height (m) and name, as stored in a run file."""
        return {"latitude_deg": self.latitude_deg, "longitude_deg": self.longitude_deg,
                "height_m": self.height_m, "name": self.name}
