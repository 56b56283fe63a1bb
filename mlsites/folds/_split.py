"""Cross-validation splitters for presence-background samples.

Every splitter follows scikit-learn's protocol: ``split(X, y=None, groups=None)``
yields integer ``(train, test)`` index arrays and ``get_n_splits`` returns the number
of folds, so they work in ``cross_validate`` and ``GridSearchCV``. Splitters that
need coordinates take them in the constructor (coordinates are not predictors);
``X`` is then only used to check the number of samples.

A site (groups / ``site_id`` >= 0) never straddles a split: all its cells are on the
same side. Background is marked by a negative site id, NaN or None.
"""

import numpy as np
from scipy.spatial import cKDTree
from sklearn.utils import check_random_state

from mlsites.errors import InputError, InsufficientDataError
from mlsites.folds._blocks import (
    _check_xy,
    assign_blocks_to_folds,
    block_ids,
    block_polygons,
    site_codes,
)

__all__ = [
    "PrecomputedFolds",
    "SpatialBlockFolds",
    "BufferedLeaveOneSiteOut",
    "EnvironmentalFolds",
    "RandomFolds",
    "check_split_invariants",
]


def _n_samples_of(*arrays):
    for a in arrays:
        if a is not None:
            return len(a)
    return None


def _check_n_samples(expected, X, y, groups, name):
    for label, a in (("X", X), ("y", y), ("groups", groups)):
        if a is not None and len(a) != expected:
            raise InputError(
                f"{label} has {len(a)} sample(s) but {name} was built for {expected}; pass "
                "the same samples, in the same order, as the fold assignment."
            )


class _BaseFolds:
    """Shared ``split``/``get_n_splits`` plumbing; subclasses define ``_folds``."""

    def _folds(self, X, y, groups):  # pragma: no cover - abstract
        raise NotImplementedError

    def split(self, X=None, y=None, groups=None):
        """Yield ``(train, test)`` integer index arrays, one pair per fold.

        Parameters
        ----------
        X : array-like, shape (n_samples, n_features), optional
        y : array-like, shape (n_samples,), optional
            Labels, 1 = presence, 0 = background.
        groups : array-like, shape (n_samples,), optional
            Site id per sample (negative / NaN = background) where the splitter
            uses it.
        """
        fold = self._folds(X, y, groups)
        for k in range(self._n_folds(fold)):
            test = fold == k
            yield np.flatnonzero(~test), np.flatnonzero(test)

    @staticmethod
    def _n_folds(fold):
        return int(fold.max()) + 1 if fold.size else 0

    def fold_array(self, X=None, y=None, groups=None):
        """Fold of each sample (the test fold it belongs to), int64 0..n_splits-1."""
        return self._folds(X, y, groups)

    def __repr__(self):
        params = {k: v for k, v in vars(self).items() if np.ndim(v) == 0}
        inner = ", ".join(f"{k}={v!r}" for k, v in params.items())
        return f"{type(self).__name__}({inner})"


class PrecomputedFolds(_BaseFolds):
    """Folds from a saved assignment: the common path every learner uses.

    Parameters
    ----------
    fold : array-like of int, shape (n_samples,)
        Fold of every sample, 0 .. n_splits-1, every fold non-empty.

    See Also
    --------
    mlsites.folds.read_folds, mlsites.folds.write_folds
    """

    def __init__(self, fold):
        self.fold = fold

    @classmethod
    def from_dir(cls, path_dir, sample_id):
        """Load ``folds.csv`` from ``path_dir`` and order it like ``sample_id``.

        Every ``sample_id`` must be in the file (InputError naming the first missing
        id otherwise); ids in the file but not in ``sample_id`` are ignored with a
        DataQualityWarning that gives their count.
        """
        from mlsites.folds._io import fold_for_samples, read_folds

        return cls(fold_for_samples(read_folds(path_dir), sample_id))

    def _folds(self, X, y, groups):
        fold = np.asarray(self.fold)
        if fold.ndim != 1 or fold.size == 0:
            raise InputError(f"fold must be a non-empty 1-d array, got shape {fold.shape}.")
        if not np.issubdtype(fold.dtype, np.integer):
            if not (np.issubdtype(fold.dtype, np.floating) and np.all(fold == np.round(fold))):
                raise InputError(
                    f"fold has dtype {fold.dtype}; expected integer fold numbers 0..k-1."
                )
        fold = fold.astype(np.int64)
        present = np.unique(fold)
        if present[0] != 0 or present[-1] != present.size - 1:
            raise InputError(
                f"fold numbers are {present.tolist()[:10]}; expected every fold 0.."
                f"{present[-1]} to be used. Renumber the folds consecutively from 0."
            )
        _check_n_samples(fold.size, X, y, groups, "PrecomputedFolds")
        return fold

    def get_n_splits(self, X=None, y=None, groups=None):
        """Number of folds in the assignment."""
        return self._n_folds(self._folds(None, None, None))


class SpatialBlockFolds(_BaseFolds):
    """Square or hexagonal spatial blocks assigned to balanced folds.

    Parameters
    ----------
    x, y : array-like of float, shape (n_samples,)
        Projected coordinates of every sample, metres.
    site_id : array-like, shape (n_samples,)
        Site of each sample; negative, NaN or None for background.
    block_size : float
        Block width in metres (square edge, or hexagon edge-to-edge distance).
        Roberts et al. (2017) recommend at least the autocorrelation range; see
        :func:`suggest_block_size`.
    n_splits : int, default 5
    kind : {"square", "hexagon"}, default "square"
    origin : (float, float), default (0, 0)
        South-west corner of square block (0, 0) or centre of hexagon (0, 0).
    orientation : {"pointy", "flat"}, default "pointy"
        Hexagon orientation.
    random_state : int, RandomState or None

    Notes
    -----
    Sites come from ``site_id``; the ``groups`` argument of ``split`` is ignored.
    Blocks come from :func:`block_ids` and are balanced by
    :func:`assign_blocks_to_folds`, whose Notes give the home-block rule for sites
    and the greedy balancing rule.

    References
    ----------
    Roberts, D.R. et al. (2017). Ecography 40:913-929. doi:10.1111/ecog.02881
    """

    def __init__(
        self,
        x,
        y,
        *,
        site_id,
        block_size,
        n_splits=5,
        kind="square",
        origin=(0.0, 0.0),
        orientation="pointy",
        random_state=None,
    ):
        self.x = x
        self.y = y
        self.site_id = site_id
        self.block_size = block_size
        self.n_splits = n_splits
        self.kind = kind
        self.origin = origin
        self.orientation = orientation
        self.random_state = random_state

    def _block_ids(self):
        return block_ids(
            self.x,
            self.y,
            kind=self.kind,
            block_size=self.block_size,
            origin=self.origin,
            orientation=self.orientation,
        )

    def assign(self, *, crs=None):
        """Compute the assignment, with block polygons.

        Returns
        -------
        BlockFoldAssignment
            As from :func:`assign_blocks_to_folds`, except that ``blocks`` is a
            GeoDataFrame (columns ``block_id``, ``fold``, ``presence_weight``,
            ``n_background``, ``geometry``) in ``crs``, ready for
            :func:`write_folds`.
        """
        from dataclasses import replace

        result = assign_blocks_to_folds(
            self._block_ids(),
            site_id=self.site_id,
            n_splits=self.n_splits,
            random_state=self.random_state,
        )
        poly = block_polygons(
            result.blocks["block_id"].to_numpy(),
            kind=self.kind,
            block_size=self.block_size,
            origin=self.origin,
            orientation=self.orientation,
            crs=crs,
        )
        blocks = poly[["block_id", "geometry"]].merge(result.blocks, on="block_id")
        blocks = blocks[["block_id", "fold", "presence_weight", "n_background", "geometry"]]
        return replace(result, blocks=blocks)

    def describe(self):
        """JSON-ready description of the method and its parameters (for fold files)."""
        return {
            "method": f"{self.kind}_blocks",
            "kind": self.kind,
            "block_size_m": float(self.block_size),
            "origin": [float(v) for v in self.origin],
            "orientation": self.orientation if self.kind == "hexagon" else None,
            "n_splits": int(self.n_splits),
            "random_state": self.random_state if isinstance(self.random_state, int) else None,
        }

    def _folds(self, X, y, groups):
        result = assign_blocks_to_folds(
            self._block_ids(),
            site_id=self.site_id,
            n_splits=self.n_splits,
            random_state=self.random_state,
        )
        _check_n_samples(result.fold.size, X, y, None, "SpatialBlockFolds")
        return result.fold

    def get_n_splits(self, X=None, y=None, groups=None):
        """Number of folds, ``n_splits``."""
        return int(self.n_splits)


class BufferedLeaveOneSiteOut(_BaseFolds):
    """Leave one site out, training only on samples farther than a buffer.

    Parameters
    ----------
    x, y : array-like of float, shape (n_samples,)
        Projected coordinates, metres.
    site_id : array-like, shape (n_samples,)
        Site of each sample; negative, NaN or None for background.
    buffer : float
        Buffer distance r, metres (about the autocorrelation range).
    background_in_test : bool, default False
        Also put the background samples within the buffer into the test set (they
        are excluded from training anyway), so each split can be scored locally.

    Notes
    -----
    One split per site, in order of first appearance. Test: all cells of the
    held-out site (plus nearby background if ``background_in_test``). Train: every
    sample whose Euclidean distance to **every** cell of the held-out site is
    greater than ``buffer``; a distance exactly equal to ``buffer`` excludes the
    sample. Other samples are in neither set, and background samples are never
    tested by default, so the test folds do not cover all samples. Neighbours are
    found with :class:`scipy.spatial.cKDTree`.

    References
    ----------
    Le Rest, K. et al. (2014). Spatial leave-one-out cross-validation for variable
    selection in the presence of spatial autocorrelation. Global Ecology and
    Biogeography 23:811-820. doi:10.1111/geb.12161

    Roberts, D.R. et al. (2017). Ecography 40:913-929. doi:10.1111/ecog.02881
    """

    def __init__(self, x, y, site_id, *, buffer, background_in_test=False):
        self.x = x
        self.y = y
        self.site_id = site_id
        self.buffer = buffer
        self.background_in_test = background_in_test

    def _prepare(self):
        x, y = _check_xy(self.x, self.y)
        codes = site_codes(self.site_id)
        if codes.size != x.size:
            raise InputError(
                f"site_id has {codes.size} value(s) but there are {x.size} coordinates; "
                "expected one site id per sample."
            )
        buffer = float(self.buffer)
        if not np.isfinite(buffer) or buffer < 0:
            raise InputError(f"buffer={self.buffer!r} must be a non-negative distance in metres.")
        return x, y, codes, buffer

    def split(self, X=None, y=None, groups=None):
        """Yield ``(train, test)`` index arrays, one pair per site."""
        x, yc, codes, buffer = self._prepare()
        _check_n_samples(x.size, X, y, groups, "BufferedLeaveOneSiteOut")
        n_sites = int(codes.max()) + 1 if (codes >= 0).any() else 0
        if n_sites < 2:
            raise InsufficientDataError(
                f"Buffered leave-one-site-out needs at least 2 sites, got {n_sites}."
            )
        pts = np.column_stack([x, yc])
        tree = cKDTree(pts)
        order = np.argsort(codes, kind="stable")
        starts = np.searchsorted(codes[order], np.arange(n_sites + 1))
        background = codes < 0
        for s in range(n_sites):
            cells = order[starts[s] : starts[s + 1]]
            near = tree.query_ball_point(pts[cells], r=buffer)
            keep = np.ones(x.size, dtype=bool)
            for hits in near:
                keep[hits] = False
            keep[cells] = False
            train = np.flatnonzero(keep)
            if not (codes[train] >= 0).any():
                raise InsufficientDataError(
                    f"Holding out site {s} (first cell at row {int(cells[0])}) leaves no "
                    f"other site farther than buffer={buffer} m for training; use a smaller "
                    "buffer."
                )
            test = cells
            if self.background_in_test:
                test = np.union1d(cells, np.flatnonzero(~keep & background))
            yield train, np.sort(test)

    def _folds(self, X, y, groups):
        x, _, codes, _ = self._prepare()
        return codes

    def fold_array(self, X=None, y=None, groups=None):
        """Split index of each site cell, -1 for background (never a test sample)."""
        return self._folds(X, y, groups)

    def get_n_splits(self, X=None, y=None, groups=None):
        """Number of sites."""
        codes = site_codes(self.site_id)
        return int(codes.max()) + 1 if (codes >= 0).any() else 0

    def describe(self):
        """JSON-ready description of the method and its parameters."""
        return {
            "method": "buffered_leave_one_out",
            "buffer_m": float(self.buffer),
            "background_in_test": bool(self.background_in_test),
        }


def _group_majority(codes, label, n_labels):
    """For each site, the label held by most of its cells (ties: lowest label)."""
    pres = codes >= 0
    n_sites = int(codes.max()) + 1 if pres.any() else 0
    counts = np.zeros((n_sites, n_labels), dtype=np.int64)
    np.add.at(counts, (codes[pres], label[pres]), 1)
    return counts.argmax(axis=1)


def _presence_mask(codes, y, n):
    if (codes >= 0).any():
        return codes >= 0
    if y is not None:
        return np.asarray(y).ravel() > 0
    return None


def _check_presences(fold, presence, n_splits, advice):
    if presence is None:
        return
    per_fold = np.bincount(fold[presence], minlength=n_splits)
    empty = np.flatnonzero(per_fold == 0)
    if empty.size:
        raise InsufficientDataError(
            f"Fold {int(empty[0])} has no presences ({int(presence.sum())} presence "
            f"sample(s) over {n_splits} folds); {advice}"
        )


class EnvironmentalFolds(_BaseFolds):
    """Folds as k-means clusters in standardised predictor space.

    Parameters
    ----------
    n_splits : int, default 5
        Number of clusters = folds.
    n_init : int, default 10
        K-means restarts (fixed so results do not depend on library defaults).
    random_state : int, RandomState or None

    Notes
    -----
    ``split(X, y, groups)`` standardises each column of ``X`` to zero mean and unit
    variance (constant columns become 0), clusters with
    :class:`sklearn.cluster.KMeans`, and uses the cluster as fold. With ``groups``
    (site ids), every cell of a site takes the cluster of most of its cells (ties:
    lowest cluster). A fold without presences (``groups`` >= 0, else ``y`` > 0)
    raises InsufficientDataError. This tests extrapolation in predictor space
    rather than in geographic space.

    References
    ----------
    Roberts, D.R. et al. (2017). Ecography 40:913-929. doi:10.1111/ecog.02881
    """

    def __init__(self, n_splits=5, *, n_init=10, random_state=None):
        self.n_splits = n_splits
        self.n_init = n_init
        self.random_state = random_state

    def _folds(self, X, y, groups):
        from sklearn.cluster import KMeans
        from sklearn.preprocessing import StandardScaler

        if X is None:
            raise InputError("EnvironmentalFolds.split needs the predictor matrix X.")
        Xa = np.asarray(X, dtype=np.float64)
        if Xa.ndim == 1:
            Xa = Xa[:, None]
        bad = ~np.isfinite(Xa).all(axis=1)
        if bad.any():
            raise InputError(
                f"X has {int(bad.sum())} row(s) with missing or infinite predictors (first "
                f"row {int(np.flatnonzero(bad)[0])}); impute or drop them before clustering."
            )
        n = Xa.shape[0]
        _check_n_samples(n, None, y, groups, "EnvironmentalFolds")
        if n < self.n_splits:
            raise InsufficientDataError(
                f"n_splits={self.n_splits} clusters need at least as many samples, got {n}."
            )
        Z = StandardScaler().fit_transform(Xa)
        km = KMeans(
            n_clusters=self.n_splits,
            n_init=self.n_init,
            random_state=check_random_state(self.random_state),
        )
        fold = km.fit_predict(Z).astype(np.int64)
        codes = site_codes(groups) if groups is not None else np.full(n, -1, dtype=np.int64)
        if (codes >= 0).any():
            home = _group_majority(codes, fold, self.n_splits)
            fold[codes >= 0] = home[codes[codes >= 0]]
        _check_presences(
            fold, _presence_mask(codes, y, n), self.n_splits, "use fewer folds (n_splits)."
        )
        return fold

    def get_n_splits(self, X=None, y=None, groups=None):
        """Number of folds, ``n_splits``."""
        return int(self.n_splits)

    def describe(self):
        """JSON-ready description of the method and its parameters."""
        return {
            "method": "environmental",
            "n_splits": int(self.n_splits),
            "n_init": int(self.n_init),
            "random_state": self.random_state if isinstance(self.random_state, int) else None,
        }


class RandomFolds(_BaseFolds):
    """Plain random folds, stratified by label and grouped by site.

    Kept only as the comparison that shows how much random cross-validation
    flatters a model on spatially autocorrelated data (Roberts et al. 2017): test
    samples sit next to training samples, so the score measures interpolation, not
    prediction to new places.

    Parameters
    ----------
    n_splits : int, default 5
    random_state : int, RandomState or None

    Notes
    -----
    Units are sites (all cells of one site, ``groups`` >= 0) and single non-site
    samples. A site's label is 1; a non-site sample's label is ``y`` (0 if ``y`` is
    not given). Units are shuffled within each label, put one label after the other,
    and dealt round-robin to folds whose numbers are then shuffled. Each fold gets
    the same number of units of each label, +/- 1; sites of different size make
    cell counts differ more.

    References
    ----------
    Roberts, D.R. et al. (2017). Ecography 40:913-929. doi:10.1111/ecog.02881
    """

    def __init__(self, n_splits=5, *, random_state=None):
        self.n_splits = n_splits
        self.random_state = random_state

    def _folds(self, X, y, groups):
        n = _n_samples_of(X, y, groups)
        if n is None:
            raise InputError("RandomFolds.split needs X, y or groups to know the samples.")
        _check_n_samples(n, X, y, groups, "RandomFolds")
        codes = site_codes(groups) if groups is not None else np.full(n, -1, dtype=np.int64)
        if y is None:
            label = np.zeros(n, dtype=np.int64)
        else:
            label = (np.asarray(y).ravel() > 0).astype(np.int64)
        single = np.flatnonzero(codes < 0)
        n_sites = int(codes.max()) + 1 if (codes >= 0).any() else 0
        # unit u < n_sites is a site, later units are single samples
        unit_label = np.concatenate([np.ones(n_sites, dtype=np.int64), label[single]])
        rng = check_random_state(self.random_state)
        order = np.concatenate(
            [rng.permutation(np.flatnonzero(unit_label == c)) for c in np.unique(unit_label)]
        )
        unit_fold = np.empty(unit_label.size, dtype=np.int64)
        unit_fold[order] = rng.permutation(self.n_splits)[np.arange(order.size) % self.n_splits]
        fold = np.empty(n, dtype=np.int64)
        fold[single] = unit_fold[n_sites:]
        fold[codes >= 0] = unit_fold[codes[codes >= 0]]
        _check_presences(
            fold, _presence_mask(codes, y, n), self.n_splits, "use fewer folds (n_splits)."
        )
        return fold

    def get_n_splits(self, X=None, y=None, groups=None):
        """Number of folds, ``n_splits``."""
        return int(self.n_splits)

    def describe(self):
        """JSON-ready description of the method and its parameters."""
        return {
            "method": "random",
            "n_splits": int(self.n_splits),
            "random_state": self.random_state if isinstance(self.random_state, int) else None,
        }


def check_split_invariants(splits, n_samples, *, site_id=None, require_coverage=True):
    """Check the fold invariants of a sequence of ``(train, test)`` index pairs.

    Parameters
    ----------
    splits : iterable of (array-like of int, array-like of int)
        As yielded by a splitter's ``split``.
    n_samples : int
    site_id : array-like, shape (n_samples,), optional
        Site per sample (negative / NaN for background).
    require_coverage : bool, default True
        Require every sample to be in exactly one test set (False for
        :class:`BufferedLeaveOneSiteOut`, whose test sets hold only site cells).

    Returns
    -------
    list of (ndarray, ndarray)
        The splits, materialised.

    Raises
    ------
    InputError
        Naming the split and the first offending sample: an index outside
        0..n_samples-1 or repeated; train and test overlapping; a site with cells on
        both sides of one split; a sample tested zero or several times.
    """
    splits = [(np.asarray(tr, dtype=np.int64), np.asarray(te, dtype=np.int64)) for tr, te in splits]
    codes = site_codes(site_id) if site_id is not None else None
    times_tested = np.zeros(n_samples, dtype=np.int64)
    for k, (train, test) in enumerate(splits):
        for name, idx in (("train", train), ("test", test)):
            if idx.size and (idx.min() < 0 or idx.max() >= n_samples):
                raise InputError(f"Split {k}: {name} index outside 0..{n_samples - 1}.")
            if np.unique(idx).size != idx.size:
                raise InputError(f"Split {k}: {name} repeats a sample index.")
        both = np.intersect1d(train, test)
        if both.size:
            raise InputError(f"Split {k}: sample {int(both[0])} is in both train and test.")
        if codes is not None:
            shared = np.intersect1d(codes[train], codes[test])
            shared = shared[shared >= 0]
            if shared.size:
                raise InputError(
                    f"Split {k}: site code {int(shared[0])} has cells in train and in test."
                )
        times_tested[test] += 1
    if require_coverage:
        off = np.flatnonzero(times_tested != 1)
        if off.size:
            i = int(off[0])
            raise InputError(
                f"Sample {i} is in {int(times_tested[i])} test set(s); expected exactly one."
            )
    return splits
