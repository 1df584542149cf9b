"""Vertical datums: the height references of DEMs and tracks, and the offsets between them.

A height above a geoid H and the ellipsoidal height h of the same point differ by
the geoid undulation N: h = H + N (e.g. Hofmann-Wellenhof & Moritz, *Physical
Geodesy*, 2nd ed. 2006, eq. 4-63). N reaches about −106 to +85 m on Earth (EGM96,
from memory), so an airborne track in ellipsoidal heights over a DEM in geoid
heights is off by up to ~100 m (0.67 µs two-way) unless one is converted.

cluttersim keeps the DEM's heights as they are and moves the *track* into the
DEM's vertical reference: alt_DEM = alt + N_track − N_DEM (N = 0 for the
ellipsoid). The DEM's reference comes from its CRS when that is compound (a
vertical CRS such as "EGM96 height", whose unit — metres or feet — also scales
the heights: :func:`split_compound`), else from the user (``--dem-height-datum``),
else the DEM's heights are taken above its ellipsoid. The geoid's own slope
between a trace and the ground it sees (≲ 10⁻⁴) is neglected.

Geoid undulations come from PROJ's vertical grids (``egm96_15.gtx`` /
``us_nga_egm96_15.tif`` ...): on Debian the ``proj-data`` package installs them in
``/usr/share/proj``, which is added to pyproj's search path when present. PROJ
would otherwise fall back silently to a "ballpark" transformation that ignores
the geoid; here a missing grid is an error that names it.
"""

from __future__ import annotations

import os
import warnings
from dataclasses import dataclass

import numpy as np
import pyproj

from ..errors import DemError, TrackError

#: Named geoids and their EPSG vertical CRS (heights above that geoid, metres).
GEOIDS = {"EGM96": "EPSG:5773", "EGM2008": "EPSG:3855", "EGM84": "EPSG:5798"}
#: Height units a user may declare for a DEM's values, in metres: the international foot 0.3048 m
#: and the US survey foot 1200/3937 m (NIST SP 811, 2008, B.8 and B.6).
HEIGHT_UNITS_M = {"m": 1.0, "ft": 0.3048, "us-ft": 1200.0 / 3937.0}
#: Where distributions put PROJ's data (grids); searched after pyproj's own directory.
SYSTEM_PROJ_DIRS = ("/usr/share/proj", "/usr/local/share/proj")


@dataclass(frozen=True)
class HeightDatum:
    """A height reference: ``ellipsoid``, or a geoid given by a vertical CRS or a PROJ grid file.

    Attributes
    ----------
    kind : str
        ``ellipsoid`` or ``geoid``.
    name : str
        For messages: ``ellipsoid``, ``geoid:EGM96``, the vertical CRS's name, or ``geoid:FILE``.
    vertical_crs : pyproj.CRS or None
        The geoid's vertical CRS (named geoids, compound DEM CRSs).
    grid : str or None
        Or: a PROJ vertical grid (file name in PROJ's search path, or a path) of N in metres.
    """

    kind: str
    name: str
    vertical_crs: pyproj.CRS | None = None
    grid: str | None = None

    def same_as(self, other: "HeightDatum") -> bool:
        """True when both are the ellipsoid, the same vertical CRS, or the same grid."""
        if self.kind == other.kind == "ellipsoid":
            return True
        if self.vertical_crs is not None and other.vertical_crs is not None:
            return self.vertical_crs.equals(other.vertical_crs, ignore_axis_order=True)
        return self.grid is not None and self.grid == other.grid

    def undulation_m(self, lat_deg, lon_deg, geodetic_crs: pyproj.CRS | None = None) -> np.ndarray:
        """N, the height of this datum's surface above the ellipsoid, at each point (m); 0 for the ellipsoid."""
        lat = np.asarray(lat_deg, dtype=np.float64)
        lon = np.asarray(lon_deg, dtype=np.float64)
        if self.kind == "ellipsoid":
            return np.zeros(np.broadcast(lat, lon).shape)
        use_system_proj_data()
        if self.grid is not None:
            try:
                tr = pyproj.Transformer.from_pipeline(f"+proj=vgridshift +grids={self.grid} +multiplier=1")
            except pyproj.exceptions.ProjError:
                raise TrackError(
                    f"{self.name}: vertical grid {self.grid!r} not found (looked in {', '.join(pyproj.datadir.get_data_dir().split(os.pathsep))}); "
                    "give a path to the grid file, or put it in PROJ_DATA"
                ) from None
            _, _, n = tr.transform(lon, lat, np.zeros(lat.shape))
            return _checked(np.asarray(n), self.name, lat, lon)
        base = geodetic_crs or pyproj.CRS("EPSG:4326")
        if base.is_compound:
            base = base.sub_crs_list[0]
        base = base.geodetic_crs or base
        source = base.to_3d()
        target = pyproj.crs.CompoundCRS(f"{base.name} + {self.vertical_crs.name}", [base, self.vertical_crs])
        with warnings.catch_warnings():  # PROJ's "best transformation is not available": said below
            warnings.simplefilter("ignore", UserWarning)
            group = pyproj.transformer.TransformerGroup(source, target, always_xy=True)
        usable = [t for t in group.transformers if "ballpark" not in t.description.lower()]
        if not usable:
            missing = sorted({g.short_name for op in group.unavailable_operations for g in op.grids if not g.available})
            raise TrackError(
                f"{self.name}: the geoid grid ({', '.join(missing) or 'none known to PROJ'}) is not installed; "
                "install your distribution's PROJ data package (Debian: apt-get install proj-data) or put the grid "
                f"in PROJ_DATA (searched: {pyproj.datadir.get_data_dir()})"
            )
        _, _, z = usable[0].transform(lon, lat, np.zeros(lat.shape))
        return _checked(-np.asarray(z), self.name, lat, lon)  # a point on the ellipsoid lies N below the geoid


def _checked(n, name, lat, lon):
    bad = np.flatnonzero(~np.isfinite(np.ravel(n)))
    if bad.size:
        i = bad[0]
        raise TrackError(f"{name}: no geoid height at lat {np.ravel(lat)[i]:.5f}, lon {np.ravel(lon)[i]:.5f} (outside the grid)")
    return n


def use_system_proj_data() -> None:
    """Add the distribution's PROJ data directories (geoid grids) to pyproj's search path, once."""
    current = pyproj.datadir.get_data_dir().split(os.pathsep)
    for d in SYSTEM_PROJ_DIRS:
        if os.path.isdir(d) and d not in current:
            pyproj.datadir.append_data_dir(d)


def parse_height_datum(text: str | None) -> HeightDatum | None:
    """``ellipsoid``, ``geoid:EGM96`` (or EGM2008, EGM84), ``geoid:EPSG:CODE`` (a vertical CRS) or
    ``geoid:GRID`` (a PROJ vertical grid file) → :class:`HeightDatum`; None or ``dem`` → None."""
    if text is None or text.strip().lower() == "dem":
        return None
    t = text.strip()
    if t.lower() == "ellipsoid":
        return HeightDatum("ellipsoid", "ellipsoid")
    kind, sep, what = t.partition(":")
    if kind.lower() != "geoid" or not sep or not what:
        raise TrackError(
            f"height datum {text!r}: expected ellipsoid, geoid:EGM96, geoid:EGM2008, geoid:EGM84, "
            "geoid:EPSG:CODE or geoid:GRID_FILE"
        )
    if what.upper() in GEOIDS:
        return HeightDatum("geoid", f"geoid:{what.upper()}", vertical_crs=pyproj.CRS(GEOIDS[what.upper()]))
    if what.upper().startswith("EPSG:"):
        try:
            crs = pyproj.CRS(what)
        except pyproj.exceptions.CRSError as exc:
            raise TrackError(f"height datum {text!r}: {exc}") from None
        if not crs.is_vertical:
            raise TrackError(f"height datum {text!r}: {crs.name!r} is not a vertical CRS")
        return HeightDatum("geoid", f"geoid:{crs.name}", vertical_crs=crs)
    return HeightDatum("geoid", f"geoid:{what}", grid=what)


def split_compound(crs: pyproj.CRS) -> tuple[pyproj.CRS, HeightDatum | None, float]:
    """A DEM CRS → (horizontal CRS, vertical datum or None, metres per height unit).

    A compound CRS (horizontal + vertical) gives its vertical CRS as the DEM's
    height datum, and that CRS's axis unit (e.g. the foot, 0.3048 m; applied to the
    heights by :func:`cluttersim.io.dem.vertical_scaling`). Ellipsoidal 3-D CRSs give
    the ellipsoid.
    """
    if crs.is_compound:
        horizontal, vertical = crs.sub_crs_list[0], crs.sub_crs_list[-1]
        if not vertical.is_vertical:
            raise DemError(f"compound CRS {crs.name!r}: expected a horizontal and a vertical CRS")
        unit_m = float(vertical.axis_info[0].unit_conversion_factor) if vertical.axis_info else 1.0
        return horizontal, HeightDatum("geoid", vertical.name, vertical_crs=vertical), unit_m
    if len(crs.axis_info) == 3 and crs.is_geographic:
        unit_m = float(crs.axis_info[2].unit_conversion_factor)
        return crs.to_2d(), HeightDatum("ellipsoid", "ellipsoid"), unit_m
    return crs, None, 1.0


def track_in_dem_datum(track, dem, track_datum: HeightDatum | None, dem_datum: HeightDatum | None = None):
    """The track with its altitudes moved into the DEM's vertical reference, and a note saying what was done.

    alt_DEM = alt + N_track − N_DEM (module docstring). ``dem`` is a
    :class:`~cluttersim.io.dem.DemSource`; ``dem_datum`` overrides (declares) its
    vertical reference. ``track_datum`` None: the track is already in the DEM's
    reference (nothing changes).
    """
    from dataclasses import replace

    dem_datum = dem_datum or getattr(dem, "vertical_datum", None)
    if track_datum is None:
        return track, None
    geodetic = dem.crs.geodetic_crs if dem.crs is not None else None
    if dem_datum is None:
        dem_datum = HeightDatum("ellipsoid", "ellipsoid")
        assumed = " (the DEM's CRS has no vertical part: its heights are taken above the ellipsoid; " \
                  "--dem-height-datum declares otherwise)"  # fmt: skip
    else:
        assumed = ""
    if track_datum.same_as(dem_datum):
        return track, f"track heights above {track_datum.name}, as the DEM's{assumed}"
    shift = track_datum.undulation_m(track.lat_deg, track.lon_deg, geodetic) - dem_datum.undulation_m(
        track.lat_deg, track.lon_deg, geodetic
    )
    note = (f"track heights moved from {track_datum.name} to the DEM's {dem_datum.name}{assumed}: "
            f"{np.min(shift):+.2f} to {np.max(shift):+.2f} m")  # fmt: skip
    return replace(track, alt_m=track.alt_m + shift), note


#: radargram attribute recording the metres per stored DEM value the run used (a declared unit included)
HEIGHT_UNIT_ATTR = "dem_height_unit_m"


def with_recorded_height_unit(src, attrs):
    """The DEM source with the height unit a finished run recorded (``simulate --dem-height-unit``),
    so that reading the run's DEM again gives the heights it was simulated with."""
    from dataclasses import replace

    unit = attrs.get(HEIGHT_UNIT_ATTR)
    return src if unit is None else replace(src, height_scale_m=float(unit))
