"""Digital elevation models: open, locate, and read only the window a track needs.

Any single-band raster GDAL reads is accepted (through rasterio). Heights are
metres above the reference surface of the DEM's CRS; the body (ellipsoid or
sphere) comes from that CRS, or from ``body_radius_m`` for a DEM without one.
Nodata and non-finite cells become NaN ("holes").
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path

import numpy as np
import pyproj
import rasterio
from affine import Affine
from rasterio.windows import Window

from ..physics.body import Body
from .datums import HeightDatum, split_compound
from .demcrs import as_geographic, check_not_radii, vsi_path
from ..errors import DemError
from ..validate import height_limit_m


#: GDAL block cache during a read, MB.
READ_CACHE_MB = 64


@dataclass(frozen=True)
class DemSource:
    """An opened DEM's metadata (the pixels are read on demand by :meth:`read`).

    Attributes
    ----------
    path : Path
    crs : pyproj.CRS or None
        None for a DEM without CRS read as a geographic grid on a sphere.
    body : Body
    transform : Affine
        Pixel (col, row) → CRS (x, y) of pixel corners, as in GDAL.
    width, height : int
    """

    path: Path
    crs: pyproj.CRS | None
    body: Body
    transform: Affine
    width: int
    height: int
    nodata: float | None
    #: the heights' vertical reference from a compound CRS (None: above the ellipsoid, or as declared)
    vertical_datum: HeightDatum | None = None
    #: metres per stored value (the band's scale × its vertical unit) and the offset in metres:
    #: height_m = stored × height_scale_m + height_offset_m (:func:`vertical_scaling`)
    height_scale_m: float = 1.0
    height_offset_m: float = 0.0

    @property
    def is_geographic(self) -> bool:
        return self.crs is None or self.crs.is_geographic

    @property
    def wraps_longitude(self) -> bool:
        """True for a geographic DEM whose columns span the full 360° of longitude.

        Its first and last columns are neighbours across the DEM's west edge, and
        :meth:`read` accepts windows that run over that edge (see there).
        """
        return self.is_geographic and abs(abs(self.transform.a) * self.width - 360.0) < 0.5 * abs(self.transform.a)

    @classmethod
    def open(cls, path, body_radius_m: float | None = None) -> "DemSource":
        """Open a DEM and check it is usable; read no pixels.

        ``body_radius_m`` is required for a DEM without a CRS (its grid is then
        taken as geographic degrees on a sphere of that radius) and overrides
        nothing otherwise.
        """
        vsi = vsi_path(path)  # GDAL virtual file systems (/vsizip/, /vsicurl/...): GDAL finds them
        path = Path(vsi or path)
        if vsi is None and not path.exists():
            raise DemError(f"{path}: DEM file not found")
        try:
            with rasterio.open(path) as ds:
                count, width, height = ds.count, ds.width, ds.height
                transform, nodata, rcrs = ds.transform, ds.nodata, ds.crs
                band_scale = ds.scales[0] if ds.scales else 1.0
                band_offset = ds.offsets[0] if ds.offsets else 0.0
                band_unit = ds.units[0] if ds.units else None
        except rasterio.errors.RasterioIOError as exc:
            raise DemError(f"{path}: not a raster GDAL can read ({str(exc).splitlines()[0]})") from None
        if count != 1:
            raise DemError(f"{path}: has {count} bands, expected a single-band elevation raster")
        if transform.b != 0 or transform.d != 0:
            raise DemError(f"{path}: rotated rasters are not supported, expected a north-up grid")
        if transform == Affine.identity():
            raise DemError(f"{path}: has no georeferencing (no geotransform)")
        vertical_datum, full_crs = None, None
        if rcrs is None:
            if body_radius_m is None:
                raise DemError(f"{path}: DEM has no CRS; give --body-radius-m to read it as lon/lat degrees on a sphere")
            crs = None
            body = Body.sphere(body_radius_m)
        else:
            try:
                crs = pyproj.CRS.from_wkt(rcrs.to_wkt())
            except pyproj.exceptions.CRSError as exc:
                raise DemError(f"{path}: CRS not understood by pyproj ({exc})") from None
            full_crs = crs  # with its vertical part, whose unit vertical_scaling reads
            crs, vertical_datum, _ = split_compound(crs)  # the horizontal CRS and the heights' datum
            if crs.is_geographic and [a.direction for a in crs.axis_info[:2]] not in (["north", "east"], ["east", "north"]):
                axes = ", ".join(f"{a.name} ({a.direction})" for a in crs.axis_info[:2])
                raise DemError(
                    f"{path}: geographic CRS {crs.name!r} has axes {axes}; expected latitude north and longitude east "
                    "(re-grid the DEM to east-positive longitudes)"
                )
            check_angular_units(crs, path)
            geographic = as_geographic(crs, transform)  # equirectangular on a sphere: a lon/lat grid
            if geographic is not None:
                crs, transform = geographic
            body = Body.from_crs(crs)
            if body_radius_m is not None:
                body = Body.sphere(body_radius_m, name=f"sphere overriding {body.name}")
        scale_m, offset_m = vertical_scaling(path, band_scale, band_offset, band_unit, full_crs)
        return cls(path=path, crs=crs, body=body, transform=transform, width=width, height=height, nodata=nodata,
                   vertical_datum=vertical_datum, height_scale_m=scale_m, height_offset_m=offset_m)  # fmt: skip

    # ----------------------------------------------------------------- coordinates

    def _lonlat_crs(self) -> pyproj.CRS:
        """Latitude/east-longitude degrees on the DEM's datum (tracks are east-positive even
        when the CRS's own geodetic CRS counts longitudes westward, as planetographic ones do)."""
        from pyproj.crs import GeographicCRS
        from pyproj.crs.coordinate_system import Ellipsoidal2DCS

        return GeographicCRS(name="lat/lon east", datum=self.crs.datum, ellipsoidal_cs=Ellipsoidal2DCS())

    # Transformers are made once per DemSource (setting one up costs ~15 ms, more than
    # transforming a whole track); a DemSource is not shared between threads.
    @cached_property
    def _to_crs(self) -> pyproj.Transformer | None:
        if self.crs is None or self.crs.is_geographic:
            return None
        return pyproj.Transformer.from_crs(self._lonlat_crs(), self.crs, always_xy=True)

    @cached_property
    def _from_crs(self) -> pyproj.Transformer | None:
        if self.crs is None or self.crs.is_geographic:
            return None
        return pyproj.Transformer.from_crs(self.crs, self._lonlat_crs(), always_xy=True)

    def lonlat_to_xy(self, lon_deg, lat_deg):
        """Geodetic lon/lat (degrees) → DEM CRS x, y. For geographic DEMs,
        longitudes are wrapped into the DEM's own longitude range."""
        lon = np.asarray(lon_deg, dtype=np.float64)
        lat = np.asarray(lat_deg, dtype=np.float64)
        tr = self._to_crs
        if tr is None:
            west = self.transform.c
            return (lon - west) % 360.0 + west, lat
        x, y = tr.transform(lon, lat)
        return np.asarray(x), np.asarray(y)

    def xy_to_lonlat(self, x, y):
        """DEM CRS x, y → geodetic lon/lat in degrees."""
        tr = self._from_crs
        if tr is None:
            return np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
        lon, lat = tr.transform(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
        return np.asarray(lon), np.asarray(lat)

    def lonlat_to_rowcol(self, lon_deg, lat_deg):
        """Fractional (row, col) in the full DEM, with integers at pixel centres."""
        x, y = self.lonlat_to_xy(lon_deg, lat_deg)
        col, row = ~self.transform @ (x, y)
        return np.asarray(row) - 0.5, np.asarray(col) - 0.5

    # ----------------------------------------------------------------- reading

    def window_around(self, rows, cols, pad: int = 2) -> Window | None:
        """Smallest window holding fractional pixel positions ``rows``, ``cols`` plus ``pad`` pixels.

        Returns None when the positions do not overlap the DEM at all.
        """
        r0 = int(math.floor(np.nanmin(rows))) - pad
        r1 = int(math.ceil(np.nanmax(rows))) + pad + 1
        c0 = int(math.floor(np.nanmin(cols))) - pad
        c1 = int(math.ceil(np.nanmax(cols))) + pad + 1
        r0, c0 = max(r0, 0), max(c0, 0)
        r1, c1 = min(r1, self.height), min(c1, self.width)
        if r1 <= r0 or c1 <= c0:
            return None
        return Window(c0, r0, c1 - c0, r1 - r0)

    def read_decimated(self, window: Window, max_cells: int) -> "DemWindow":
        """Read a window decimated by a whole factor so that neither side exceeds ``max_cells``
        (for pictures: relief under maps)."""
        scale = max(1, math.ceil(max(window.height, window.width) / max_cells))
        return self.read(window, out_shape=(max(1, window.height // scale), max(1, window.width // scale)))

    def read(self, window: Window, out_shape: tuple[int, int] | None = None) -> "DemWindow":
        """Read a window of elevations (holes as NaN), optionally decimated to ``out_shape``.

        For a DEM that :attr:`wraps_longitude`, the window's columns may run past
        either side of the grid (``col_off < 0`` or ``col_off + width > self.width``,
        at most one full turn): the columns are read modulo the width and joined, so
        a window across the DEM's west/east edge (the antimeridian of a −180..180
        DEM) is one continuous block whose longitudes simply continue past ±180°.
        """
        c0, w = int(window.col_off), int(window.width)
        wrapped = c0 < 0 or c0 + w > self.width
        if wrapped and not (self.wraps_longitude and w <= self.width):
            raise ValueError(f"window {window} lies outside the DEM's {self.width} columns")
        try:
            # GDAL's block cache (default 5 % of the RAM) fills during one read: a decimated read of a
            # 20,000² DEM held 1.3 GB; a small cache bounds it (the blocks are read in order anyway)
            with rasterio.Env(GDAL_CACHEMAX=READ_CACHE_MB), rasterio.open(self.path) as ds:
                if not wrapped:
                    data = ds.read(1, window=window, out_shape=out_shape, masked=True)
                else:
                    pieces = []
                    col = c0
                    while col < c0 + w:
                        start = col % self.width
                        n = min(self.width - start, c0 + w - col)
                        piece = Window(start, window.row_off, n, window.height)
                        shape = None
                        if out_shape is not None:
                            shape = (out_shape[0], max(1, int(round(out_shape[1] * n / w))))
                        pieces.append(ds.read(1, window=piece, out_shape=shape, masked=True))
                        col += n
                    data = np.ma.concatenate(pieces, axis=1)
                    if out_shape is not None:
                        out_shape = data.shape
        except (rasterio.errors.RasterioIOError, rasterio.errors.RasterioError) as exc:
            cause = str(exc.__cause__ or exc).strip().splitlines()[0] if str(exc.__cause__ or exc).strip() else type(exc).__name__
            raise DemError(f"{self.path}: cannot read elevations, the file may be truncated or corrupt ({cause})") from None
        elev = np.ma.filled(data.astype(np.float64), np.nan)
        if self.height_scale_m != 1.0 or self.height_offset_m != 0.0:
            elev = elev * self.height_scale_m + self.height_offset_m
        elev[~np.isfinite(elev)] = np.nan
        check_not_radii(elev, self.body.mean_radius_m, self.path)  # before the plausibility mask: says why
        implausible = mask_implausible_heights(elev, self.body, self.path)
        wt = rasterio.windows.transform(window, self.transform)
        if out_shape is not None:
            wt = wt @ Affine.scale(window.width / out_shape[1], window.height / out_shape[0])
        return DemWindow(source=self, window=window, transform=wt, elevation_m=elev, implausible=implausible)


@dataclass(frozen=True)
class DemWindow:
    """A block of DEM elevations in memory, with its own geotransform."""

    source: DemSource
    window: Window
    transform: Affine
    elevation_m: np.ndarray
    #: (count, most extreme value in metres) of cells beyond the plausible height (now holes)
    implausible: tuple[int, float] = (0, 0.0)

    @property
    def shape(self) -> tuple[int, int]:
        return self.elevation_m.shape

    def cell_lonlat(self) -> tuple[np.ndarray, np.ndarray]:
        """Geodetic (lon, lat) in degrees of every cell centre, each (ny, nx)."""
        if self.source.is_geographic:
            return tuple(np.meshgrid(*self.lonlat_axes()))
        ny, nx = self.shape
        cc, rr = np.meshgrid(np.arange(nx) + 0.5, np.arange(ny) + 0.5)
        x, y = self.transform @ (cc, rr)
        return self.source.xy_to_lonlat(x, y)

    def lonlat_axes(self) -> tuple[np.ndarray, np.ndarray]:
        """A geographic window's cell-centre longitudes per column and latitudes per row (degrees;
        those of :meth:`cell_lonlat`, whose grids repeat them)."""
        if not self.source.is_geographic:
            raise ValueError("lonlat_axes: a projected grid has no longitude per column")
        ny, nx = self.shape
        t = self.transform
        lat = t.f + t.e * (np.arange(ny) + 0.5)
        if np.nanmax(np.abs(lat)) > 90 + 1e-9:
            raise DemError(f"{self.source.path}: latitudes beyond ±90° in a geographic DEM")
        return t.c + t.a * (np.arange(nx) + 0.5), np.clip(lat, -90.0, 90.0)

    def lonlat_of_cells(self, cells) -> tuple[np.ndarray, np.ndarray]:
        """Geodetic (lon, lat) in degrees of the centres of cells given as flat indices
        (row · nx + col) into this window: the values of :meth:`cell_lonlat` at those cells,
        without building the full grids (a geographic grid's latitude depends on the row only,
        its longitude on the column; a projected grid's distinct cells are transformed once)."""
        cells = np.asarray(cells, dtype=np.int64)
        nx = self.shape[1]
        if self.source.is_geographic:
            rows, cols = np.divmod(cells, nx)
            lon_of_col, lat_of_row = self.lonlat_axes()
            return lon_of_col[cols], lat_of_row[rows]
        distinct, where = np.unique(cells, return_inverse=True)
        rows, cols = np.divmod(distinct, nx)
        x, y = self.transform @ (cols + 0.5, rows + 0.5)
        lon, lat = self.source.xy_to_lonlat(np.asarray(x), np.asarray(y))
        return np.asarray(lon)[where].reshape(cells.shape), np.asarray(lat)[where].reshape(cells.shape)

    def bilinear_m(self, lon_deg, lat_deg) -> np.ndarray:
        """Elevation at points by bilinear interpolation between cell centres (NaN outside or in holes)."""
        x, y = self.source.lonlat_to_xy(lon_deg, lat_deg)
        if self.source.is_geographic:
            # wrap into this window's own longitude range (it may run past the DEM's edge)
            west = self.transform.c
            x = (np.asarray(x, dtype=np.float64) - west) % 360.0 + west
        col, row = ~self.transform @ (np.asarray(x), np.asarray(y))
        col = np.asarray(col, dtype=np.float64) - 0.5
        row = np.asarray(row, dtype=np.float64) - 0.5
        ny, nx = self.shape
        t = self.transform
        # a geographic window a full turn wide interpolates across its west/east edge, and
        # one reaching a pole is constant from its outermost row of centres to the pole
        full_turn = self.source.is_geographic and abs(abs(t.a) * nx - 360.0) < 0.5 * abs(t.a)
        if full_turn:
            col = (col + 1.0) % nx - 1.0  # in [-1, nx - 1): c0 = -1 is the last column
        if self.source.is_geographic:
            north_row = -0.5 if t.f >= 90.0 - 1e-9 else 0.0
            south_row = ny - 0.5 if t.f + t.e * ny <= -90.0 + 1e-9 else ny - 1
            inside_rows = (row >= north_row) & (row <= south_row)
            row = np.clip(row, 0.0, ny - 1)
        else:
            inside_rows = (row >= 0) & (row <= ny - 1)
        inside = inside_rows & (col >= (-1 if full_turn else 0)) & (col <= nx - 1)
        r0 = np.clip(np.floor(row).astype(np.int64), 0, max(ny - 2, 0))
        c0 = np.clip(np.floor(col).astype(np.int64), -1 if full_turn else 0, max(nx - 2, 0))
        fr = row - r0
        fc = col - c0
        r1 = np.minimum(r0 + 1, ny - 1)
        c1 = np.minimum(c0 + 1, nx - 1)
        c0 = c0 % nx
        z = self.elevation_m
        val = (
            z[r0, c0] * (1 - fr) * (1 - fc) + z[r0, c1] * (1 - fr) * fc + z[r1, c0] * fr * (1 - fc) + z[r1, c1] * fr * fc
        )
        return np.where(inside, val, np.nan)

    def hole_fraction(self) -> float:
        return float(np.isnan(self.elevation_m).mean())


def warn_holes(window: DemWindow) -> None:
    """Warn (once) with the fraction of nodata cells in the window read for a track, and separately
    with the cells whose heights were beyond :func:`~cluttersim.validate.height_limit_m`."""
    count, extreme = window.implausible
    if count:
        warnings.warn(
            f"{window.source.path.name}: {count} DEM cell(s) around the track have heights beyond "
            f"±{height_limit_m(window.source.body.mean_radius_m) / 1e3:g} km (the most extreme {extreme:.6g} m: a nodata "
            "value without its nodata tag?); they are treated as nodata",
            stacklevel=3,
        )
    frac = window.hole_fraction()
    if 0 < frac < 1:  # all nodata is an error (build_facets), not a warning
        warnings.warn(
            f"{window.source.path.name}: {100 * frac:.2f}% of the DEM cells around the track are nodata; "
            "they are skipped (no echo from holes)",
            stacklevel=3,
        )


# --------------------------------------------------------------------------- units and plausibility

#: Band unit names (lower case) → metres, for heights. GDAL writes what the file says; these are
#: the spellings in use for metres and feet (international foot 0.3048 m exactly; US survey foot
#: 1200/3937 m: NIST Handbook 44, Appendix C).
_HEIGHT_UNITS_M = {
    **dict.fromkeys(["", "m", "metre", "metres", "meter", "meters", "metre(s)"], 1.0),
    **dict.fromkeys(["km", "kilometre", "kilometres", "kilometer", "kilometers"], 1000.0),
    **dict.fromkeys(["ft", "foot", "feet", "international foot", "international feet", "foot (international)",
                     "ft (international)", "intl foot"], 0.3048),
    **dict.fromkeys(["us survey foot", "us survey feet", "us-ft", "ftus", "ft_us", "us_survey_foot", "foot_us",
                     "us foot", "us feet", "survey foot", "foot (us survey)"], 1200.0 / 3937.0),
}


def vertical_scaling(path, scale, offset, unit, crs) -> tuple[float, float]:
    """Metres per stored value and offset in metres: the band's scale and offset (GDAL's, as in
    int16 DEMs stored as value × scale + offset) and its vertical unit, from the band's unit
    name or else from the vertical axis of a compound CRS. An unknown unit, or a band unit that
    disagrees with the CRS's, is refused (DemError): heights are never used in a unit guessed."""
    scale = 1.0 if scale is None else float(scale)
    offset = 0.0 if offset is None else float(offset)
    if not (math.isfinite(scale) and scale != 0 and math.isfinite(offset)):
        raise DemError(f"{path}: band scale {scale!r} and offset {offset!r}: expected finite numbers, scale not 0")
    name = (unit or "").strip().lower()
    if name not in _HEIGHT_UNITS_M:
        raise DemError(
            f"{path}: band unit {unit!r} not understood: expected metres (m) or feet (ft, US survey foot); set the "
            "band's unit if its heights are in one of these"
        )
    band_m = _HEIGHT_UNITS_M[name]
    crs_m = _vertical_crs_unit_m(crs)
    if name and crs_m is not None and not math.isclose(band_m, crs_m, rel_tol=1e-9):
        raise DemError(
            f"{path}: band unit {unit!r} ({band_m:g} m) disagrees with the CRS's vertical unit ({crs_m:g} m); expected "
            "one unit for the heights"
        )
    unit_m = band_m if name else (crs_m if crs_m is not None else 1.0)
    return scale * unit_m, offset * unit_m


def _vertical_crs_unit_m(crs) -> float | None:
    """Metres per unit of the vertical axis of a compound (or vertical) CRS; None if it has none."""
    if crs is None:
        return None
    # a compound CRS first (pyproj calls a compound CRS vertical too, but its first axis is horizontal)
    for sub in (list(crs.sub_crs_list) if crs.is_compound else [crs]):
        if sub.is_vertical and sub.axis_info:
            factor = sub.axis_info[0].unit_conversion_factor
            if factor and math.isfinite(factor):
                return float(factor)
    return None


def check_angular_units(crs, path) -> None:
    """Refuse a geographic CRS whose angles are not degrees counted from the body's reference
    meridian (grads from Paris, EPSG:4807, would be read as degrees from Greenwich)."""
    if crs is None or not crs.is_geographic:
        return
    factor = crs.axis_info[0].unit_conversion_factor if crs.axis_info else math.radians(1.0)
    unit = crs.axis_info[0].unit_name if crs.axis_info else "degree"
    pm = crs.prime_meridian
    if not math.isclose(factor, math.radians(1.0), rel_tol=1e-9):
        raise DemError(
            f"{path}: geographic CRS {crs.name!r} counts angles in {unit}: expected degrees; reproject the DEM to a "
            "CRS in degrees"
        )
    if pm is not None and pm.longitude != 0:
        raise DemError(
            f"{path}: geographic CRS {crs.name!r} counts longitudes from the {pm.name} meridian "
            f"({pm.longitude:g} {pm.unit_name} east): expected the body's reference meridian (Greenwich on Earth); "
            "reproject the DEM"
        )


def mask_implausible_heights(elevation_m: np.ndarray, body: Body, path) -> tuple[int, float]:
    """Turn heights beyond ±:func:`~cluttersim.validate.height_limit_m` into holes (NaN), in place;
    returns (their count, the most extreme). If every cell with a value is beyond it, the heights
    are not metres on this body at all: DemError."""
    limit = height_limit_m(body.mean_radius_m)
    with np.errstate(invalid="ignore"):
        bad = np.abs(elevation_m) > limit
    count = int(np.count_nonzero(bad))
    if not count:
        return 0, 0.0
    values = elevation_m[bad]
    extreme = float(values[np.argmax(np.abs(values))])
    if count == np.count_nonzero(np.isfinite(elevation_m)):
        raise DemError(
            f"{path}: every DEM cell read ({count}) is beyond ±{limit / 1e3:g} km of the reference surface (e.g. "
            f"{extreme:.6g} m): expected heights in metres (a nodata value without its tag, or another unit?)"
        )
    elevation_m[bad] = np.nan
    return count, extreme


def crs_linear_unit_m(crs) -> float:
    """Metres per unit of a projected CRS's x axis (1 for metres; 0.3048 for international feet);
    1 for a geographic CRS or none (their grids are in degrees)."""
    if crs is None or crs.is_geographic or not crs.axis_info:
        return 1.0
    factor = crs.axis_info[0].unit_conversion_factor
    return float(factor) if factor and math.isfinite(factor) else 1.0
