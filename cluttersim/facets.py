"""Facets: the DEM as small planar patches on the curved body, grouped in tiles.

Every valid DEM cell becomes one facet: body-fixed position (relative to a
local origin), unit outward normal, true (sloping, curved-body) area, and the
two edge vectors whose projections on the line of sight give its range extent.
Facets are stored tile by tile (square blocks of cells) so the kernel can cull
a whole tile with one bounding-sphere test per trace.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import kernels
from .io.dem import DemWindow
from .errors import DemError

#: Side of a culling tile, in DEM cells.
TILE_CELLS = 16


@dataclass(frozen=True)
class Facets:
    """Facet geometry of a DEM window in tile order (see module docstring).

    Per-facet arrays are structure-of-arrays of shape (3, nfacet) in float32:
    ``rel_m`` the position relative to the facet's tile centre, ``normal`` the
    unit outward normal, ``e_col_m``/``e_row_m`` the edge vectors; ``area_m2``
    (nfacet,). Tile centres are float64 metres relative to ``origin_m``
    (body-fixed Cartesian). ``cell`` holds the flat index ``row * nx + col`` of
    each facet's DEM cell in the window, so results can be mapped to the ground.
    """

    origin_m: np.ndarray
    rel_m: np.ndarray
    normal: np.ndarray
    e_col_m: np.ndarray
    e_row_m: np.ndarray
    area_m2: np.ndarray
    cell: np.ndarray
    tile_offsets: np.ndarray
    tile_centre_m: np.ndarray
    tile_radius_m: np.ndarray
    tile_extent_m: np.ndarray
    tile_slab: np.ndarray
    grid_shape: tuple[int, int]

    def __len__(self) -> int:
        return self.rel_m.shape[1]

    @property
    def nbytes(self) -> int:
        return sum(a.nbytes for a in (self.rel_m, self.normal, self.e_col_m, self.e_row_m, self.area_m2, self.cell))

    @property
    def max_tile_facets(self) -> int:
        return int(np.diff(self.tile_offsets).max(initial=0))

    def positions_m(self, index) -> np.ndarray:
        """Positions (n, 3) relative to ``origin_m`` of the facets ``index`` (float64)."""
        index = np.asarray(index)
        tile = np.searchsorted(self.tile_offsets, index, side="right") - 1
        return self.tile_centre_m[tile] + self.rel_m[:, index].T.astype(np.float64)


def build_facets(window: DemWindow, origin_m: np.ndarray | None = None, tile: int = TILE_CELLS) -> Facets:
    """Build facets for every valid cell of a DEM window.

    Holes (NaN) produce no facet; their neighbours use the nearest valid
    height for their edge vectors. Raises :class:`DemError` if no cell is valid.
    """
    elev = window.elevation_m
    valid = np.isfinite(elev)
    if not valid.any():
        raise DemError(f"{window.source.path}: every DEM cell around the track is nodata")
    filled = _fill_holes(elev, valid)
    body = window.source.body
    lon, lat = window.cell_lonlat()
    lon = np.ascontiguousarray(lon, dtype=np.float64)
    lat = np.ascontiguousarray(lat, dtype=np.float64)
    ny, nx = elev.shape
    if origin_m is None:
        origin_m = body.geodetic_to_ecef_m(lat[ny // 2, nx // 2], lon[ny // 2, nx // 2], 0.0)
    origin_m = np.asarray(origin_m, dtype=np.float64)
    trig = _lonlat_trig(lon, lat)
    grid = np.empty((ny, nx, 3))
    kernels.grid_to_ecef(*trig, filled, body.semi_major_m, body.eccentricity_sq, origin_m, grid)
    nty, ntx = -(-ny // tile), -(-nx // tile)
    padded = np.zeros((nty * tile, ntx * tile), dtype=bool)
    padded[:ny, :nx] = valid
    counts = padded.reshape(nty, tile, ntx, tile).sum(axis=(1, 3)).ravel()
    offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    n = int(offsets[-1])
    rel = np.empty((3, n), dtype=np.float32)
    normal = np.empty((3, n), dtype=np.float32)
    e_col = np.empty((3, n), dtype=np.float32)
    e_row = np.empty((3, n), dtype=np.float32)
    area = np.empty(n, dtype=np.float32)
    cell = np.empty(n, dtype=np.int32 if ny * nx < 2**31 else np.int64)
    ntile = nty * ntx
    tcentre = np.zeros((ntile, 3))
    tradius = np.full(ntile, -1.0)
    textent = np.zeros(ntile)
    tslab = np.zeros((ntile, 6))
    kernels.build_tiled_facets(
        grid, valid, *trig, tile, offsets, rel, normal, e_col, e_row, area, cell, tcentre, tradius, textent,
        origin_m, tslab,
    )  # fmt: skip
    return Facets(
        origin_m=origin_m,
        rel_m=rel,
        normal=normal,
        e_col_m=e_col,
        e_row_m=e_row,
        area_m2=area,
        cell=cell,
        tile_offsets=offsets,
        tile_centre_m=tcentre,
        tile_radius_m=tradius,
        tile_extent_m=textent,
        tile_slab=tslab,
        grid_shape=(ny, nx),
    )


def _lonlat_trig(lon_deg: np.ndarray, lat_deg: np.ndarray):
    """(cos φ, sin φ, cos λ, sin λ) of every cell, each (ny, nx).

    A geographic window's latitude depends on the row only and its longitude
    on the column only: the trigonometry is then done once per row and column
    and returned as broadcast (read-only) views, instead of 4 functions of
    ny × nx values.
    """
    shape = lat_deg.shape
    lat_col = lat_deg[:, :1]
    lon_row = lon_deg[:1, :]
    if np.array_equal(lat_deg, np.broadcast_to(lat_col, shape)) and np.array_equal(lon_deg, np.broadcast_to(lon_row, shape)):
        lat_r, lon_r = np.radians(lat_col), np.radians(lon_row)
        return tuple(np.broadcast_to(v, shape) for v in (np.cos(lat_r), np.sin(lat_r), np.cos(lon_r), np.sin(lon_r)))
    lat_r, lon_r = np.radians(lat_deg), np.radians(lon_deg)
    return np.cos(lat_r), np.sin(lat_r), np.cos(lon_r), np.sin(lon_r)


def _fill_holes(elev: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """Heights with each hole replaced by its nearest valid cell (for neighbours' geometry only)."""
    if valid.all():
        return np.ascontiguousarray(elev, dtype=np.float64)
    from scipy import ndimage

    idx = ndimage.distance_transform_edt(~valid, return_distances=False, return_indices=True)
    return np.ascontiguousarray(elev[tuple(idx)], dtype=np.float64)
