"""Reading and validating site records.

Sites come as points or polygons from a vector file (GeoPackage, GeoJSON,
Shapefile or anything else GDAL reads) or as a CSV table with x/y columns and a
CRS named by the user. Every record that cannot be used is dropped with a plain
reason and listed; nothing is dropped silently.
"""

from __future__ import annotations

import warnings
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS as ProjCRS

from mlsites._validation import gdal_reason
from mlsites.errors import (
    CRSError,
    DataQualityWarning,
    GridMismatchError,
    InputError,
    InsufficientDataError,
    VectorReadError,
)
from mlsites.grid import GridSpec

__all__ = ["SiteRecords", "read_sites", "check_n_splits"]

#: Suffixes read as delimited text tables with coordinate columns.
CSV_SUFFIXES = {".csv", ".tsv", ".txt"}
#: Column names tried (case-insensitively) when the CSV coordinate columns are not named.
X_NAMES = ("x", "easting", "east", "lon", "long", "longitude")
Y_NAMES = ("y", "northing", "north", "lat", "latitude")
#: Columns of the kept-site table (besides any ``keep_fields``).
_OUTPUT_COLUMNS = ("site_id", "start_year", "end_year", "kind", "certainty", "source_row", "geometry")
#: Columns of the table of dropped records.
DROPPED_COLUMNS = ["source_row", "site_id", "reason"]


@dataclass(frozen=True)
class SiteRecords:
    """Validated site records on the study grid and the records that were dropped.

    Attributes
    ----------
    sites : geopandas.GeoDataFrame
        Kept records in the grid CRS, one row per site, columns ``site_id`` (str),
        ``start_year``, ``end_year`` (float, NaN when unknown; negative = BCE),
        ``kind``, ``certainty``, ``source_row`` and ``geometry`` (Point or
        (Multi)Polygon).
    dropped : pandas.DataFrame
        One row per dropped record: ``source_row`` (0-based position of the
        record in the source layer or of the data row in the CSV), ``site_id``
        and ``reason``.
    source : str
        Name of the file the records came from (for messages).
    n_read : int
        Number of records in the source.
    source_crs : pyproj.CRS or None
        CRS the coordinates were recorded in (the file's, or the one given); the
        sites were reprojected from it when it differs from the grid's.
    """

    sites: gpd.GeoDataFrame
    dropped: pd.DataFrame
    source: str
    n_read: int
    source_crs: object = None

    @property
    def n_kept(self) -> int:
        """Number of usable sites."""
        return len(self.sites)

    def drop_counts(self) -> dict[str, int]:
        """Number of dropped records per reason, most frequent first."""
        counts = Counter(self.dropped["reason"])
        return dict(sorted(counts.items(), key=lambda kv: (-kv[1], kv[0])))

    def summary(self) -> str:
        """One line: records read, kept and dropped with the reasons."""
        line = f"read {self.n_read} site records from {self.source}; kept {self.n_kept}"
        n_dropped = len(self.dropped)
        if n_dropped:
            parts = ", ".join(f"{n} {reason}" for reason, n in self.drop_counts().items())
            line += f"; dropped {n_dropped} ({parts})"
        else:
            line += "; dropped 0"
        return line

    def check_n_splits(self, n_splits: int) -> None:
        """Raise :class:`InsufficientDataError` if there are fewer sites than folds."""
        check_n_splits(self.n_kept, n_splits, source=self.source, summary=self.summary(),
                       n_duplicate_ids=self.drop_counts().get("duplicate id", 0))


def check_n_splits(n_sites: int, n_splits: int, *, source: str = "the site layer",
                   summary: str | None = None, n_duplicate_ids: int = 0) -> None:
    """Stop when there are too few usable sites for the requested number of folds.

    Parameters
    ----------
    n_sites : int
        Usable sites after validation.
    n_splits : int
        Requested number of cross-validation folds; each needs at least one site.
    source : str
        File name for the message.
    summary : str, optional
        The :meth:`SiteRecords.summary` line, appended to the message.
    n_duplicate_ids : int, default 0
        Records dropped because their id was already used; when there are any
        the message says so, as shared ids are the usual cause of too few sites.

    Raises
    ------
    InsufficientDataError
    """
    if n_sites >= n_splits:
        return
    extra = f" ({summary})" if summary else ""
    if n_duplicate_ids:
        advice = (f"{n_duplicate_ids} record(s) repeat an id already used and count as the same site: "
                  "give each site its own id (the id_field column, id_field in [sites])")
    elif n_sites >= 2:
        advice = f"use at most {n_sites} folds (n_splits) or add sites"
    else:
        advice = "cross-validation needs at least 2 sites; add sites"
    raise InsufficientDataError(
        f"{source}: {n_sites} usable site(s) but {n_splits} folds requested{extra}; "
        f"every fold needs at least one site: {advice}."
    )


def read_sites(path, grid: GridSpec, *, id_field: str = "site_id", x_field: str | None = None,
               y_field: str | None = None, crs=None, start_field: str | None = None,
               end_field: str | None = None, kind_field: str | None = None,
               certainty_field: str | None = None, layer: str | None = None,
               valid_mask=None, keep_fields=()) -> SiteRecords:
    """Read site records, reproject them to the study grid and validate them.

    Parameters
    ----------
    path : path-like or geopandas.GeoDataFrame
        A vector file (GeoPackage, GeoJSON, Shapefile, ...) with point or polygon
        geometries, or a CSV table (``.csv``, ``.tsv``, ``.txt``) with coordinate
        columns. A GeoDataFrame is taken as already read.
    grid : GridSpec
        The study grid; sites are reprojected to its CRS.
    id_field : str, default "site_id"
        Column with the site identifier (kept as text).
    x_field, y_field : str, optional
        Coordinate columns of a CSV. When not given, the first of ``x``,
        ``easting``, ``lon``, ``longitude`` (and ``y``, ``northing``, ``lat``,
        ``latitude``) present, ignoring case, is used.
    crs : str, int or CRS, optional
        CRS of the coordinates. Required for a CSV and for a vector file that
        declares none; must agree with the file's own CRS when it has one.
    start_field, end_field : str, optional
        Columns with the first and last year of the site (negative for BCE).
    kind_field, certainty_field : str, optional
        Columns with the site kind (text) and certainty (number or text).
    layer : str, optional
        Layer of a multi-layer file (GeoPackage); required when there are several.
    valid_mask : bool ndarray of the grid shape, raster path or callable, optional
        Study-area mask (True = usable cell). A callable takes ``(rows, cols)``
        arrays and returns booleans. Point sites on invalid cells are dropped.
    keep_fields : sequence of str, optional
        Other columns carried over unchanged under their own names (for example
        a dating category); each must exist and must not be one of the output
        columns above.

    Returns
    -------
    SiteRecords
        Kept sites (grid CRS) and the table of dropped records with reasons.

    Raises
    ------
    VectorReadError
        The file is missing or unreadable.
    CRSError
        No CRS is known for the coordinates, or the given one contradicts the file.
    InputError
        A named column is missing, or a CSV has no coordinate columns.
    InsufficientDataError
        No record is usable, for instance all lie outside the grid.

    Warns
    -----
    DataQualityWarning
        When records are dropped (the message is :meth:`SiteRecords.summary`).

    Notes
    -----
    Checks run in this order and each dropped record gets the first reason that
    applies: "empty geometry" (in a CSV "missing coordinates", or "coordinates
    not numbers" with the text found), "polygon with zero area" (an outline that
    collapses to a line or point), "unsupported geometry type X", "missing id", "start year not a number",
    "end year not a number", "start year after end year", "could not be
    reprojected", "outside study area" (a point outside the grid, a polygon not
    touching it), "on nodata cell" (points only; polygons are checked cell by
    cell in :func:`presence_cells`), "duplicate id" and "duplicate location"
    (exact same geometry). For duplicates the first usable record is kept.
    Single-part MultiPoints become Points; invalid polygons are repaired with
    ``shapely.make_valid`` and counted in a warning.
    """
    from mlsites.sampling._extract import valid_lookup

    source, raw, src_crs = _read_table(path, id_field=id_field, x_field=x_field,
                                       y_field=y_field, crs=crs, layer=layer)
    n_read = len(raw)
    if n_read == 0:
        raise InsufficientDataError(f"{source}: contains no site records; give a layer with sites")
    keep_fields = [f for f in dict.fromkeys(keep_fields or ()) if f is not None]
    for field in (start_field, end_field, kind_field, certainty_field, *keep_fields):
        _require_column(raw, field, source)
    clash = [f for f in keep_fields if f in _OUTPUT_COLUMNS]
    if clash:
        raise InputError(f"{source}: column {clash[0]!r} cannot be carried over, the site table has a column of "
                         f"that name ({', '.join(_OUTPUT_COLUMNS)}); rename it in the layer")
    reasons = np.full(n_read, None, dtype=object)

    def drop(mask, reason):
        mask = np.asarray(mask, dtype=bool) & pd.isna(reasons)
        if isinstance(reason, str):
            reasons[mask] = reason
        else:
            reasons[mask] = np.asarray(reason, dtype=object)[mask]

    geoms = raw.geometry.to_numpy()
    empty = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    drop(empty, raw.attrs.get("empty_reason", "empty geometry"))
    geoms, collapsed = _normalise_geometries(geoms, ~empty, source)
    drop(collapsed, "polygon with zero area (its outline collapses to a line or point); "
                    "give the site as a point or as a polygon with an area")
    gtype = np.array([g.geom_type if g is not None else "" for g in geoms], dtype=object)
    unsupported = ~np.isin(gtype, ["Point", "Polygon", "MultiPolygon"]) & ~empty
    drop(unsupported, np.array([f"unsupported geometry type {t}" for t in gtype], dtype=object))

    ids = _clean_ids(raw[id_field])
    drop(pd.isna(ids), "missing id")
    start = _to_years(raw, start_field, "start", drop)
    end = _to_years(raw, end_field, "end", drop)
    drop(start > end, "start year after end year")

    target = ProjCRS.from_user_input(grid.crs)
    projected = gpd.GeoSeries(np.where(pd.isna(reasons), geoms, None), crs=src_crs)
    if not ProjCRS.from_user_input(src_crs).equals(target):
        projected = projected.to_crs(target)
    pgeoms = projected.to_numpy()
    usable = pd.isna(reasons)
    bounds = shapely.bounds(pgeoms)
    drop(usable & ~np.isfinite(bounds).all(axis=1), "could not be reprojected")

    usable = pd.isna(reasons)
    is_point = usable & (gtype == "Point")
    rows = np.zeros(n_read, dtype=np.int64)
    cols = np.zeros(n_read, dtype=np.int64)
    rows[is_point], cols[is_point] = grid.rowcol(shapely.get_x(pgeoms[is_point]),
                                                 shapely.get_y(pgeoms[is_point]))
    inside = np.zeros(n_read, dtype=bool)
    inside[is_point] = grid.contains(rows[is_point], cols[is_point])
    poly = usable & ~is_point
    if poly.any():
        inside[poly] = shapely.intersects(pgeoms[poly], shapely.box(*grid.bounds))
    n_candidates = int(usable.sum())
    drop(usable & ~inside, "outside study area")
    if n_candidates and not (pd.isna(reasons) & inside).any():
        raise InsufficientDataError(_all_outside_message(source, n_candidates, pgeoms[usable],
                                                         grid, src_crs))

    lookup = valid_lookup(valid_mask, grid)
    if lookup is not None:
        check = pd.isna(reasons) & is_point
        if check.any():
            ok = np.ones(n_read, dtype=bool)
            ok[check] = lookup(rows[check], cols[check])
            drop(~ok, "on nodata cell")

    _drop_duplicates(ids, reasons, drop, "duplicate id")
    location_keys = shapely.to_wkb(shapely.normalize(geoms))
    _drop_duplicates(location_keys, reasons, drop, "duplicate location")

    keep = pd.isna(reasons)
    sites = gpd.GeoDataFrame(
        {
            "site_id": pd.Series(ids[keep], dtype="str"),
            "start_year": start[keep],
            "end_year": end[keep],
            "kind": _optional_text(raw, kind_field)[keep],
            "certainty": _optional_certainty(raw, certainty_field)[keep],
            "source_row": raw["source_row"].to_numpy()[keep],
            **{f: raw[f].to_numpy()[keep] for f in keep_fields},
        },
        geometry=gpd.GeoSeries(pgeoms[keep]).values,
        crs=grid.crs,
    )
    dropped = pd.DataFrame(
        {
            "source_row": raw["source_row"].to_numpy()[~keep],
            "site_id": pd.Series(ids[~keep], dtype=object),
            "reason": pd.Series(reasons[~keep], dtype=object),
        },
        columns=DROPPED_COLUMNS,
    )
    records = SiteRecords(sites, dropped, source, n_read, source_crs=ProjCRS.from_user_input(src_crs))
    if records.n_kept == 0:
        hint = "see the reasons and fix the layer"
        if "could not be reprojected" in records.drop_counts():
            hint = (f"coordinates that cannot be reprojected rarely fit their CRS ({src_crs.to_string()}): "
                    "set crs in [sites] (or --crs) to the CRS they were recorded in")
        raise InsufficientDataError(f"{source}: no usable site record ({records.summary()}); {hint}")
    if len(dropped):
        warnings.warn(records.summary(), DataQualityWarning, stacklevel=2)
    return records


# -- reading -------------------------------------------------------------------
def _read_table(path, *, id_field, x_field, y_field, crs, layer):
    """Return (source name, GeoDataFrame with source_row, source CRS)."""
    if isinstance(path, gpd.GeoDataFrame):
        source = "<GeoDataFrame>"
        gdf = path.copy()
        gdf = gdf.reset_index(drop=True)
        gdf["source_row"] = np.arange(len(gdf))
        _require_column(gdf, id_field, source, what="id_field")
        return source, gdf, _resolve_crs(gdf.crs, crs, source)
    path = Path(path)
    source = path.name
    if not path.exists():
        raise VectorReadError(f"{path}: file not found; check the path of the site layer")
    if path.suffix.lower() in CSV_SUFFIXES:
        return source, *_read_csv(path, id_field=id_field, x_field=x_field, y_field=y_field,
                                  crs=crs)
    import pyogrio

    try:
        layers = pyogrio.list_layers(path)
    except Exception as exc:  # pyogrio raises several types for unreadable data
        raise VectorReadError(f"{path}: not a vector file GDAL can read ({gdal_reason(exc)}); "
                              "give a GeoPackage, GeoJSON, Shapefile or CSV") from None
    names = [str(n) for n in layers[:, 0]]
    if layer is None and len(names) > 1:
        raise InputError(f"{path}: has {len(names)} layers ({', '.join(names)}); "
                         "choose one with layer")
    if layer is not None and layer not in names:
        raise InputError(f"{path}: no layer {layer!r}; layers are {', '.join(names)}")
    try:
        gdf = gpd.read_file(path, layer=layer)
    except Exception as exc:
        raise VectorReadError(f"{path}: could not be read ({gdal_reason(exc)})") from None
    gdf = gdf.reset_index(drop=True)
    gdf["source_row"] = np.arange(len(gdf))
    _require_column(gdf, id_field, source, what="id_field")
    return source, gdf, _resolve_crs(gdf.crs, crs, source)


def _read_csv(path: Path, *, id_field, x_field, y_field, crs):
    try:
        header = pd.read_csv(path, nrows=0)
        sep = ","
        if len(header.columns) == 1:
            name = str(header.columns[0])
            sep = ";" if ";" in name else ("\t" if "\t" in name else ",")
        table = pd.read_csv(path, sep=sep, dtype={id_field: str})
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise VectorReadError(f"{path}: not a readable CSV table ({gdal_reason(exc)})") from None
    found = [str(c) for c in table.columns]
    x_col = _find_column(found, x_field, X_NAMES)
    y_col = _find_column(found, y_field, Y_NAMES)
    if x_col is None or y_col is None:
        wanted = f"{x_field!r}/{y_field!r}" if (x_field or y_field) else "x/y coordinate"
        raise InputError(
            f"{path}: no {wanted} columns; columns found: {', '.join(found) or 'none'}. "
            "Name the coordinate columns with x_field and y_field."
        )
    if crs is None:
        raise CRSError(f"{path}: a CSV carries no CRS; set crs in [sites] (or --crs) to the CRS of "
                       f"columns {x_col}/{y_col}, for example crs = \"EPSG:4326\" for degrees")
    _require_column(table, id_field, path.name, what="id_field")
    x = pd.to_numeric(table[x_col], errors="coerce").to_numpy(dtype=float)
    y = pd.to_numeric(table[y_col], errors="coerce").to_numpy(dtype=float)
    ok = np.isfinite(x) & np.isfinite(y)
    geoms = np.full(len(table), None, dtype=object)
    geoms[ok] = shapely.points(x[ok], y[ok])
    src_crs = _resolve_crs(None, crs, path.name)
    gdf = gpd.GeoDataFrame(table, geometry=gpd.GeoSeries(geoms).values, crs=src_crs)
    gdf["source_row"] = np.arange(len(gdf))
    # A cell that holds text (a decimal comma, a degree sign) is not "missing": say what it holds.
    given = table[x_col].notna().to_numpy() & table[y_col].notna().to_numpy()
    reasons = np.full(len(table), "missing coordinates", dtype=object)
    for i in np.flatnonzero(given & ~ok):
        reasons[i] = (f"coordinates not numbers ({x_col} {table[x_col].iloc[i]!r}, "
                      f"{y_col} {table[y_col].iloc[i]!r})")
    gdf.attrs["empty_reason"] = reasons
    return gdf, src_crs


def _find_column(columns, wanted, candidates):
    if wanted is not None:
        return wanted if wanted in columns else None
    lower = {c.lower(): c for c in columns}
    for name in candidates:
        if name in lower:
            return lower[name]
    return None


def _resolve_crs(file_crs, given, source):
    if given is not None:
        try:
            given_crs = ProjCRS.from_user_input(given)
        except Exception:
            raise CRSError(f"{source}: crs = {given!r} is not a CRS pyproj understands; set crs in [sites] "
                           "(or --crs) to an EPSG code like \"EPSG:4326\" or a WKT string") from None
        if file_crs is not None and not ProjCRS.from_user_input(file_crs).equals(given_crs):
            raise CRSError(
                f"{source}: the file declares CRS {ProjCRS.from_user_input(file_crs).to_string()} "
                f"but crs = {given!r} was given; remove crs from [sites] (or --crs) or fix the file's CRS"
            )
        return given_crs
    if file_crs is None:
        raise CRSError(f"{source}: the layer has no CRS; set crs in [sites] (or --crs) to the CRS of its "
                       "coordinates, for example crs = \"EPSG:4326\"")
    return ProjCRS.from_user_input(file_crs)


def _require_column(table, field, source, what="field"):
    if field is not None and field not in table.columns:
        cols = [str(c) for c in table.columns if c not in ("geometry", "source_row")]
        raise InputError(f"{source}: no column {field!r} (the {what}); columns found: "
                         f"{', '.join(cols) or 'none'}")


# -- cleaning ------------------------------------------------------------------
def _normalise_geometries(geoms, present, source):
    geoms = geoms.copy()
    mp = present & (shapely.get_type_id(geoms) == 4)  # MultiPoint
    if mp.any():
        single = mp & (shapely.get_num_geometries(geoms) == 1)
        geoms[single] = shapely.get_geometry(geoms[single], 0)
    polys = present & np.isin(shapely.get_type_id(geoms), [3, 6])
    # A zero-area outline is invalid, and make_valid turns it into a line or point.
    collapsed = np.zeros(len(geoms), dtype=bool)
    invalid = polys & ~shapely.is_valid(geoms)
    if invalid.any():
        fixed = shapely.make_valid(geoms[invalid])
        for i, g in zip(np.flatnonzero(invalid), fixed):
            parts = [p for p in shapely.get_parts(g) if p.geom_type in ("Polygon", "MultiPolygon")]
            if parts:
                geoms[i] = shapely.union_all(parts)
            else:
                collapsed[i] = True
        repaired = int((invalid & ~collapsed).sum())
        if repaired:
            warnings.warn(f"{source}: repaired {repaired} invalid polygon(s) with "
                          "make_valid; check their outlines", DataQualityWarning, stacklevel=4)
    return geoms, collapsed


def _clean_ids(values: pd.Series) -> np.ndarray:
    out = np.full(len(values), None, dtype=object)
    for i, v in enumerate(values.to_numpy(dtype=object)):
        if v is None or (isinstance(v, float) and np.isnan(v)) or v is pd.NA:
            continue
        if isinstance(v, (float, np.floating)) and float(v).is_integer():
            v = int(v)
        s = str(v).strip()
        if s:
            out[i] = s
    return out


def _to_years(raw, field, label, drop):
    if field is None:
        return np.full(len(raw), np.nan)
    values = raw[field]
    years = pd.to_numeric(values, errors="coerce").to_numpy(dtype=float)
    bad = pd.isna(years) & ~pd.isna(values.to_numpy(dtype=object))
    if values.dtype == object or pd.api.types.is_string_dtype(values):
        bad &= values.astype(str).str.strip().ne("").to_numpy()
    drop(bad, f"{label} year not a number")
    return years


def _optional_text(raw, field):
    if field is None:
        return np.full(len(raw), None, dtype=object)
    vals = raw[field].to_numpy(dtype=object)
    return np.array([None if pd.isna(v) else str(v) for v in vals], dtype=object)


def _optional_certainty(raw, field):
    if field is None:
        return np.full(len(raw), np.nan)
    numeric = pd.to_numeric(raw[field], errors="coerce")
    if (numeric.isna() == raw[field].isna()).all():
        return numeric.to_numpy(dtype=float)
    return _optional_text(raw, field)


def _drop_duplicates(keys, reasons, drop, reason):
    usable = np.flatnonzero(pd.isna(reasons))
    seen = set()
    dup = np.zeros(len(reasons), dtype=bool)
    for i in usable:
        k = keys[i]
        if k in seen:
            dup[i] = True
        else:
            seen.add(k)
    drop(dup, reason)


def _all_outside_message(source, n, geoms, grid, src_crs):
    b = shapely.total_bounds(geoms)
    return (
        f"{source}: all {n} site records lie outside the study grid (sites span {grid.extent_text(b)}; "
        f"grid {grid.extent_text()}, in {ProjCRS.from_user_input(grid.crs).to_string()}); "
        f"check that the CRS of the site coordinates is {src_crs.to_string()}, or set crs in [sites] (or --crs)"
    )


# -- shared helpers --------------------------------------------------------------
def metres_to_crs_units(grid: GridSpec, metres: float, what: str) -> float:
    """Convert a distance in metres to grid CRS units (projected grids only)."""
    metres = float(metres)
    if not np.isfinite(metres) or metres < 0:
        raise InputError(f"{what}={metres} m; expected a distance >= 0 in metres")
    if metres == 0:
        return 0.0
    if grid.is_geographic:
        raise CRSError(f"{what}={metres} m needs a projected study grid in metres; the grid CRS "
                       "is geographic (degrees). Reproject the study grid first.")
    return metres / grid._linear_unit_m()


def resolve_rng(random_state) -> np.random.Generator:
    """A NumPy Generator from None, an int, a SeedSequence, a Generator or a RandomState."""
    if isinstance(random_state, np.random.Generator):
        return random_state
    if isinstance(random_state, np.random.RandomState):
        return np.random.default_rng(random_state.randint(0, 2**31 - 1))
    if random_state is None or isinstance(random_state, (int, np.integer, np.random.SeedSequence)):
        return np.random.default_rng(random_state)
    raise InputError(f"random_state={random_state!r}; expected None, an int or a numpy Generator")


def sites_in_grid_crs(sites, grid: GridSpec, what: str = "sites") -> gpd.GeoDataFrame:
    """The GeoDataFrame of ``sites`` (SiteRecords or GeoDataFrame) in the grid CRS."""
    if isinstance(sites, SiteRecords):
        return sites.sites
    if not isinstance(sites, gpd.GeoDataFrame):
        raise InputError(f"{what}: expected SiteRecords or a GeoDataFrame, "
                         f"got {type(sites).__name__}")
    if sites.crs is None:
        raise CRSError(f"{what}: the GeoDataFrame has no CRS; set it (gdf.set_crs) or read the "
                       "sites with read_sites")
    if not ProjCRS.from_user_input(sites.crs).equals(ProjCRS.from_user_input(grid.crs)):
        sites = sites.to_crs(grid.crs)
    return sites


def check_mask_shape(mask: np.ndarray, grid: GridSpec, what: str = "valid_mask") -> np.ndarray:
    """Return ``mask`` as a boolean array after checking it has the grid shape."""
    mask = np.asarray(mask)
    if mask.shape != grid.shape:
        raise GridMismatchError(f"{what} has shape {mask.shape}, the study grid is {grid.shape}; "
                                "build the mask on the study grid")
    if mask.dtype != bool:
        raise InputError(f"{what} has dtype {mask.dtype}; expected a boolean array "
                         "(True = usable cell)")
    return mask
