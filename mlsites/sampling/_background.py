"""Background samples: random study-area cells, optionally kept away from sites and
restricted to, or weighted by, survey coverage (target-group background).
"""

from __future__ import annotations

import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS as ProjCRS
from scipy.spatial import cKDTree

from mlsites.errors import (
    CRSError,
    DataQualityWarning,
    InputError,
    InsufficientDataError,
    VectorReadError,
)
from mlsites.grid import GridSpec
from mlsites.sampling._extract import valid_lookup
from mlsites.sampling._sites import (
    SiteRecords,
    metres_to_crs_units,
    resolve_rng,
    sites_in_grid_crs,
)

__all__ = ["sample_background", "balance_weights", "sample_weights", "in_survey", "SURVEY_MODES"]

SURVEY_MODES = ("inside", "weighted")
BACKGROUND_COLUMNS = ["row", "col", "x", "y", "weight"]
#: Below this expected acceptance rate, candidates are listed explicitly instead of
#: drawn by rejection (a rejection draw would need > 200 tries per kept cell).
MIN_ACCEPT_RATE = 0.005
#: Above this share of the acceptable cells, sample from an explicit list too.
MAX_SHARE_FOR_REJECTION = 0.5
MAX_BATCH = 2_000_000
#: Switch to enumeration when fewer than this share of accepted draws are new cells.
MIN_NEW_SHARE = 0.1
#: Survey proposals use blocks of at least this many cells a side, and at most this
#: many blocks over the grid (so the block table stays small).
BLOCK_MIN = 16
MAX_BLOCKS = 1_000_000


def balance_weights(presence_weight_total: float, n_background: int) -> float:
    """Weight of each background row so background and presence totals are equal.

    Parameters
    ----------
    presence_weight_total : float
        Sum of presence weights (the number of sites when each site sums to one).
    n_background : int
        Number of background rows.

    Returns
    -------
    float
        ``presence_weight_total / n_background``.

    References
    ----------
    METHODS.md §7 (balanced weighting; Barbet-Massin et al. 2012,
    doi:10.1111/j.2041-210X.2011.00172.x): 3 presences and 10 000 background
    rows give 0.0003.
    """
    if not np.isfinite(presence_weight_total) or presence_weight_total <= 0:
        raise InputError(f"presence_weight_total={presence_weight_total}; expected a positive sum")
    if int(n_background) < 1:
        raise InputError(f"n_background={n_background}; expected at least one background row")
    return float(presence_weight_total) / int(n_background)


def sample_weights(label, site_id) -> np.ndarray:
    """Weights of a presence-background table: each site counts once, mean weight 1.

    Parameters
    ----------
    label : array-like of int, shape (n_samples,)
        1 for site cells, 0 for background cells.
    site_id : array-like, shape (n_samples,)
        Site of each site cell (any hashable values; ignored for background).

    Returns
    -------
    ndarray of float64, shape (n_samples,)
        Site cells ``c / n_cells(site)``, background cells ``c * n_sites / n_background``
        with ``c = n_samples / (2 * n_sites)``, so that the weights average 1.

    Raises
    ------
    InputError
        Labels other than 0 and 1, or no site cell or no background cell.

    Notes
    -----
    The ratios are those of METHODS.md §7: every site's cells sum to the same
    total whatever the site's size, and all background together weighs as much as
    all sites (balanced weighting, Barbet-Massin et al. 2012). The common factor
    ``c`` makes the weights average 1, so their sum is the number of samples and not
    a quantity that grows with the number of sites; a learner whose settings are
    absolute amounts of weight (a minimum leaf weight, a penalty on the summed loss)
    then reads them the same way in every study. Duplicating a study (the same sites
    twice under new ids, the background twice) gives every row the same weight as
    before.
    """
    label = np.asarray(label)
    site_id = np.asarray(site_id, dtype=object)
    if label.shape != site_id.shape or label.ndim != 1:
        raise InputError(f"label {label.shape} and site_id {site_id.shape} must be 1-d and of one length")
    if not np.isin(label, (0, 1)).all():
        raise InputError("label must hold 1 for site cells and 0 for background cells")
    pres = label == 1
    n_bg = int((~pres).sum())
    if not pres.any() or n_bg == 0:
        raise InputError(f"{int(pres.sum())} site cells and {n_bg} background cells; both are needed")
    codes, uniques = pd.factorize(pd.Series(site_id[pres]).astype(str))
    n_sites = len(uniques)
    w = np.empty(label.size, dtype=np.float64)
    w[pres] = 1.0 / np.bincount(codes)[codes]
    w[~pres] = balance_weights(float(n_sites), n_bg)
    return w * (label.size / (2.0 * n_sites))


def in_survey(x, y, grid: GridSpec, survey) -> np.ndarray:
    """Whether each point (cell centre) lies inside a survey polygon.

    Parameters
    ----------
    x, y : array-like of float
        Coordinates in the grid CRS, for example presence cell centres.
    grid : GridSpec
        The study grid (the survey layer is reprojected to its CRS).
    survey : GeoDataFrame or path-like
        Survey-coverage polygons, as for :func:`sample_background`.

    Returns
    -------
    ndarray of bool
        True where the point lies strictly inside a survey polygon: the rule by
        which ``survey_mode = "inside"`` accepts background cells, so a site none
        of whose cells passes it sits where no background can be drawn.

    Raises
    ------
    InputError, CRSError, VectorReadError
        As :func:`sample_background` for a bad survey layer.
    """
    surv = _Survey.build(survey, grid, "inside", None)
    return surv.effort_at(x, y) > 0


def sample_background(grid: GridSpec, *, n: int | None = None, fraction: float | None = None,
                      valid_mask=None, exclude_sites=None, exclusion_m: float = 0.0,
                      survey=None, survey_mode: str = "inside", effort_field: str | None = None,
                      random_state=0) -> pd.DataFrame:
    """Draw background cells at random from the study area, without replacement.

    Parameters
    ----------
    grid : GridSpec
        The study grid.
    n : int, optional
        Number of background cells.
    fraction : float, optional
        Alternatively, a share in (0, 1] of the valid study-area cells
        (``n = round(fraction * n_valid)``). Give exactly one of ``n`` and ``fraction``.
    valid_mask : bool ndarray of the grid shape, raster path or callable, optional
        Study-area mask (True = usable). None means every cell. A callable
        ``f(rows, cols)`` cannot be combined with ``fraction``.
    exclude_sites : SiteRecords, GeoDataFrame or DataFrame with x/y, optional
        Known sites (points or polygons, or presence cell centres) to keep away from.
    exclusion_m : float, default 0
        Cells whose centre lies within this distance (metres, inclusive) of a
        site point or polygon are not drawn. 0 disables the exclusion.
    survey : GeoDataFrame or path-like, optional
        Survey-coverage polygons (areas actually walked or inspected), in any CRS.
    survey_mode : {"inside", "weighted"}, default "inside"
        "inside": draw only cells whose centre is inside a survey polygon.
        "weighted": draw with probability proportional to survey effort
        (target-group background).
    effort_field : str, optional
        Numeric column of ``survey`` with the effort (visits, intensity) for
        "weighted". Without it every polygon has effort 1. Efforts of
        overlapping polygons add up.
    random_state : None, int or numpy Generator, default 0
        Seed; the same seed and inputs give the same table.

    Returns
    -------
    pandas.DataFrame
        Columns ``row``, ``col`` (int64), ``x``, ``y`` (cell centres, grid CRS)
        and ``weight`` (1.0; rescale with :func:`balance_weights`), sorted by
        row and column. ``attrs`` holds ``method`` ("rejection" or
        "enumeration") and ``n_draws``.

    Raises
    ------
    InputError
        Bad ``n``/``fraction``/``survey_mode``, a survey layer that does not
        overlap the grid or has bad geometries or efforts.
    CRSError
        ``exclusion_m > 0`` on a geographic grid, or a survey layer without CRS.
    InsufficientDataError
        Fewer acceptable cells than ``n``.

    Notes
    -----
    Sampling is exact and uniform without replacement over the acceptable cells
    (valid, not excluded, and surveyed in "inside" mode). By default it works by
    rejection: candidate cells are proposed with replacement in batches,
    tested (mask lookup, point-in-polygon for the survey, a k-d tree or
    polygon-distance query for the exclusion) and the first occurrence of each
    accepted cell is kept until ``n`` are found. The kept sequence is then a
    draw without replacement from the acceptance distribution, and no array of
    all cell indices is built, so a 10 000 x 10 000 grid needs only its boolean
    mask. Without a survey, proposals are uniform over the grid. With one, the
    grid is cut into square blocks; a block met by the bounding box of a survey
    polygon is proposed with probability proportional to an upper bound of the
    effort in it (the summed effort of the polygons whose box meets it; 1 in
    "inside" mode), a cell uniformly within it, and the cell is accepted with
    probability effort / bound. Each cell is thus proposed-and-accepted with
    probability proportional to its effort ("weighted": successive sampling
    proportional to effort) or uniformly over surveyed cells ("inside"). When
    the expected acceptance rate is below 0.5 % or ``n`` is more than half the
    acceptable cells, the acceptable cells are listed explicitly and drawn with
    ``Generator.choice`` (with ``p`` proportional to effort in "weighted"
    mode). A survey cell is one whose centre lies strictly inside a survey
    polygon (shapely's point-in-polygon); the effort of a cell is the sum over
    the polygons containing it.

    Background here represents what was available to be found where people
    looked (presence-background view, METHODS.md §7); the exclusion distance
    turns it into a pseudo-absence design, so leave it at 0 unless that is meant.

    References
    ----------
    Phillips, S. J. et al. (2009). Sample selection bias and presence-only distribution
    models: implications for background and pseudo-absence data. Ecological
    Applications 19(1), 181-197. doi:10.1890/07-2153.1
    """
    if survey_mode not in SURVEY_MODES:
        raise InputError(f"survey_mode={survey_mode!r}; expected one of {', '.join(SURVEY_MODES)}")
    if effort_field is not None and survey is None:
        raise InputError("effort_field was given without a survey layer; pass survey as well")
    rng = resolve_rng(random_state)
    lookup = valid_lookup(valid_mask, grid)
    mask = getattr(lookup, "mask", None)
    if lookup is None:
        n_valid = grid.n_cells
    elif mask is not None:
        n_valid = int(np.count_nonzero(mask))
    else:
        n_valid = None
    n = _resolve_n(n, fraction, n_valid)
    if n_valid is not None and n > n_valid:
        raise InsufficientDataError(f"{n} background cells requested but the study area has "
                                    f"{n_valid} valid cells; ask for fewer")
    excluder = _Excluder.build(exclude_sites, grid, exclusion_m)
    surv = _Survey.build(survey, grid, survey_mode, effort_field) if survey is not None else None

    p_valid = 1.0 if n_valid is None else n_valid / grid.n_cells
    if surv is None:
        p_est, n_acceptable_est = p_valid, p_valid * grid.n_cells
    else:
        p_est = p_valid * surv.accept_estimate
        n_acceptable_est = p_valid * surv.n_cells_estimate
    if p_est >= MIN_ACCEPT_RATE and n <= MAX_SHARE_FOR_REJECTION * n_acceptable_est:
        chosen, n_draws = _draw_by_rejection(rng, n, grid, lookup, surv, excluder, p_est)
        method = "rejection"
    else:
        chosen, n_draws = None, 0
    if chosen is None:
        chosen = _draw_by_enumeration(rng, n, grid, lookup, surv, excluder, n_valid)
        method = "enumeration"

    chosen = np.sort(chosen)
    rows, cols = np.divmod(chosen, grid.width)
    x, y = grid.xy(rows, cols)
    out = pd.DataFrame({"row": rows.astype(np.int64), "col": cols.astype(np.int64), "x": x,
                        "y": y, "weight": np.ones(rows.size)}, columns=BACKGROUND_COLUMNS)
    out.attrs.update(method=method, n_draws=int(n_draws))
    return out


def _resolve_n(n, fraction, n_valid):
    if (n is None) == (fraction is None):
        raise InputError("give exactly one of n (a count) and fraction (a share of the study "
                         f"area) for the background; got n={n}, fraction={fraction}")
    if n is not None:
        if int(n) != n or n < 1:
            raise InputError(f"n={n}; expected a whole number of background cells >= 1")
        return int(n)
    if not (0 < fraction <= 1):
        raise InputError(f"fraction={fraction}; expected a share in (0, 1]")
    if n_valid is None:
        raise InputError("fraction needs the study area as a boolean array or raster "
                         "(valid_mask), not a callable; give n instead")
    n = int(round(fraction * n_valid))
    if n < 1:
        raise InputError(f"fraction={fraction} of {n_valid} valid cells gives no cell; "
                         "use a larger fraction or n")
    return n


def _accept(flat, u, bound, grid, lookup, surv, excluder):
    """Boolean acceptance of candidate flat indices.

    ``u`` are uniform draws and ``bound`` the proposal's effort bound per candidate
    ("weighted" mode only): a candidate is kept with probability effort / bound.
    """
    ok = flat >= 0
    rows, cols = np.divmod(np.where(ok, flat, 0), grid.width)
    if lookup is not None:
        idx = np.flatnonzero(ok)
        ok[idx] = lookup(rows[idx], cols[idx])
    if surv is not None:
        idx = np.flatnonzero(ok)
        effort = surv.effort_at(*grid.xy(rows[idx], cols[idx]))
        ok[idx] = effort > 0 if u is None else u[idx] * bound[idx] < effort
    if excluder is not None:
        idx = np.flatnonzero(ok)
        ok[idx] = ~excluder.excluded(*grid.xy(rows[idx], cols[idx]))
    return ok


def _draw_by_rejection(rng, n, grid, lookup, surv, excluder, p_est):
    """Proposals with replacement, first occurrence of each accepted cell kept.

    Without a survey the proposal is uniform over the grid; with one it is
    :meth:`_Survey.propose`, whose density times the acceptance probability is
    constant ("inside") or proportional to effort ("weighted") over the cells.
    """
    weighted = surv is not None and surv.mode == "weighted"
    kept = []
    kept_sorted = np.zeros(0, dtype=np.int64)
    n_kept = n_draws = n_accepted = 0
    recent_accepted = recent_new = 0
    while n_kept < n:
        rate = n_accepted / n_draws if n_draws else p_est
        if n_draws >= 200_000 and rate < MIN_ACCEPT_RATE:
            return None, n_draws
        batch = int(min(MAX_BATCH, max(1000, 1.2 * (n - n_kept) / max(rate, MIN_ACCEPT_RATE))))
        if surv is None:
            flat, bound = rng.integers(0, grid.n_cells, size=batch, dtype=np.int64), None
        else:
            flat, bound = surv.propose(rng, batch, grid)
        u = rng.random(batch) if weighted else None
        ok = _accept(flat, u, bound, grid, lookup, surv, excluder)
        n_draws += batch
        n_accepted += int(ok.sum())
        cand = flat[ok]
        _, first = np.unique(cand, return_index=True)
        cand = cand[np.sort(first)]
        if kept_sorted.size:
            pos = np.searchsorted(kept_sorted, cand)
            pos[pos == kept_sorted.size] = 0
            cand = cand[kept_sorted[pos] != cand]
        recent_accepted += int(ok.sum())
        recent_new += cand.size
        if recent_accepted >= 1000:
            if recent_new < MIN_NEW_SHARE * recent_accepted:
                # Mostly repeats: the acceptable set is not much larger than n (or the
                # effort is concentrated); listing it is cheaper and always terminates.
                return None, n_draws
            recent_accepted = recent_new = 0
        cand = cand[: n - n_kept]
        kept.append(cand)
        n_kept += cand.size
        kept_sorted = np.sort(np.concatenate([kept_sorted, cand]))
    return np.concatenate(kept), n_draws


def _draw_by_enumeration(rng, n, grid, lookup, surv, excluder, n_valid):
    """List every acceptable cell and draw ``n`` of them without replacement."""
    if surv is not None and n_valid is not None and n_valid < surv.n_cells_estimate:
        # Fewer valid than surveyed cells: list the valid ones, then test the survey.
        flat = _valid_flat_indices(grid, lookup)
        effort = surv.effort_at(*grid.xy(*np.divmod(flat, grid.width)))
        ok = effort > 0
    elif surv is not None:
        flat, effort = surv.enumerate_cells(grid)
        rows, cols = np.divmod(flat, grid.width)
        ok = np.ones(flat.size, dtype=bool) if lookup is None else lookup(rows, cols)
    else:
        flat = _valid_flat_indices(grid, lookup)
        effort = None
        ok = np.ones(flat.size, dtype=bool)
    if excluder is not None:
        idx = np.flatnonzero(ok)
        rows, cols = np.divmod(flat[idx], grid.width)
        ok[idx] = ~excluder.excluded(*grid.xy(rows, cols))
    flat = flat[ok]
    if n > flat.size:
        parts = ["valid"]
        if surv is not None:
            parts.append("surveyed")
        if excluder is not None:
            parts.append(f"farther than {excluder.distance_m:g} m from the sites")
        raise InsufficientDataError(
            f"{n} background cells requested but only {flat.size} cells are {' and '.join(parts)}; "
            "ask for fewer, reduce the exclusion distance or widen the survey"
        )
    if surv is not None and surv.mode == "weighted":
        effort = effort[ok]
        positive = effort > 0
        if n > int(positive.sum()):
            raise InsufficientDataError(f"{n} background cells requested but only "
                                        f"{int(positive.sum())} surveyed cells have effort > 0")
        pick = rng.choice(flat.size, size=n, replace=False, p=effort / effort.sum())
    else:
        pick = rng.choice(flat.size, size=n, replace=False)
    return flat[pick]


def _valid_flat_indices(grid, lookup):
    """Flat indices of all valid cells, built strip by strip."""
    mask = getattr(lookup, "mask", None)
    if lookup is None:
        return np.arange(grid.n_cells, dtype=np.int64)
    out = []
    strip = max(1, 4_000_000 // grid.width)
    for r in range(0, grid.height, strip):
        rr = np.arange(r, min(r + strip, grid.height))
        if mask is not None:
            block = mask[rr[0] : rr[-1] + 1]
        else:
            rows = np.repeat(rr, grid.width)
            cols = np.tile(np.arange(grid.width), rr.size)
            block = lookup(rows, cols).reshape(rr.size, grid.width)
        out.append(np.flatnonzero(block) + rr[0] * grid.width)
    return np.concatenate(out).astype(np.int64)


class _Excluder:
    """Distance test of cell centres against site points and polygons."""

    def __init__(self, points_xy, polygons, distance, distance_m):
        self.tree = cKDTree(points_xy) if len(points_xy) else None
        self.polys = shapely.STRtree(polygons) if len(polygons) else None
        self.distance = distance
        self.distance_m = distance_m

    @classmethod
    def build(cls, sites, grid, exclusion_m):
        distance = metres_to_crs_units(grid, exclusion_m, "exclusion_m")
        if sites is None or distance == 0:
            return None
        if isinstance(sites, (SiteRecords, gpd.GeoDataFrame)):
            geoms = sites_in_grid_crs(sites, grid, "exclude_sites").geometry.to_numpy()
            geoms = geoms[~(shapely.is_missing(geoms) | shapely.is_empty(geoms))]
            point = shapely.get_type_id(geoms) == 0
            xy = np.column_stack([shapely.get_x(geoms[point]), shapely.get_y(geoms[point])])
            polys = geoms[~point]
        elif isinstance(sites, pd.DataFrame) and {"x", "y"} <= set(sites.columns):
            xy = sites[["x", "y"]].to_numpy(dtype=float)
            polys = np.zeros(0, dtype=object)
        else:
            raise InputError("exclude_sites: expected SiteRecords, a GeoDataFrame or a DataFrame "
                             f"with x and y columns in the grid CRS, got {type(sites).__name__}")
        if not len(xy) and not len(polys):
            return None
        return cls(xy, polys, distance, float(exclusion_m))

    def excluded(self, x, y):
        out = np.zeros(np.size(x), dtype=bool)
        if out.size == 0:
            return out
        if self.tree is not None:
            # The bound only prunes the search; the inclusive test is done here.
            d, _ = self.tree.query(np.column_stack([x, y]),
                                   distance_upper_bound=self.distance * (1 + 1e-9) + 1e-9)
            out |= d <= self.distance
        if self.polys is not None:
            hit = self.polys.query(shapely.points(x, y), predicate="dwithin",
                                   distance=self.distance)
            out[hit[0]] = True
        return out


class _Survey:
    """Survey-coverage polygons in the grid CRS with effort per polygon."""

    def __init__(self, polygons, effort, mode, grid):
        self.polygons = polygons
        self.effort = effort
        self.mode = mode
        self.bounds = shapely.bounds(polygons)
        shapely.prepare(polygons)
        self._build_blocks(grid)

    def _build_blocks(self, grid):
        """Blocks of ``block`` x ``block`` cells met by a polygon's bounding box.

        ``block_bound`` is, per such block, the summed effort of all polygons whose
        bounding box meets it: an upper bound of the effort of any cell in the block.
        """
        b = max(BLOCK_MIN, int(np.ceil(np.sqrt(grid.n_cells / MAX_BLOCKS))))
        nbr, nbc = -(-grid.height // b), -(-grid.width // b)
        t = grid.transform
        c_lo = np.clip(np.floor((self.bounds[:, 0] - t.c) / t.a), 0, grid.width - 1) // b
        c_hi = np.clip(np.floor((self.bounds[:, 2] - t.c) / t.a), 0, grid.width - 1) // b
        r_lo = np.clip(np.floor((self.bounds[:, 3] - t.f) / t.e), 0, grid.height - 1) // b
        r_hi = np.clip(np.floor((self.bounds[:, 1] - t.f) / t.e), 0, grid.height - 1) // b
        e = self.effort if self.mode == "weighted" else np.ones(len(self.effort))
        r_lo, r_hi, c_lo, c_hi = (a.astype(np.int64) for a in (r_lo, r_hi, c_lo, c_hi))
        # Plain additions of non-negative efforts (no cumulative differences), so the
        # bound never falls below a cell's summed effort through cancellation.
        bound = np.zeros((nbr, nbc))
        for i in range(len(e)):
            bound[r_lo[i] : r_hi[i] + 1, c_lo[i] : c_hi[i] + 1] += e[i]
        if self.mode == "inside":
            bound = (bound > 0).astype(np.float64)
        self.block = b
        self.block_cols = nbc
        self.blocks = np.flatnonzero(bound > 0)
        self.block_bound = bound.ravel()[self.blocks]
        cum = np.cumsum(self.block_bound)
        self._block_cdf = cum / cum[-1]
        # Expected acceptance of a proposal: mean effort over the proposal mass.
        inside_grid = shapely.intersection(self.polygons, shapely.box(*grid.bounds))
        area = shapely.area(inside_grid) / (grid.res[0] * grid.res[1])
        self.n_cells_estimate = float(area.sum())
        mass = float((self.block_bound * b * b).sum())
        self.accept_estimate = min(1.0, float((area * e).sum()) / mass)

    def propose(self, rng, size, grid):
        """Candidate cells: a block with probability proportional to its bound, then a
        uniform cell in it. Returns flat indices (-1 beyond the grid edge) and bounds."""
        k = np.searchsorted(self._block_cdf, rng.random(size), side="right")
        k = np.minimum(k, self.blocks.size - 1)
        local = rng.integers(0, self.block * self.block, size=size, dtype=np.int64)
        br, bc = np.divmod(self.blocks[k], self.block_cols)
        rows = br * self.block + local // self.block
        cols = bc * self.block + local % self.block
        flat = np.where((rows < grid.height) & (cols < grid.width), rows * grid.width + cols, -1)
        return flat, self.block_bound[k]

    @classmethod
    def build(cls, survey, grid, mode, effort_field):
        gdf, source = _read_survey(survey)
        if gdf.crs is None:
            raise CRSError(f"{source}: the survey layer has no CRS; assign one to the file")
        if effort_field is not None and effort_field not in gdf.columns:
            cols = [str(c) for c in gdf.columns if c != gdf.geometry.name]
            raise InputError(f"{source}: no effort column {effort_field!r}; columns found: "
                             f"{', '.join(cols) or 'none'}")
        geoms = gdf.geometry.to_numpy()
        empty = shapely.is_missing(geoms) | shapely.is_empty(geoms)
        if empty.any():
            warnings.warn(f"{source}: ignored {int(empty.sum())} survey feature(s) with empty "
                          "geometry", DataQualityWarning, stacklevel=3)
        type_ids = shapely.get_type_id(geoms[~empty])
        if not np.isin(type_ids, [3, 6]).all():  # Polygon, MultiPolygon
            types = sorted({g.geom_type for g in geoms[~empty]})
            raise InputError(f"{source}: survey layer holds {', '.join(types)} geometries; "
                             "expected polygons of the surveyed areas (buffer lines first)")
        if effort_field is not None:
            raw = gdf[effort_field].to_numpy(dtype=object)
            effort = pd.to_numeric(gdf[effort_field], errors="coerce").to_numpy(dtype=float)
            bad = (~np.isfinite(effort) | (effort < 0)) & ~empty
            if bad.any():
                i = int(np.flatnonzero(bad)[0])
                raise InputError(f"{source}: effort field {effort_field!r} has {int(bad.sum())} "
                                 "missing, non-numeric or negative value(s) (first at feature "
                                 f"{i}: {raw[i]!r}); expected numbers >= 0")
            effort = effort[~empty]
        else:
            effort = np.ones(int((~empty).sum()))
        geoms = geoms[~empty]
        if not ProjCRS.from_user_input(gdf.crs).equals(ProjCRS.from_user_input(grid.crs)):
            geoms = gpd.GeoSeries(geoms, crs=gdf.crs).to_crs(grid.crs).to_numpy()
        polys = np.array(geoms, dtype=object)
        invalid = ~shapely.is_valid(polys)
        if invalid.any():
            polys[invalid] = shapely.make_valid(polys[invalid])
        box = shapely.box(*grid.bounds)
        clipped = shapely.intersection(polys, box)
        overlap = ~shapely.is_empty(clipped) & (shapely.area(clipped) > 0)
        if mode == "weighted":
            overlap &= effort > 0
        if not overlap.any():
            sb = shapely.total_bounds(polys)
            raise InputError(
                f"{source}: the survey polygons ({grid.extent_text(sb)}) do not overlap the study grid "
                f"({grid.extent_text()})"
                + ("" if mode == "inside" else " with an effort > 0")
                + "; check the survey layer and its CRS"
            )
        polys, effort = polys[overlap], effort[overlap]
        if mode == "inside":
            effort = np.ones(len(polys))  # effort only matters for "weighted"
        return cls(polys, effort, mode, grid)

    def effort_at(self, x, y):
        """Summed effort of the polygons strictly containing each point (0 outside).

        Points are sorted by x once; each polygon tests only the points inside its
        bounding box, with ``contains_xy`` (no point geometries are created, which
        would cost far more time and memory than the test itself).
        """
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        out = np.zeros(x.size)
        order = np.argsort(x, kind="stable")
        xs = x[order]
        lo = np.searchsorted(xs, self.bounds[:, 0], side="left")
        hi = np.searchsorted(xs, self.bounds[:, 2], side="right")
        for i in np.flatnonzero(hi > lo):
            idx = order[lo[i] : hi[i]]
            yi = y[idx]
            idx = idx[(yi >= self.bounds[i, 1]) & (yi <= self.bounds[i, 3])]
            inside = shapely.contains_xy(self.polygons[i], x[idx], y[idx])
            out[idx[inside]] += self.effort[i]
        return out

    def enumerate_cells(self, grid):
        """Flat indices of all surveyed cells and their summed effort."""
        flats, efforts = [], []
        for poly, eff in zip(self.polygons, self.effort):
            r0, c0, h, w = _bounds_window(poly.bounds, grid)
            for rs in range(r0, r0 + h, max(1, 1_000_000 // w)):
                rr = np.arange(rs, min(rs + max(1, 1_000_000 // w), r0 + h))
                rows = np.repeat(rr, w)
                cols = np.tile(np.arange(c0, c0 + w), rr.size)
                x, y = grid.xy(rows, cols)
                inside = shapely.contains_xy(poly, x, y)
                flats.append(rows[inside] * grid.width + cols[inside])
                efforts.append(np.full(int(inside.sum()), eff))
        flat = np.concatenate(flats)
        effort = np.concatenate(efforts)
        flat, inverse = np.unique(flat, return_inverse=True)
        total = np.bincount(inverse, weights=effort, minlength=flat.size)
        keep = total > 0 if self.mode == "weighted" else np.ones(flat.size, dtype=bool)
        return flat[keep], total[keep]


def _read_survey(survey):
    if isinstance(survey, gpd.GeoDataFrame):
        return survey, "survey layer"
    if isinstance(survey, (str, Path)):
        path = Path(survey)
        if not path.exists():
            raise VectorReadError(f"{path}: survey layer not found; check the path")
        try:
            return gpd.read_file(path), path.name
        except Exception as exc:
            from mlsites._validation import gdal_reason

            raise VectorReadError(f"{path}: not a vector layer GDAL can read ({gdal_reason(exc)})") from None
    raise InputError(f"survey: expected a GeoDataFrame or a path, got {type(survey).__name__}")


def _bounds_window(bounds, grid):
    """(row0, col0, height, width) of the cells whose extent meets ``bounds``, clipped."""
    minx, miny, maxx, maxy = bounds
    t = grid.transform
    c_lo = max(int(np.floor((minx - t.c) / t.a)), 0)
    c_hi = min(int(np.floor((maxx - t.c) / t.a)), grid.width - 1)
    r_lo = max(int(np.floor((maxy - t.f) / t.e)), 0)
    r_hi = min(int(np.floor((miny - t.f) / t.e)), grid.height - 1)
    return r_lo, c_lo, max(r_hi - r_lo + 1, 0), max(c_hi - c_lo + 1, 0)
