"""Square and hexagonal spatial blocks and their balanced assignment to folds.

All coordinates are metres (or other linear units) of a projected CRS: x east,
y north. A block is identified by two integers (``col``, ``row``) packed into one
int64 ``block_id`` so that ids are stable across runs and can be written to files.
"""

import heapq
from dataclasses import dataclass

import numpy as np
import pandas as pd
import shapely
from sklearn.utils import check_random_state

from mlsites.errors import InputError, InsufficientDataError

__all__ = [
    "square_block_ids",
    "hexagon_block_ids",
    "block_ids",
    "block_polygons",
    "decode_block_ids",
    "assign_blocks_to_folds",
    "BlockFoldAssignment",
    "site_codes",
]

# block_id = (row + _OFFSET) * _STRIDE + (col + _OFFSET); |col|, |row| < _OFFSET.
_STRIDE = np.int64(2**31)
_OFFSET = np.int64(2**30)
_SQRT3 = np.sqrt(3.0)
BLOCK_KINDS = ("square", "hexagon")
HEX_ORIENTATIONS = ("pointy", "flat")


def _check_xy(x, y):
    x = np.asarray(x, dtype=np.float64).ravel()
    y = np.asarray(y, dtype=np.float64).ravel()
    if x.shape != y.shape:
        raise InputError(
            f"x has {x.size} value(s) but y has {y.size}; expected one x and one y per "
            "sample. Pass coordinate arrays of equal length."
        )
    bad = ~(np.isfinite(x) & np.isfinite(y))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"{int(bad.sum())} sample(s) have a missing or infinite coordinate (first at "
            f"row {i}: x={x[i]}, y={y[i]}); expected finite projected coordinates. Drop "
            "or fix those samples first."
        )
    return x, y


def _check_block_size(block_size):
    try:
        block_size = float(block_size)
    except (TypeError, ValueError):
        block_size = np.nan
    if not np.isfinite(block_size) or block_size <= 0:
        raise InputError(
            f"block_size={block_size!r} is not a positive number of metres; pass the block "
            "width in CRS units, e.g. block_size=2000."
        )
    return block_size


def _encode(col, row):
    if col.size and max(np.abs(col).max(), np.abs(row).max()) >= _OFFSET:
        raise InputError(
            "Block indices exceed +/-2**30: the points lie too far from the origin for "
            "this block_size; use an origin inside the study area or larger blocks."
        )
    return (row + _OFFSET) * _STRIDE + (col + _OFFSET)


def decode_block_ids(block_id):
    """Unpack int64 block ids into integer block column and row.

    Parameters
    ----------
    block_id : array-like of int64
        Ids from :func:`square_block_ids` or :func:`hexagon_block_ids`.

    Returns
    -------
    col, row : ndarray of int64
        For squares the column counts east and the row counts **north** from the
        origin (unlike raster rows); for hexagons they are the axial coordinates
        (q, r).
    """
    block_id = np.asarray(block_id, dtype=np.int64)
    return block_id % _STRIDE - _OFFSET, block_id // _STRIDE - _OFFSET


def square_block_ids(x, y, *, block_size, origin=(0.0, 0.0)):
    """Square block of each point.

    Parameters
    ----------
    x, y : array-like of float, shape (n_samples,)
        Projected coordinates, metres.
    block_size : float
        Block edge length, metres.
    origin : (float, float), default (0, 0)
        Lower-left (south-west) corner of block (0, 0), metres; use the raster origin
        so blocks follow the grid.

    Returns
    -------
    block_id : ndarray of int64, shape (n_samples,)
        Packed id, see :func:`decode_block_ids`.
    col, row : ndarray of int64, shape (n_samples,)
        ``col = floor((x - x0) / B)``, ``row = floor((y - y0) / B)``; the row counts
        northwards.

    Notes
    -----
    Blocks are half-open, ``[x0 + col B, x0 + (col + 1) B)`` and the same in y, so a
    point on a block edge belongs to the block east / north of it (METHODS.md §6).

    Examples
    --------
    >>> ids, col, row = square_block_ids([120, 260], [80, 40], block_size=200)
    >>> col.tolist(), row.tolist()
    ([0, 1], [0, 0])
    """
    x, y = _check_xy(x, y)
    block_size = _check_block_size(block_size)
    x0, y0 = (float(v) for v in origin)
    col = np.floor((x - x0) / block_size).astype(np.int64)
    row = np.floor((y - y0) / block_size).astype(np.int64)
    return _encode(col, row), col, row


def _check_orientation(orientation):
    if orientation not in HEX_ORIENTATIONS:
        raise InputError(
            f"orientation={orientation!r} is not a hexagon orientation; expected one of "
            f"{', '.join(HEX_ORIENTATIONS)}."
        )


def hexagon_block_ids(x, y, *, block_size, origin=(0.0, 0.0), orientation="pointy"):
    """Hexagonal block of each point, by cube-coordinate rounding.

    Parameters
    ----------
    x, y : array-like of float, shape (n_samples,)
        Projected coordinates, metres.
    block_size : float
        Distance between opposite **edges** of a hexagon (twice the apothem), metres.
        The circumradius is ``block_size / sqrt(3)`` and a hexagon covers
        ``sqrt(3) / 2 * block_size**2`` square metres.
    origin : (float, float), default (0, 0)
        Centre of hexagon (0, 0), metres.
    orientation : {"pointy", "flat"}, default "pointy"
        ``"pointy"``: a vertex points north and two edges are vertical, so
        ``block_size`` is the east-west width. ``"flat"``: two edges are horizontal,
        so ``block_size`` is the north-south height.

    Returns
    -------
    block_id : ndarray of int64, shape (n_samples,)
        Packed id, see :func:`decode_block_ids`.
    q, r : ndarray of int64, shape (n_samples,)
        Axial hexagon coordinates. Pointy: centre = origin + R (sqrt(3) (q + r/2),
        3/2 r); flat: centre = origin + R (3/2 q, sqrt(3) (r + q/2)), R the
        circumradius.

    Notes
    -----
    The fractional axial coordinates are rounded in cube coordinates (q, r, s) with
    q + r + s = 0: each is rounded and the one with the largest rounding change is
    recomputed from the other two. This gives the hexagon with the nearest centre,
    i.e. exact point-in-hexagon assignment. A point exactly on a shared edge goes to
    one of the two hexagons, decided by floating-point rounding.
    """
    x, y = _check_xy(x, y)
    block_size = _check_block_size(block_size)
    _check_orientation(orientation)
    radius = block_size / _SQRT3
    u = (x - float(origin[0])) / radius
    v = (y - float(origin[1])) / radius
    if orientation == "pointy":
        qf = _SQRT3 / 3.0 * u - v / 3.0
        rf = 2.0 / 3.0 * v
    else:
        qf = 2.0 / 3.0 * u
        rf = -u / 3.0 + _SQRT3 / 3.0 * v
    sf = -qf - rf
    q, r, s = np.rint(qf), np.rint(rf), np.rint(sf)
    dq, dr, ds = np.abs(q - qf), np.abs(r - rf), np.abs(s - sf)
    fix_q = (dq > dr) & (dq > ds)
    fix_r = ~fix_q & (dr > ds)
    q[fix_q] = -r[fix_q] - s[fix_q]
    r[fix_r] = -q[fix_r] - s[fix_r]
    q = q.astype(np.int64)
    r = r.astype(np.int64)
    return _encode(q, r), q, r


def block_ids(x, y, *, kind="square", block_size, origin=(0.0, 0.0), orientation="pointy"):
    """Block id of each point for either block kind.

    Dispatches to :func:`square_block_ids` or :func:`hexagon_block_ids` (whose
    docstrings define ``origin`` and ``block_size`` for each kind) and returns only
    the packed ids.
    """
    if kind == "square":
        return square_block_ids(x, y, block_size=block_size, origin=origin)[0]
    if kind == "hexagon":
        return hexagon_block_ids(
            x, y, block_size=block_size, origin=origin, orientation=orientation
        )[0]
    raise InputError(
        f"kind={kind!r} is not a block kind; expected one of {', '.join(BLOCK_KINDS)}."
    )


def block_polygons(
    block_id, *, kind="square", block_size, origin=(0.0, 0.0), orientation="pointy", crs=None
):
    """Polygons of the given blocks.

    Parameters
    ----------
    block_id : array-like of int64
        Block ids (duplicates allowed; each block is returned once).
    kind : {"square", "hexagon"}, default "square"
    block_size, origin, orientation
        As used to compute the ids.
    crs : pyproj.CRS, str or None
        CRS attached to the result.

    Returns
    -------
    geopandas.GeoDataFrame
        One row per distinct block, sorted by ``block_id``; columns ``block_id``,
        ``col``, ``row`` and ``geometry`` (squares closed counter-clockwise from
        the south-west corner; hexagons counter-clockwise).
    """
    import geopandas as gpd

    block_size = _check_block_size(block_size)
    ids = np.unique(np.asarray(block_id, dtype=np.int64))
    col, row = decode_block_ids(ids)
    x0, y0 = (float(v) for v in origin)
    if kind == "square":
        xmin = x0 + col * block_size
        ymin = y0 + row * block_size
        geom = shapely.box(xmin, ymin, xmin + block_size, ymin + block_size, ccw=True)
    elif kind == "hexagon":
        _check_orientation(orientation)
        radius = block_size / _SQRT3
        if orientation == "pointy":
            cx = x0 + radius * _SQRT3 * (col + row / 2.0)
            cy = y0 + radius * 1.5 * row
            angles = np.radians(30.0 + 60.0 * np.arange(7))
        else:
            cx = x0 + radius * 1.5 * col
            cy = y0 + radius * _SQRT3 * (row + col / 2.0)
            angles = np.radians(60.0 * np.arange(7))
        ring = np.stack(
            [cx[:, None] + radius * np.cos(angles), cy[:, None] + radius * np.sin(angles)],
            axis=-1,
        )
        geom = shapely.polygons(ring)
    else:
        raise InputError(
            f"kind={kind!r} is not a block kind; expected one of {', '.join(BLOCK_KINDS)}."
        )
    return gpd.GeoDataFrame({"block_id": ids, "col": col, "row": row}, geometry=geom, crs=crs)


def site_codes(site_id):
    """Integer site codes with -1 for background.

    Parameters
    ----------
    site_id : array-like, shape (n_samples,)
        Site identifier per sample (int or str). Background is marked by a negative
        number, NaN or None.

    Returns
    -------
    ndarray of int64
        0 .. n_sites-1 in order of first appearance; -1 for background.
    """
    values = site_id.to_numpy() if isinstance(site_id, pd.Series) else np.asarray(site_id)
    s = pd.Series(values.ravel())
    num = pd.to_numeric(s, errors="coerce")
    background = s.isna().to_numpy() | (num < 0).to_numpy()
    codes = np.full(len(s), -1, dtype=np.int64)
    if (~background).any():
        codes[~background] = pd.factorize(s[~background])[0]
    return codes


@dataclass(frozen=True)
class BlockFoldAssignment:
    """Result of :func:`assign_blocks_to_folds`.

    Attributes
    ----------
    fold : ndarray of int64, shape (n_samples,)
        Fold of every sample, 0 .. n_splits-1.
    block_id : ndarray of int64, shape (n_samples,)
        The input block ids.
    blocks : pandas.DataFrame
        One row per used block, sorted by id: ``block_id``, ``fold``,
        ``presence_weight`` (total weight of sites whose home block it is),
        ``n_background``.
    folds : pandas.DataFrame
        One row per fold: ``fold``, ``n_blocks``, ``n_sites``, ``presence_weight``,
        ``n_background``, ``n_samples``.
    """

    fold: np.ndarray
    block_id: np.ndarray
    blocks: pd.DataFrame
    folds: pd.DataFrame


def _home_blocks(codes, block_index, weight, n_sites):
    """Per site, the index of the block holding most of its weight (ties: lowest)."""
    pres = codes >= 0
    key = pd.DataFrame({"site": codes[pres], "block": block_index[pres], "w": weight[pres]})
    per = key.groupby(["site", "block"], sort=True)["w"].sum().reset_index()
    order = np.lexsort((per["block"].to_numpy(), -per["w"].to_numpy(), per["site"].to_numpy()))
    per = per.iloc[order]
    first = per.drop_duplicates("site", keep="first")
    home = np.empty(n_sites, dtype=np.int64)
    home[first["site"].to_numpy()] = first["block"].to_numpy()
    site_weight = key.groupby("site", sort=True)["w"].sum().to_numpy()
    return home, site_weight


def _greedy_folds(presence, background, order, n_splits):
    """Greedy largest-first assignment of blocks to folds (see assign_blocks_to_folds).

    ``order`` lists all blocks holding presence weight before the others.
    """
    load_p = [0.0] * n_splits
    load_b = [0.0] * n_splits
    out = np.empty(len(presence), dtype=np.int64)
    n_pres = int((presence > 0).sum())
    presence, background = presence.tolist(), background.tolist()
    order = order.tolist()
    for b in order[:n_pres]:
        k = min(range(n_splits), key=lambda f: (load_p[f], load_b[f], f))
        load_p[k] += presence[b]
        load_b[k] += background[b]
        out[b] = k
    # background-only blocks leave presence loads fixed, so a heap keyed on
    # (background, presence, fold) always yields the fold the rule asks for
    heap = [(load_b[f], load_p[f], f) for f in range(n_splits)]
    heapq.heapify(heap)
    for b in order[n_pres:]:
        lb, lp, k = heap[0]
        heapq.heapreplace(heap, (lb + background[b], lp, k))
        out[b] = k
    return out


def assign_blocks_to_folds(
    block_id,
    *,
    site_id,
    n_splits=5,
    presence_weight=None,
    background_weight=None,
    random_state=None,
):
    """Assign spatial blocks to folds, balancing presences and background.

    Parameters
    ----------
    block_id : array-like of int64, shape (n_samples,)
        Block of every sample (from :func:`block_ids`).
    site_id : array-like, shape (n_samples,)
        Site of every sample; background is marked by a negative number, NaN or None.
    n_splits : int, default 5
        Number of folds, at least 2.
    presence_weight : array-like of float, shape (n_samples,), optional
        Weight of each site cell; default ``1 / n_cells(site)`` so each site sums to
        one (METHODS.md §7). Ignored for background samples.
    background_weight : array-like of float, shape (n_samples,), optional
        Weight of each background sample; default 1 (balances counts). Ignored for
        site cells.
    random_state : int, RandomState or None
        Seeds the shuffle that breaks ties between equally loaded blocks.

    Returns
    -------
    BlockFoldAssignment

    Raises
    ------
    InsufficientDataError
        If there are fewer sites or used blocks than folds, or a fold ends without
        presences.

    Notes
    -----
    *Sites.* A site's cells may span several blocks. Each site has a **home block**,
    the block holding most of its presence weight (ties: the lowest block id), and
    all its cells take the fold of that block, so one site never straddles folds.
    The site's whole weight counts towards its home block; cells outside it keep the
    home block's fold even though their block may be in another fold.

    *Greedy balancing.* Blocks are shuffled with ``random_state``, then stably
    sorted by presence weight and then background weight, both descending (largest
    first). In that order a block that holds presence weight goes to the fold with
    the smallest presence load (ties: smallest background load, then lowest fold
    index); a block with only background goes to the fold with the smallest
    background load (ties: smallest presence load, lowest index). This is the
    longest-processing-time rule for multiprocessor scheduling applied to the two
    loads in turn.

    References
    ----------
    Roberts, D.R. et al. (2017). Cross-validation strategies for data with temporal,
    spatial, hierarchical, or phylogenetic structure. Ecography 40:913-929.
    doi:10.1111/ecog.02881
    """
    bid = np.asarray(block_id, dtype=np.int64).ravel()
    codes = site_codes(site_id)
    n = bid.size
    if codes.size != n:
        raise InputError(
            f"site_id has {codes.size} value(s) but block_id has {n}; expected one site id "
            "per sample (negative or NaN for background)."
        )
    if not isinstance(n_splits, (int, np.integer)) or n_splits < 2:
        raise InputError(f"n_splits={n_splits!r} must be an integer of at least 2.")
    pres = codes >= 0
    n_sites = int(codes.max()) + 1 if pres.any() else 0
    if presence_weight is None:
        counts = np.bincount(codes[pres], minlength=n_sites)
        presence_weight = np.zeros(n)
        presence_weight[pres] = 1.0 / counts[codes[pres]]
    if background_weight is None:
        background_weight = np.ones(n)
    pw = np.where(pres, np.asarray(presence_weight, dtype=np.float64).ravel(), 0.0)
    bw = np.where(pres, 0.0, np.asarray(background_weight, dtype=np.float64).ravel())
    if pw.size != n or bw.size != n or (pw < 0).any() or (bw < 0).any():
        raise InputError(
            "presence_weight and background_weight must be non-negative arrays with one "
            f"value per sample ({n})."
        )

    uniq, block_index = np.unique(bid, return_inverse=True)
    n_blocks = uniq.size
    if n_sites < n_splits or n_blocks < n_splits:
        raise InsufficientDataError(
            f"n_splits={n_splits} folds need at least as many sites and blocks, but there "
            f"are {n_sites} site(s) in {n_blocks} used block(s). Use fewer folds or a smaller "
            "block size."
        )
    home, site_weight = _home_blocks(codes, block_index, pw, n_sites)
    block_p = np.bincount(home, weights=site_weight, minlength=n_blocks)
    block_b = np.bincount(block_index, weights=bw, minlength=n_blocks)

    rng = check_random_state(random_state)
    perm = rng.permutation(n_blocks)
    order = perm[np.lexsort((-block_b[perm], -block_p[perm]))]
    block_fold = _greedy_folds(block_p, block_b, order, n_splits)

    fold = block_fold[block_index]
    fold[pres] = block_fold[home[codes[pres]]]

    site_fold = block_fold[home]
    fold_p = np.bincount(block_fold, weights=block_p, minlength=n_splits)
    empty = np.flatnonzero(fold_p <= 0)
    if empty.size:
        n_home = np.unique(home).size
        raise InsufficientDataError(
            f"Fold {int(empty[0])} has no presences: the {n_sites} site(s) have their home "
            f"in only {n_home} block(s) for {n_splits} folds. Use a smaller block size or "
            "fewer folds."
        )
    n_bg_block = np.bincount(block_index[~pres], minlength=n_blocks)
    blocks = pd.DataFrame(
        {
            "block_id": uniq,
            "fold": block_fold,
            "presence_weight": block_p,
            "n_background": n_bg_block,
        }
    )
    folds = pd.DataFrame(
        {
            "fold": np.arange(n_splits),
            "n_blocks": np.bincount(block_fold, minlength=n_splits),
            "n_sites": np.bincount(site_fold, minlength=n_splits),
            "presence_weight": fold_p,
            "n_background": np.bincount(fold[~pres], minlength=n_splits),
            "n_samples": np.bincount(fold, minlength=n_splits),
        }
    )
    return BlockFoldAssignment(fold=fold, block_id=bid, blocks=blocks, folds=folds)
