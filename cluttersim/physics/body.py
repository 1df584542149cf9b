"""Planetary body geometry: reference ellipsoid and geodetic <-> body-fixed Cartesian.

A :class:`Body` is the reference surface that DEM heights and track altitudes are
measured from. It comes from the DEM's CRS (Earth EPSG codes, IAU_2015 codes for
Mars, the Moon and others, through pyproj), or from a sphere radius given by the
user for a DEM without a CRS.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyproj

from .. import kernels
from ..errors import DemError


@dataclass(frozen=True)
class Body:
    """A reference ellipsoid of revolution.

    Attributes
    ----------
    name : str
        Human-readable name (from the CRS's ellipsoid, or "sphere").
    semi_major_m, semi_minor_m : float
        Equatorial and polar radii in metres (equal for a sphere).
    """

    name: str
    semi_major_m: float
    semi_minor_m: float

    @classmethod
    def sphere(cls, radius_m: float, name: str = "sphere") -> "Body":
        """A spherical body of the given radius in metres."""
        if not np.isfinite(radius_m) or radius_m <= 0:
            raise DemError(f"body radius {radius_m!r} m: expected a positive number of metres")
        return cls(name=name, semi_major_m=float(radius_m), semi_minor_m=float(radius_m))

    @classmethod
    def from_crs(cls, crs: pyproj.CRS) -> "Body":
        """The ellipsoid of a pyproj CRS (geographic or projected)."""
        ell = crs.ellipsoid
        if ell is None:
            raise DemError(f"CRS {crs.name!r} has no ellipsoid; give --body-radius-m")
        return cls(name=ell.name, semi_major_m=float(ell.semi_major_metre), semi_minor_m=float(ell.semi_minor_metre))

    @property
    def eccentricity_sq(self) -> float:
        """First eccentricity squared, e² = 1 − b²/a²."""
        return 1.0 - (self.semi_minor_m / self.semi_major_m) ** 2

    @property
    def mean_radius_m(self) -> float:
        """Mean radius (2a + b)/3 in metres (IUGG convention)."""
        return (2.0 * self.semi_major_m + self.semi_minor_m) / 3.0

    def geod(self) -> pyproj.Geod:
        """A pyproj geodesic calculator on this ellipsoid."""
        return pyproj.Geod(a=self.semi_major_m, b=self.semi_minor_m)

    def geodetic_to_ecef_m(self, lat_deg, lon_deg, height_m) -> np.ndarray:
        """Body-fixed Cartesian coordinates (…, 3) in metres of geodetic points.

        X = (N + h) cos φ cos λ, Y = (N + h) cos φ sin λ, Z = (N (1 − e²) + h) sin φ,
        with N = a / sqrt(1 − e² sin² φ) (e.g. Hofmann-Wellenhof, Lichtenegger &
        Wasle, *GNSS – Global Navigation Satellite Systems*, 2008, eq. 5.11).
        """
        lat, lon, h = np.broadcast_arrays(
            np.asarray(lat_deg, dtype=np.float64), np.asarray(lon_deg, dtype=np.float64), np.asarray(height_m, dtype=np.float64)
        )
        out = np.empty(lat.shape + (3,), dtype=np.float64)
        kernels.geodetic_to_ecef_array(
            lat.ravel(), lon.ravel(), h.ravel(), self.semi_major_m, self.eccentricity_sq, out.reshape(-1, 3)
        )
        return out

    def up_unit(self, lat_deg, lon_deg) -> np.ndarray:
        """Unit vector (…, 3) of the ellipsoid normal (local vertical) at geodetic points."""
        lat = np.radians(np.asarray(lat_deg, dtype=np.float64))
        lon = np.radians(np.asarray(lon_deg, dtype=np.float64))
        return np.stack([np.cos(lat) * np.cos(lon), np.cos(lat) * np.sin(lon), np.sin(lat)], axis=-1)

    def to_attrs(self) -> dict:
        """Attributes describing the body for a netCDF product."""
        return {"body_name": self.name, "body_semi_major_m": self.semi_major_m, "body_semi_minor_m": self.semi_minor_m}
