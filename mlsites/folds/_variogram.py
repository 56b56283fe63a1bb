"""Empirical semivariograms, model fits and a block-size suggestion.

Roberts et al. (2017) recommend spatial blocks at least as large as the range of
spatial autocorrelation of the residuals, or of the predictors when residuals are
not yet available. :func:`suggest_block_size` estimates that range for each
predictor layer from an empirical semivariogram and a fitted model.
"""

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.optimize import curve_fit
from scipy.spatial import cKDTree
from sklearn.utils import check_random_state

from mlsites.errors import DataQualityWarning, InputError, InsufficientDataError
from mlsites.folds._blocks import _check_xy

__all__ = [
    "EmpiricalVariogram",
    "VariogramFit",
    "BlockSizeSuggestion",
    "empirical_variogram",
    "fit_variogram",
    "variogram_model",
    "suggest_block_size",
    "VARIOGRAM_MODELS",
]

VARIOGRAM_MODELS = ("exponential", "spherical", "gaussian")
# practical range = factor * range parameter a (METHODS.md §6)
_PILOT = 2000  # points used to estimate the number of pairs within max_lag
_PRACTICAL = {"exponential": 3.0, "spherical": 1.0, "gaussian": np.sqrt(3.0)}


def _exponential(h, nugget, psill, a):
    return nugget + psill * (1.0 - np.exp(-h / a))


def _spherical(h, nugget, psill, a):
    t = np.minimum(h / a, 1.0)
    return nugget + psill * (1.5 * t - 0.5 * t**3)


def _gaussian(h, nugget, psill, a):
    return nugget + psill * (1.0 - np.exp(-((h / a) ** 2)))


_MODELS = {"exponential": _exponential, "spherical": _spherical, "gaussian": _gaussian}


def _check_model(model):
    if model not in _MODELS:
        raise InputError(
            f"model={model!r} is not a variogram model; expected one of "
            f"{', '.join(VARIOGRAM_MODELS)}."
        )


def variogram_model(h, *, model, nugget, partial_sill, range_param):
    """Semivariance of a variogram model.

    Parameters
    ----------
    h : array-like of float
        Lag distances, metres.
    model : {"exponential", "spherical", "gaussian"}
        ``c0 + c (1 - exp(-h/a))``; ``c0 + c (1.5 h/a - 0.5 (h/a)^3)`` for h < a and
        ``c0 + c`` beyond; ``c0 + c (1 - exp(-h^2/a^2))``.
    nugget, partial_sill : float
        ``c0`` and ``c``.
    range_param : float
        ``a``, metres. Practical range (95 % of the sill for the exponential and
        Gaussian models) is ``3a``, ``a`` and ``sqrt(3) a`` respectively.

    Returns
    -------
    ndarray
        gamma(h); gamma(0) = 0 (the nugget is a jump at the origin).

    Examples
    --------
    >>> float(variogram_model(100.0, model="exponential", nugget=0, partial_sill=1,
    ...                       range_param=100).round(6))
    0.632121
    """
    _check_model(model)
    h = np.asarray(h, dtype=np.float64)
    out = _MODELS[model](h, nugget, partial_sill, range_param)
    return np.where(h == 0, 0.0, out)


@dataclass(frozen=True)
class EmpiricalVariogram:
    """Binned semivariances from :func:`empirical_variogram`.

    Attributes
    ----------
    lag : ndarray, shape (n_lags,)
        Mean pair distance in each bin, metres (NaN for empty bins).
    gamma : ndarray, shape (n_lags,)
        Semivariance per bin (NaN for empty bins).
    count : ndarray of int64, shape (n_lags,)
        Number of point pairs per bin.
    bin_edges : ndarray, shape (n_lags + 1,)
        Bin edges, metres.
    n_points : int
        Points used (after dropping missing values and sub-sampling).
    subsampled : bool
        Whether points were sub-sampled to respect ``max_pairs``.
    """

    lag: np.ndarray
    gamma: np.ndarray
    count: np.ndarray
    bin_edges: np.ndarray
    n_points: int
    subsampled: bool


def empirical_variogram(
    x, y, z, *, n_lags=20, max_lag=None, max_pairs=1_000_000, random_state=None
):
    """Empirical semivariogram of values at points.

    Parameters
    ----------
    x, y : array-like of float, shape (n,)
        Projected coordinates, metres.
    z : array-like of float, shape (n,)
        Values; NaN values are dropped (counted in a DataQualityWarning).
    n_lags : int, default 20
        Number of equal-width distance bins between 0 and ``max_lag``.
    max_lag : float, optional
        Largest lag, metres. Default: half the diagonal of the points' bounding box
        (common practice).
    max_pairs : int, default 1 000 000
        Upper bound (in expectation) on the number of point pairs within
        ``max_lag`` that are used.
    random_state : int, RandomState or None
        Seeds the sub-sample.

    Returns
    -------
    EmpiricalVariogram

    Notes
    -----
    gamma(h) = 1 / (2 N(h)) sum (z_i - z_j)^2 over the N(h) unordered pairs whose
    distance falls in the bin of h (METHODS.md §6). Bins are ``[e_k, e_k+1)``; the
    last bin also holds pairs at exactly ``max_lag``; longer pairs are not used.
    Pairs within ``max_lag`` are found with a k-d tree. When there are more than
    ``max_pairs`` of them (counted first, without listing them), a random subset of
    ``m = n sqrt(max_pairs / n_pairs)`` points is drawn without replacement and all
    pairs among those are used; every bin then stays an unbiased estimate, at the
    cost of more variance.
    """
    x, y = _check_xy(x, y)
    z = np.asarray(z, dtype=np.float64).ravel()
    if z.size != x.size:
        raise InputError(f"z has {z.size} value(s) but there are {x.size} points.")
    ok = np.isfinite(z)
    if not ok.all():
        warnings.warn(
            f"{int((~ok).sum())} of {z.size} value(s) are missing and were left out of the "
            "variogram.",
            DataQualityWarning,
            stacklevel=2,
        )
        x, y, z = x[ok], y[ok], z[ok]
    if z.size < 3:
        raise InsufficientDataError(
            f"A variogram needs at least 3 points with values, got {z.size}."
        )
    if max_lag is None:
        max_lag = 0.5 * np.hypot(np.ptp(x), np.ptp(y))
    max_lag = float(max_lag)
    if not np.isfinite(max_lag) or max_lag <= 0:
        raise InputError(f"max_lag={max_lag!r} must be a positive distance in metres.")
    if int(n_lags) < 1:
        raise InputError(f"n_lags={n_lags!r} must be a positive integer.")
    n_lags = int(n_lags)

    pts = np.column_stack([x, y])
    tree = cKDTree(pts)
    n = z.size
    if n <= _PILOT:
        n_pairs = (int(tree.count_neighbors(tree, max_lag)) - n) // 2
    else:
        pilot = cKDTree(pts[check_random_state(random_state).choice(n, _PILOT, replace=False)])
        frac = (int(pilot.count_neighbors(pilot, max_lag)) - _PILOT) / (_PILOT * (_PILOT - 1))
        n_pairs = int(frac * n * (n - 1) / 2)
    subsampled = n_pairs > max_pairs
    if subsampled:
        rng = check_random_state(random_state)
        m = max(3, int(n * np.sqrt(max_pairs / n_pairs)))
        keep = np.sort(rng.choice(n, size=m, replace=False))
        pts, z = pts[keep], z[keep]
        tree = cKDTree(pts)
    pairs = tree.query_pairs(max_lag, output_type="ndarray")
    i, j = pairs[:, 0], pairs[:, 1]
    d = np.hypot(*(pts[i] - pts[j]).T)
    width = max_lag / n_lags
    k = np.minimum((d / width).astype(np.int64), n_lags - 1)
    count = np.bincount(k, minlength=n_lags)
    sq = np.bincount(k, weights=(z[i] - z[j]) ** 2, minlength=n_lags)
    dsum = np.bincount(k, weights=d, minlength=n_lags)
    with np.errstate(invalid="ignore", divide="ignore"):
        gamma = np.where(count > 0, sq / (2.0 * count), np.nan)
        lag = np.where(count > 0, dsum / count, np.nan)
    return EmpiricalVariogram(
        lag=lag,
        gamma=gamma,
        count=count.astype(np.int64),
        bin_edges=np.linspace(0.0, max_lag, n_lags + 1),
        n_points=int(z.size),
        subsampled=bool(subsampled),
    )


@dataclass(frozen=True)
class VariogramFit:
    """A fitted variogram model.

    Attributes
    ----------
    model : str
    nugget, partial_sill, sill : float
        ``c0``, ``c`` and the total sill ``c0 + c``.
    range_param : float
        ``a``, metres.
    practical_range : float
        Metres: ``3a`` (exponential), ``a`` (spherical), ``sqrt(3) a`` (Gaussian).
    resolved : bool
        True when the practical range lies within the largest lag used; False means
        the sill was not reached and the range is an extrapolation.
    weighted_sse : float
        Sum over bins of pair count times squared residual.
    """

    model: str
    nugget: float
    partial_sill: float
    sill: float
    range_param: float
    practical_range: float
    resolved: bool
    weighted_sse: float


def fit_variogram(lag, gamma, count, *, model="exponential"):
    """Fit a variogram model by least squares weighted by pair counts.

    Parameters
    ----------
    lag, gamma : array-like of float
        Bin lags (metres) and semivariances; bins with NaN or zero count are ignored.
    count : array-like of int
        Pairs per bin; the weight of each bin.
    model : {"exponential", "spherical", "gaussian"}, default "exponential"

    Returns
    -------
    VariogramFit

    Notes
    -----
    Minimises sum N_k (gamma_k - model(h_k))^2 with :func:`scipy.optimize.curve_fit`
    (``sigma = 1 / sqrt(N_k)``), bounds ``c0, c >= 0`` and
    ``0 < practical range <= 10 * max lag``. The start is ``c0`` = half the first
    bin, ``c`` = the largest semivariance minus ``c0`` and a practical range of half
    the largest lag.
    """
    _check_model(model)
    lag = np.asarray(lag, dtype=np.float64)
    gamma = np.asarray(gamma, dtype=np.float64)
    count = np.asarray(count, dtype=np.float64)
    ok = np.isfinite(lag) & np.isfinite(gamma) & (count > 0)
    if ok.sum() < 3:
        raise InsufficientDataError(
            f"Fitting a variogram needs at least 3 non-empty lag bins, got {int(ok.sum())}; "
            "use more points or a larger max_lag."
        )
    h, g, w = lag[ok], gamma[ok], count[ok]
    hmax = float(h.max())
    factor = _PRACTICAL[model]
    gmax = max(float(g.max()), 1e-12)
    nug0 = 0.5 * float(g[0])
    p0 = [nug0, max(gmax - nug0, 1e-3 * gmax), 0.5 * hmax / factor]
    upper_a = 10.0 * hmax / factor
    lower = [0.0, 0.0, 1e-6 * hmax]
    upper = [np.inf, np.inf, upper_a]
    p0 = np.clip(p0, np.add(lower, 1e-12), np.subtract(upper, 1e-12))
    params, _ = curve_fit(
        _MODELS[model], h, g, p0=p0, sigma=1.0 / np.sqrt(w), bounds=(lower, upper),
        method="trf", maxfev=10_000,
    )
    nugget, psill, a = (float(v) for v in params)
    resid = g - _MODELS[model](h, nugget, psill, a)
    practical = factor * a
    return VariogramFit(
        model=model,
        nugget=nugget,
        partial_sill=psill,
        sill=nugget + psill,
        range_param=a,
        practical_range=practical,
        resolved=bool(practical <= hmax and psill > 0),
        weighted_sse=float(np.sum(w * resid**2)),
    )


@dataclass(frozen=True)
class BlockSizeSuggestion:
    """Result of :func:`suggest_block_size`.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per layer: ``layer``, ``model``, ``nugget``, ``sill``,
        ``range_param_m``, ``practical_range_m``, ``resolved``, ``n_points``.
    block_size : float
        Suggested block size, metres.
    rule : str
        How ``block_size`` was derived from the resolved ranges.
    """

    table: pd.DataFrame
    block_size: float
    rule: str

    def __str__(self):
        t = self.table.copy()
        for c in ("nugget", "sill"):
            t[c] = t[c].map(lambda v: f"{v:.4g}")
        for c in ("range_param_m", "practical_range_m"):
            t[c] = t[c].map(lambda v: f"{v:.0f}")
        return (
            t.to_string(index=False)
            + f"\nsuggested block size: {self.block_size:.0f} m ({self.rule})"
        )


_RULES = ("median", "max")
_REFINE = 3.0  # refit on lags up to this multiple of the first practical range


def _best_fit(vg, model):
    models = ("exponential", "spherical") if model == "best" else (model,)
    fits = [fit_variogram(vg.lag, vg.gamma, vg.count, model=m) for m in models]
    return min(fits, key=lambda f: f.weighted_sse)


def suggest_block_size(
    x,
    y,
    layers,
    *,
    model="exponential",
    rule="median",
    n_lags=20,
    max_lag=None,
    max_pairs=1_000_000,
    refine=True,
    random_state=None,
):
    """Suggest a spatial block size from the autocorrelation range of predictors.

    Parameters
    ----------
    x, y : array-like of float, shape (n,)
        Projected coordinates of sample points (e.g. random cells), metres.
    layers : dict of str to array-like, each shape (n,)
        Predictor values at the points, by layer name.
    model : {"exponential", "spherical", "gaussian", "best"}, default "exponential"
        Variogram model; ``"best"`` fits exponential and spherical and keeps the one
        with the smaller weighted squared error, per layer.
    rule : {"median", "max"}, default "median"
        ``"median"``: median practical range of the resolved layers, so that blocks
        span the typical autocorrelation range of the predictors without being set
        by one trend-like layer; ``"max"``: the largest resolved range
        (conservative). Roberts et al. (2017) recommend blocks at least the range.
    n_lags, max_lag, max_pairs, random_state
        Passed to :func:`empirical_variogram`; the same sub-sample seed is used for
        every layer.
    refine : bool, default True
        If the first fit's practical range is resolved and less than a third of
        ``max_lag``, recompute the variogram up to 3 times that range and fit again.
        Long lags far beyond the range only add noise to a count-weighted fit (most
        pairs are long), and the narrower bins resolve the rise of the curve; this
        is a project choice.

    Returns
    -------
    BlockSizeSuggestion
        ``str()`` of it prints the per-layer table and the suggestion.

    Raises
    ------
    InsufficientDataError
        If no layer has a resolved range (the sill is not reached within
        ``max_lag``).

    Warns
    -----
    DataQualityWarning
        Naming the layers whose range was not resolved (left out of the rule).

    References
    ----------
    Roberts, D.R. et al. (2017). Ecography 40:913-929. doi:10.1111/ecog.02881
    """
    if model != "best":
        _check_model(model)
    if rule not in _RULES:
        raise InputError(f"rule={rule!r} is not a rule; expected one of {', '.join(_RULES)}.")
    if not layers:
        raise InputError("layers is empty; pass at least one predictor layer by name.")
    seed = check_random_state(random_state).randint(np.iinfo(np.int32).max)
    rows = []
    for name, values in layers.items():
        vg = empirical_variogram(
            x, y, values, n_lags=n_lags, max_lag=max_lag, max_pairs=max_pairs, random_state=seed
        )
        fit = _best_fit(vg, model)
        if refine and fit.resolved and _REFINE * fit.practical_range < vg.bin_edges[-1]:
            vg = empirical_variogram(
                x,
                y,
                values,
                n_lags=n_lags,
                max_lag=_REFINE * fit.practical_range,
                max_pairs=max_pairs,
                random_state=seed,
            )
            fit = _best_fit(vg, model)
        rows.append(
            {
                "layer": name,
                "model": fit.model,
                "nugget": fit.nugget,
                "sill": fit.sill,
                "range_param_m": fit.range_param,
                "practical_range_m": fit.practical_range,
                "resolved": fit.resolved,
                "n_points": vg.n_points,
            }
        )
    table = pd.DataFrame(rows)
    good = table["resolved"].to_numpy()
    if not good.all():
        names = ", ".join(table.loc[~good, "layer"].astype(str))
        warnings.warn(
            f"Autocorrelation range not resolved within max_lag for layer(s) {names}; "
            "they are left out of the block-size rule. Use a larger max_lag to include them.",
            DataQualityWarning,
            stacklevel=2,
        )
    if not good.any():
        raise InsufficientDataError(
            f"No layer of {len(table)} reached its sill within max_lag; use a larger "
            "max_lag or choose the block size by hand."
        )
    ranges = table.loc[good, "practical_range_m"].to_numpy()
    size = float(np.median(ranges) if rule == "median" else np.max(ranges))
    text = f"{rule} practical range of {int(good.sum())} resolved layer(s)"
    return BlockSizeSuggestion(table=table, block_size=size, rule=text)
