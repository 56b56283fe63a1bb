"""Presence samples: the grid cells each site covers, weighted so each site counts once."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import shapely
from affine import Affine
from rasterio.features import rasterize

from mlsites.errors import DataQualityWarning, InputError, InsufficientDataError
from mlsites.grid import GridSpec
from mlsites.sampling._extract import valid_lookup
from mlsites.sampling._sites import metres_to_crs_units, resolve_rng, sites_in_grid_crs

__all__ = ["presence_cells"]

#: Candidate cells handled per chunk of point sites (bounds temporary memory).
CHUNK_CELLS = 4_000_000
PRESENCE_COLUMNS = ["row", "col", "x", "y", "site_id", "weight"]


def presence_cells(sites, grid: GridSpec, *, buffer_m: float = 0.0, valid_mask=None,
                   one_cell_per_site: bool = False, random_state=None) -> pd.DataFrame:
    """Grid cells covered by each site, with weights summing to one per site.

    Parameters
    ----------
    sites : SiteRecords or geopandas.GeoDataFrame
        Sites with ``site_id`` and Point or (Multi)Polygon geometries (a
        GeoDataFrame in another CRS is reprojected to the grid CRS).
    grid : GridSpec
        The study grid.
    buffer_m : float, default 0
        Radius in metres around point sites. Polygons use their own outline.
    valid_mask : bool ndarray, raster path or callable, optional
        Study-area mask (True = usable); cells on invalid cells are removed.
    one_cell_per_site : bool, default False
        Keep one random cell per site (weight 1) instead of all its cells.
    random_state : None, int or numpy Generator
        Seed for ``one_cell_per_site``.

    Returns
    -------
    pandas.DataFrame
        Columns ``row``, ``col`` (int64), ``x``, ``y`` (cell centre, grid CRS),
        ``site_id`` (str) and ``weight`` (float64), ordered by site (input
        order), then row and column. ``attrs`` holds ``n_nodata_cells`` and
        ``n_outside_cells`` (cells removed) and ``dropped`` (a list of
        ``{"site_id", "reason"}`` for sites that lost all their cells).

    Raises
    ------
    CRSError
        ``buffer_m > 0`` on a geographic (degree) grid, or sites without CRS.
    InsufficientDataError
        No site keeps any cell.

    Warns
    -----
    DataQualityWarning
        When cells or whole sites are removed (with the counts).

    Notes
    -----
    A point site covers the cell that contains it plus every cell whose centre
    lies within ``buffer_m`` of the point (distance <= radius), so a buffer of 0
    or smaller than a cell still gives the containing cell. A polygon covers the
    cells whose centre lies inside it (rasterised on the polygon's bounding
    window only, GDAL's centre rule); a polygon that holds no cell centre gets
    the cell of its representative point; parts of a polygon beyond the grid
    edge give no cells (and are not counted as removed). Cells of point buffers
    outside the grid and cells on nodata are removed and counted before
    weighting, so each site's weights are ``1 / n_cells`` and sum to one
    (METHODS.md §7, site footprints and weights): a site of 12
    cells gives 12 rows of weight 1/12 and one of a single cell one row of
    weight 1, so large sites do not dominate. Sites that overlap keep one row
    each for a shared cell, each with its own site's weight.
    """
    gdf = sites_in_grid_crs(sites, grid)
    if "site_id" not in gdf.columns:
        cols = [str(c) for c in gdf.columns if c != gdf.geometry.name]
        raise InputError(f"sites: no 'site_id' column (columns: {', '.join(cols) or 'none'}); "
                         "read the sites with read_sites or name the id column site_id")
    radius = metres_to_crs_units(grid, buffer_m, "buffer_m")
    lookup = valid_lookup(valid_mask, grid)
    geoms = gdf.geometry.to_numpy()
    ids = gdf["site_id"].astype(str).to_numpy(dtype=object)
    type_id = shapely.get_type_id(geoms)
    point = type_id == 0

    parts = []  # (site index, rows, cols)
    if point.any():
        parts.append(_point_cells(np.flatnonzero(point), geoms[point], grid, radius))
    for i in np.flatnonzero(~point):
        parts.append(_polygon_cells(i, geoms[i], grid))
    site_idx = np.concatenate([p[0] for p in parts]) if parts else np.zeros(0, np.int64)
    rows = np.concatenate([p[1] for p in parts]) if parts else np.zeros(0, np.int64)
    cols = np.concatenate([p[2] for p in parts]) if parts else np.zeros(0, np.int64)

    inside = grid.contains(rows, cols)
    n_outside = int((~inside).sum())
    site_idx, rows, cols = site_idx[inside], rows[inside], cols[inside]
    n_nodata = 0
    if lookup is not None and rows.size:
        ok = lookup(rows, cols)
        n_nodata = int((~ok).sum())
        site_idx, rows, cols = site_idx[ok], rows[ok], cols[ok]

    order = np.lexsort((cols, rows, site_idx))
    site_idx, rows, cols = site_idx[order], rows[order], cols[order]
    counts = np.bincount(site_idx, minlength=len(gdf))
    lost = np.flatnonzero(counts == 0)
    if one_cell_per_site and rows.size:
        rng = resolve_rng(random_state)
        has = np.flatnonzero(counts)
        starts = np.concatenate([[0], np.cumsum(counts)])[has]
        pick = starts + rng.integers(0, counts[has])
        site_idx, rows, cols = site_idx[pick], rows[pick], cols[pick]
        weight = np.ones(rows.size)
    else:
        weight = 1.0 / counts[site_idx]

    x, y = grid.xy(rows, cols)
    out = pd.DataFrame(
        {
            "row": rows.astype(np.int64),
            "col": cols.astype(np.int64),
            "x": x,
            "y": y,
            "site_id": pd.Series(ids[site_idx], dtype="str"),
            "weight": weight.astype(np.float64),
        },
        columns=PRESENCE_COLUMNS,
    )
    dropped = [{"site_id": str(ids[i]), "reason": "no usable cell (outside study area or nodata)"}
               for i in lost]
    out.attrs.update(n_nodata_cells=n_nodata, n_outside_cells=n_outside, dropped=dropped)
    if len(lost) == len(gdf):
        raise InsufficientDataError(
            f"none of the {len(gdf)} sites covers a usable cell ({n_outside} cell(s) outside the "
            f"grid, {n_nodata} on nodata); check the study-area mask and the site layer"
        )
    if n_nodata or n_outside or len(lost):
        msg = (f"presence cells: removed {n_nodata} cell(s) on nodata and {n_outside} outside the "
               f"grid; {len(lost)} site(s) lost all cells and were dropped")
        if len(lost):
            shown = ", ".join(str(ids[i]) for i in lost[:5])
            msg += f" ({shown}{', ...' if len(lost) > 5 else ''})"
        warnings.warn(msg, DataQualityWarning, stacklevel=2)
    return out


def _point_cells(site_idx, points, grid: GridSpec, radius: float):
    """Cells of point sites: the containing cell and all centres within ``radius``."""
    px, py = shapely.get_x(points), shapely.get_y(points)
    r0, c0 = grid.rowcol(px, py)
    dx, dy = grid.res
    k_r = int(np.ceil(radius / dy)) + 1 if radius > 0 else 0
    k_c = int(np.ceil(radius / dx)) + 1 if radius > 0 else 0
    dr, dc = np.meshgrid(np.arange(-k_r, k_r + 1), np.arange(-k_c, k_c + 1), indexing="ij")
    dr, dc = dr.ravel(), dc.ravel()
    centre = (dr == 0) & (dc == 0)
    chunk = max(1, CHUNK_CELLS // dr.size)
    out_i, out_r, out_c = [], [], []
    for s in range(0, px.size, chunk):
        sl = slice(s, s + chunk)
        rows = r0[sl, None] + dr[None, :]
        cols = c0[sl, None] + dc[None, :]
        cx, cy = grid.xy(rows, cols)
        d2 = (cx - px[sl, None]) ** 2 + (cy - py[sl, None]) ** 2
        keep = (d2 <= radius * radius) | centre[None, :]
        which = np.nonzero(keep)
        out_i.append(site_idx[sl][which[0]])
        out_r.append(rows[which])
        out_c.append(cols[which])
    return np.concatenate(out_i), np.concatenate(out_r), np.concatenate(out_c)


def _polygon_cells(i: int, geom, grid: GridSpec):
    """Cells of one polygon site: centres inside, else the representative point's cell."""
    minx, miny, maxx, maxy = geom.bounds
    t = grid.transform
    c_lo = max(int(np.floor((minx - t.c) / t.a)), 0)
    c_hi = min(int(np.floor((maxx - t.c) / t.a)), grid.width - 1)
    r_lo = max(int(np.floor((maxy - t.f) / t.e)), 0)
    r_hi = min(int(np.floor((miny - t.f) / t.e)), grid.height - 1)
    rows = cols = np.zeros(0, dtype=np.int64)
    if c_hi >= c_lo and r_hi >= r_lo:
        shape = (r_hi - r_lo + 1, c_hi - c_lo + 1)
        window_transform = t @ Affine.translation(c_lo, r_lo)
        burned = rasterize([(geom, 1)], out_shape=shape, transform=window_transform, fill=0,
                           dtype="uint8", all_touched=False)
        rr, cc = np.nonzero(burned)
        rows, cols = rr.astype(np.int64) + r_lo, cc.astype(np.int64) + c_lo
    if rows.size == 0:
        p = geom.representative_point()
        r, c = grid.rowcol(p.x, p.y)
        rows, cols = np.atleast_1d(r), np.atleast_1d(c)
    return np.full(rows.size, i, dtype=np.int64), rows, cols
