"""Percentile-fuzzy suitability: the traditional, training-free baseline learner.

Each layer gets a membership function whose control points are percentiles of the
layer's values at known sites; the memberships are combined by a fuzzy operator
(minimum, maximum, algebraic product or sum, or the gamma operator of Zimmermann &
Zysno 1980). Nothing is learned beyond those percentiles, the relative site density
of each class of a categorical layer, which layers to combine (a stated rule on
training AUC) and, for the gamma operator, one exponent, so
the model is a transparent reference for the machine-learning presets in
:mod:`mlsites.learners`.
"""

from numbers import Integral, Real

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import check_is_fitted, validate_data

from mlsites.errors import InputError, InsufficientDataError

_SHAPES = ("linear", "cosine")
_OPERATORS = ("minimum", "maximum", "algebraic_product", "algebraic_sum", "gamma_operator")
#: Defaults of FuzzySuitability, chosen by spatially cross-validated AUC on virtual
#: sites (tests/benchmarks/fuzzy_defaults.py).
DEFAULT_PERCENTILES = (20, 40, 60, 80)
DEFAULT_MEMBERSHIP_FLOOR = 0.2
#: Exponents tried when the gamma operator's gamma is chosen in ``fit``.
GAMMA_GRID = np.round(np.linspace(0.0, 1.0, 21), 2)
#: Training AUCs closer than this to the best count as ties; the smallest gamma
#: among them is kept (with a dozen layers FAS is near 1 almost everywhere, so the
#: AUC barely moves with gamma and the exact maximum would be chance).
GAMMA_AUC_TOLERANCE = 1e-3
_DIRECTIONS = ("increasing", "decreasing")
_SELECTIONS = ("all", "top_k", "forward")
#: Layer selection of FuzzySuitability, chosen by tests/benchmarks/fuzzy_defaults.py
#: --part layers; mean square-block fold AUC on three virtual studies / the demo: all
#: layers 0.773 / 0.597; forward at tolerance 0.005 0.777 / 0.742 (0.002: 0.776 /
#: 0.742; 0.01: 0.760 / 0.742); top 3 0.759 / 0.706; top 5 0.767 / 0.680. Forward
#: at 0.005 loses nothing on the virtual studies and gains on the demo.
DEFAULT_LAYER_SELECTION = "forward"
#: Least gain of weighted training AUC for which forward selection adds another layer.
DEFAULT_SELECTION_TOLERANCE = 0.005


def weighted_percentile(x, q, sample_weight=None):
    """Percentiles of ``x``, optionally weighted, matching numpy's "linear" method.

    Parameters
    ----------
    x : array_like of shape (n,)
        Finite values.
    q : float or array_like of float
        Percentiles in [0, 100].
    sample_weight : array_like of shape (n,), optional
        Non-negative finite weights; at least one must be positive. ``None`` means
        equal weights.

    Returns
    -------
    float or ndarray
        The percentiles, shaped like ``q``.

    Raises
    ------
    InputError
        If shapes differ, values or weights are not finite, weights are negative,
        ``q`` is outside [0, 100], or no weight is positive.

    Notes
    -----
    Without weights this is ``np.percentile(x, q, method="linear")``, Hyndman & Fan
    (1996) type 7: the k-th smallest of n values (k = 1..n) sits at cumulative
    probability p_k = (k - 1)/(n - 1), the share of the *other* n - 1 values lying
    below it, and the quantile function interpolates linearly between these points.

    With weights (our choice) rows of zero weight are removed first; the remaining
    values are sorted (ties ordered by increasing weight, so the result does not
    depend on row order) and the k-th sorted value is placed at the share of the
    other rows' weight lying below it::

        p_k = S_(k-1) / (W - w_k),   S_(k-1) = w_1 + ... + w_(k-1),   W = sum of w

    followed by the same linear interpolation. Properties: equal weights give type 7
    exactly; multiplying all weights by a constant changes nothing; a zero weight
    equals dropping the row; p_1 = 0 and p_n = 1, so P0 and P100 are the minimum and
    maximum; reversing the sign of ``x`` maps P_q to -P_(100-q) when values are
    untied; p_k is strictly increasing. Integer weights are *not* the same as
    repeating rows (type 7 itself changes when every row is repeated), so weights act
    as relative importances, not counts. A single row returns its value for every q.

    References
    ----------
    Hyndman, R. J. & Fan, Y. (1996). Sample quantiles in statistical packages.
    The American Statistician 50(4), 361-365. https://doi.org/10.2307/2684934

    Examples
    --------
    >>> float(weighted_percentile([12, 15, 18, 20, 22, 25, 27, 30, 35, 48], 25))
    18.5
    """
    x = np.asarray(x, dtype=float).ravel()
    q_arr = np.asarray(q, dtype=float)
    if x.size == 0:
        raise InputError("weighted_percentile got no values; pass at least one value.")
    if not np.all(np.isfinite(x)):
        raise InputError(
            f"weighted_percentile got {np.count_nonzero(~np.isfinite(x))} non-finite "
            "value(s); remove NaN or infinite values first."
        )
    if np.any(~np.isfinite(q_arr)) or np.any((q_arr < 0) | (q_arr > 100)):
        raise InputError(f"Percentiles must lie in [0, 100]; got {q!r}.")
    if sample_weight is None:
        return np.percentile(x, q_arr, method="linear")[()]
    w = _check_weights(sample_weight, x.size)
    keep = w > 0
    x, w = x[keep], w[keep]
    order = np.lexsort((w, x))
    x, w = x[order], w[order]
    if x.size == 1:
        return np.full(q_arr.shape, x[0])[()]
    below = np.concatenate(([0.0], np.cumsum(w)[:-1]))
    positions = below / (w.sum() - w)
    # rounding can leave the last position a hair off 1; it is 1 by construction
    positions[-1] = 1.0
    return np.interp(q_arr / 100.0, positions, x)[()]


def fuzzy_membership(x, control_points, *, shape="linear"):
    """Trapezoidal fuzzy membership with four control points.

    Parameters
    ----------
    x : array_like
        Layer values (any shape; units of the layer).
    control_points : sequence of 4 float
        a <= b <= c <= d, in the units of ``x``. ``a = b = -inf`` gives a falling-only
        (decreasing) function and ``c = d = +inf`` a rising-only (increasing) one.
    shape : {"linear", "cosine"}, default "linear"
        Form of the rising and falling limbs.

    Returns
    -------
    ndarray of float
        Membership in [0, 1], shaped like ``x``. NaN stays NaN.

    Raises
    ------
    InputError
        If ``shape`` is unknown, the control points are not four ordered numbers, or
        an infinite control point is not paired as described above.

    Notes
    -----
    Membership is 0 for x <= a, rises on (a, b), is 1 on [b, c], falls on (c, d) and
    is 0 for x >= d. With t = (x - a)/(b - a) on the rising limb and
    t = (x - c)/(d - c) on the falling limb, "linear" gives t and 1 - t, and
    "cosine" gives cos^2((1 - t) pi/2) and cos^2(t pi/2). Degenerate limbs (a = b or
    c = d) are steps; the plateau [b, c] is closed, so x = a = b gives 1. No division
    by zero can occur because a limb of zero width contains no x.

    References
    ----------
    METHODS.md §10 of this project (membership with four control points).
    Zadeh, L. A. (1965). Fuzzy sets. Information and Control 8(3), 338-353.
    https://doi.org/10.1016/S0019-9958(65)90241-X
    """
    if shape not in _SHAPES:
        raise InputError(f"Unknown membership shape {shape!r}; use one of {_SHAPES}.")
    a, b, c, d = _check_control_points(control_points)
    x = np.asarray(x, dtype=float)
    mu = np.where(np.isnan(x), np.nan, 0.0)
    mu[(x >= b) & (x <= c)] = 1.0
    rise = (x > a) & (x < b)
    fall = (x > c) & (x < d)
    # limbs of zero or infinite width hold no x; skip them to avoid inf - inf
    t_rise = (x[rise] - a) / (b - a) if rise.any() else x[rise]
    t_fall = (x[fall] - c) / (d - c) if fall.any() else x[fall]
    if shape == "linear":
        mu[rise] = t_rise
        mu[fall] = 1.0 - t_fall
    else:
        mu[rise] = np.cos((1.0 - t_rise) * np.pi / 2.0) ** 2
        mu[fall] = np.cos(t_fall * np.pi / 2.0) ** 2
    return mu


def fuzzy_combine(memberships, *, operator, gamma=None):
    """Combine layer memberships with a fuzzy operator.

    Parameters
    ----------
    memberships : array_like of shape (n_samples, n_layers) or (n_layers,)
        Memberships in [0, 1]; a 1-D input is one location.
    operator : {"minimum", "maximum", "algebraic_product", "algebraic_sum", "gamma_operator"}
        "minimum" = min(mu) (fuzzy AND), "maximum" = max(mu) (fuzzy OR),
        "algebraic_product" FAP = prod(mu), "algebraic_sum" FAS = 1 - prod(1 - mu),
        "gamma_operator" = FAS**gamma * FAP**(1 - gamma) (Zimmermann & Zysno 1980).
    gamma : float in [0, 1], optional
        Exponent of the gamma operator, required for it and ignored otherwise; 0
        gives the product and 1 the algebraic sum.

    Returns
    -------
    ndarray of shape (n_samples,) or float
        Combined membership in [0, 1].

    Raises
    ------
    InputError
        If the operator is unknown, gamma is missing or outside [0, 1], there are
        no layers, or a membership lies outside [0, 1].

    Notes
    -----
    0**0 is taken as 1, so gamma = 0 or 1 reproduces FAP or FAS exactly even where
    the other term is 0. Any zero membership makes FAP, and hence the gamma
    operator for gamma < 1, zero: memberships that never reach 0 (see
    ``membership_floor`` of :class:`FuzzySuitability`) keep cells apart.

    References
    ----------
    Zimmermann, H.-J. & Zysno, P. (1980). Latent connectives in human decision
    making. Fuzzy Sets and Systems 4(1), 37-51.
    https://doi.org/10.1016/0165-0114(80)90062-7

    Examples
    --------
    >>> round(float(fuzzy_combine([0.8, 0.2], operator="gamma_operator", gamma=0.5)), 6)
    0.366606
    """
    if operator not in _OPERATORS:
        raise InputError(f"Unknown fuzzy operator {operator!r}; use one of {_OPERATORS}.")
    if operator == "gamma_operator":
        _check_gamma(gamma, allow_none=False)
    mu = np.asarray(memberships, dtype=float)
    one_location = mu.ndim == 1
    mu = np.atleast_2d(mu)
    if mu.ndim != 2 or mu.shape[1] == 0:
        raise InputError(
            f"memberships must have shape (n_samples, n_layers) with n_layers >= 1; "
            f"got shape {np.shape(memberships)}."
        )
    if np.any((mu < 0) | (mu > 1)):
        raise InputError("Memberships must lie in [0, 1]; got values outside that range.")
    if operator == "minimum":
        out = mu.min(axis=1)
    elif operator == "maximum":
        out = mu.max(axis=1)
    else:
        fap = np.prod(mu, axis=1)
        fas = 1.0 - np.prod(1.0 - mu, axis=1)
        out = {"algebraic_product": fap, "algebraic_sum": fas}.get(operator)
        if out is None:
            out = fas**gamma * fap ** (1.0 - gamma)
    return out[0] if one_location else out


def _check_gamma(gamma, *, allow_none):
    if gamma is None and allow_none:
        return
    if isinstance(gamma, bool) or not isinstance(gamma, Real) or not 0.0 <= gamma <= 1.0:
        raise InputError(
            f"gamma must be a number in [0, 1]{' or left out (chosen in fit)' if allow_none else ''}; "
            f"got {gamma!r}."
        )


def category_memberships(site_values, background_values, *, site_weight=None, background_weight=None):
    """Membership of each class: relative site density, scaled so the densest class is 1.

    Parameters
    ----------
    site_values, background_values : array_like
        Class codes at the site and background rows.
    site_weight, background_weight : array_like, optional
        Non-negative row weights (equal when omitted).

    Returns
    -------
    dict
        Class -> membership in [0, 1], for every class met at a site; classes met
        only in the background are 0 (unseen classes are 0 at prediction as well).

    Notes
    -----
    For class k, with s_k the share of site weight and a_k the share of background
    weight in it, the relative site density is r_k = s_k / a_k (1 = as common among
    sites as in the landscape) and the membership r_k / max_j r_j. A class the
    background never met gets a_k = half the weight of one background row over the
    total (a continuity correction of one half, common practice), so a rare class
    with one site does not take an infinite density. Unlike the raw share of sites,
    this does not call a class suitable merely because it covers much of the study
    area.
    """
    site_values = pd.Series(np.asarray(site_values, dtype=object))
    background_values = pd.Series(np.asarray(background_values, dtype=object))
    ws = np.ones(len(site_values)) if site_weight is None else np.asarray(site_weight, dtype=float)
    wb = np.ones(len(background_values)) if background_weight is None else np.asarray(background_weight, float)
    site_share = pd.Series(ws).groupby(site_values.to_numpy(), sort=False).sum() / ws.sum()
    bg_total = wb.sum()
    bg_share = pd.Series(wb).groupby(background_values.to_numpy(), sort=False).sum() / bg_total
    floor = 0.5 * wb[wb > 0].min() / bg_total
    density = site_share / bg_share.reindex(site_share.index).fillna(0.0).clip(lower=floor)
    membership = density / density.max()
    return dict(zip(membership.index.tolist(), membership.to_numpy(dtype=float).tolist()))


class FuzzySuitability(ClassifierMixin, BaseEstimator):
    """Percentile-fuzzy suitability model, the traditional baseline.

    For each numeric layer, four control points a <= b <= c <= d are the chosen
    percentiles of the layer at known sites; the membership function (see
    :func:`fuzzy_membership`) gives 1 where a value is typical of sites and falls
    towards the extremes, to ``membership_floor`` rather than to 0. Layer memberships
    are combined by a fuzzy operator (see :func:`fuzzy_combine`), and the result mu
    is the suitability.

    Parameters
    ----------
    percentiles : sequence of 4 float, default (20, 40, 60, 80)
        Non-decreasing percentiles in [0, 100] giving a, b, c, d.
    shape : {"linear", "cosine"}, default "linear"
        Membership limb shape ("cosine" is the cos^2 sigmoid).
    operator : {"minimum", "maximum", "algebraic_product", "algebraic_sum", \
"gamma_operator"}, default "gamma_operator"
        How layer memberships are combined.
    gamma : float in [0, 1] or None, default None
        Exponent of the gamma operator. None chooses it in ``fit`` from the training
        rows only (see Notes); ignored by the other operators.
    membership_floor : float in [0, 1), default 0.2
        Least membership of any layer: mu = floor + (1 - floor) * trapezoid, so a
        value outside the site range (or a class without sites) lowers the
        suitability without zeroing the algebraic product for every other layer.
        0 gives the plain trapezoid.
    rescale_product : bool, default True
        Report the result of "algebraic_product" and "gamma_operator" as its n-th
        root (n = number of layers used), the geometric mean per layer. The root keeps
        the order of cells (AUC, gains, zones do not change) but puts the score on
        the scale of one layer's membership: a product of a dozen memberships is
        otherwise below 0.01 almost everywhere, which crowds the whole landscape into
        the lowest windows of the Boyce index. False gives the operator's value.
    categorical_features : sequence of int or str, optional
        Columns (indices, or names when fitting on a DataFrame) holding category
        codes, such as landform classes or soil units.
    monotone : mapping or sequence, optional
        One-sided memberships: a mapping from column (index or name) to
        "increasing" or "decreasing", or a sequence with one entry per column
        ("increasing", "decreasing" or None). "increasing" uses a, b only
        (c = d = +inf); "decreasing" uses c, d only (a = b = -inf).
    layer_selection : {"all", "top_k", "forward"}, default "forward"
        Which layers enter the combination, chosen in ``fit`` from the training rows
        only (see Notes). "all" combines every layer; "top_k" the ``max_layers``
        layers whose own membership has the highest training AUC; "forward" adds
        layers one at a time while the training AUC of the combination gains at
        least ``selection_tolerance``.
    max_layers : int >= 1 or None, default None
        Most layers kept; required by "top_k", no limit for "forward" when None,
        ignored by "all".
    selection_tolerance : float >= 0, default 0.005
        Least gain of training AUC for "forward" to add a layer.

    Attributes
    ----------
    classes_ : ndarray of shape (2,)
        Class labels; ``classes_[1]`` (the larger label, e.g. 1 or True) marks sites.
    control_points_ : ndarray of shape (n_features_in_, 4)
        a, b, c, d per layer in layer units; NaN rows for categorical layers.
    is_categorical_ : ndarray of bool, shape (n_features_in_,)
        Which layers are categorical.
    category_memberships_ : dict
        For each categorical column index, a dict from category to membership
        (before the floor), see :func:`category_memberships`.
    gamma_ : float or None
        The gamma used by the gamma operator (given, or chosen in fit).
    gamma_auc_ : ndarray of shape (21,) or None
        Training AUC for each gamma of :data:`GAMMA_GRID` when gamma was chosen.
    layers_used_ : ndarray of int
        Column indices of the layers combined, in the order they were chosen
        (column order for "all").
    layer_auc_ : ndarray of shape (n_features_in_,)
        Weighted training AUC of each layer's own membership (sites against
        background).
    selection_auc_ : ndarray or None
        For "forward", the training AUC of the combination after each layer was
        added (same order as ``layers_used_``); None otherwise.
    n_features_in_ : int
        Number of layers seen in fit.
    feature_names_in_ : ndarray of str
        Column names, when fitted on a DataFrame with string column names.

    Notes
    -----
    Control points use only the site rows (label ``classes_[1]``) with positive
    weight; percentiles are weighted as defined in :func:`weighted_percentile`
    (equal weights: numpy "linear", type 7).

    Categorical layers: the membership of a class is its relative site density,
    the share of site weight in the class over the share of background weight in
    it, divided by the largest such ratio (:func:`category_memberships`); classes
    without sites and classes unseen in fit get 0 (then the floor).

    Choosing gamma (``gamma=None`` with the gamma operator): each gamma of
    0, 0.05, ..., 1 is scored by the weighted ROC AUC of the training site rows
    against the training background rows (``sklearn.metrics.roc_auc_score``); the
    smallest gamma whose AUC is within 0.001 of the best is kept (with many layers
    FAS is close to 1 nearly everywhere and the AUC hardly moves with gamma, so the
    exact maximum would be chance). Inside cross-validation ``fit`` sees only
    a fold's training rows, so the choice never looks at held-out data.

    Choosing layers (our rule; training rows only, like gamma): each layer's own
    membership is scored by its weighted training AUC, ``layer_auc_``. "top_k"
    keeps the ``max_layers`` best layers (ties by column order). "forward" starts
    from the best layer and greedily adds the layer that raises the training AUC
    of the combination most, stopping when no layer gains ``selection_tolerance``
    or ``max_layers`` is reached; the combination is scored with the operator
    itself, the gamma operator with its gamma if given and as the algebraic
    product (gamma = 0) while gamma is still to be chosen, which it then is on the
    chosen layers. A layer without signal has a training AUC near 0.5 and, with
    the product or the gamma operator, still multiplies its noise into every cell;
    leaving it out is what makes the baseline fair against learners that can
    ignore a layer. ``predict_memberships`` still returns every layer.
    ``layer_selection="all"`` is the model as it was before layers were chosen.

    The defaults were chosen by spatially cross-validated AUC on virtual sites
    (``tests/benchmarks/fuzzy_defaults.py``): the minimum over a dozen trapezoids
    that are 0 outside the site range ties most cells at 0, which made the
    baseline look worse than the method is; forward layer selection kept the AUC
    on the virtual studies and raised it on the demo from 0.60 to 0.74
    (``--part layers``).

    ``predict_proba`` returns [1 - mu, mu] and ``predict`` gives ``classes_[1]`` where
    mu > 0.5. There is no ``decision_function``: scikit-learn reads its sign as the
    class, so mu itself would break that contract; mu is ``predict_proba(X)[:, 1]``.
    mu is a suitability score, not a calibrated probability.

    References
    ----------
    Zimmermann, H.-J. & Zysno, P. (1980). Latent connectives in human decision
    making. Fuzzy Sets and Systems 4(1), 37-51.
    https://doi.org/10.1016/0165-0114(80)90062-7
    An, P., Moon, W. M. & Rencz, A. (1991). Application of fuzzy set theory to
    integrated mineral exploration. Canadian Journal of Exploration Geophysics
    27(1), 1-11.

    Examples
    --------
    >>> import numpy as np
    >>> X = np.array([[12.], [15.], [18.], [20.], [22.], [25.], [27.], [30.], [35.],
    ...               [48.], [5.], [60.]])
    >>> y = np.array([1] * 10 + [0, 0])
    >>> model = FuzzySuitability(percentiles=(5, 25, 75, 95)).fit(X, y)
    >>> model.control_points_.round(2).tolist()
    [[13.35, 18.5, 29.25, 42.15]]
    """

    def __init__(
        self,
        *,
        percentiles=DEFAULT_PERCENTILES,
        shape="linear",
        operator="gamma_operator",
        gamma=None,
        membership_floor=DEFAULT_MEMBERSHIP_FLOOR,
        rescale_product=True,
        categorical_features=None,
        monotone=None,
        layer_selection=DEFAULT_LAYER_SELECTION,
        max_layers=None,
        selection_tolerance=DEFAULT_SELECTION_TOLERANCE,
    ):
        self.percentiles = percentiles
        self.shape = shape
        self.operator = operator
        self.gamma = gamma
        self.membership_floor = membership_floor
        self.rescale_product = rescale_product
        self.categorical_features = categorical_features
        self.monotone = monotone
        self.layer_selection = layer_selection
        self.max_layers = max_layers
        self.selection_tolerance = selection_tolerance

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.classifier_tags.multi_class = False
        # mu > 0.5 holds only in the central part of the site distribution (by design),
        # so training accuracy is low even on well separated classes
        tags.classifier_tags.poor_score = True
        tags.input_tags.string = bool(self.categorical_features)
        return tags

    def fit(self, X, y, sample_weight=None):
        """Fit control points, class memberships and (if asked) the layers and gamma.

        Parameters
        ----------
        X : array_like or DataFrame of shape (n_samples, n_features)
            Layer values at sites and background points.
        y : array_like of shape (n_samples,)
            Two class labels; the larger one (``classes_[1]``) marks sites.
        sample_weight : array_like of shape (n_samples,), optional
            Non-negative weights.

        Returns
        -------
        self : FuzzySuitability
        """
        self._check_params()
        X, y = self._validate_X(X, y, reset=True)
        check_classification_targets(y)
        self.classes_ = np.unique(y)
        if self.classes_.size != 2:
            raise InputError(
                f"Only binary classification is supported. FuzzySuitability needs 2 "
                f"class labels (sites and background); y has {self.classes_.size} "
                f"class(es): {self.classes_.tolist()[:5]}. Label sites 1, background 0."
            )
        w = np.ones(len(y)) if sample_weight is None else _check_weights(sample_weight, len(y))
        site = (y == self.classes_[1]) & (w > 0)
        background = (y == self.classes_[0]) & (w > 0)
        for mask, what in ((site, "site"), (background, "background")):
            if not mask.any():
                raise InsufficientDataError(
                    f"No rows of the {what} class {self.classes_[int(what == 'site')]!r} have positive "
                    f"weight; at least one weighted {what} row is needed to fit FuzzySuitability."
                )
        n_features = X.shape[1]
        self.is_categorical_ = np.zeros(n_features, dtype=bool)
        self.is_categorical_[self._categorical_indices(n_features)] = True
        directions = self._directions(n_features)
        use_w = None if sample_weight is None else w[site]
        self.control_points_ = np.full((n_features, 4), np.nan)
        self.category_memberships_ = {}
        for j in range(n_features):
            col = X[site, j]
            if self.is_categorical_[j]:
                self.category_memberships_[j] = category_memberships(
                    col, X[background, j], site_weight=w[site], background_weight=w[background])
                continue
            cp = weighted_percentile(col.astype(float), list(self.percentiles), use_w)
            if directions[j] == "increasing":
                cp[2:] = np.inf
            elif directions[j] == "decreasing":
                cp[:2] = -np.inf
            self.control_points_[j] = cp
        self.gamma_ = None if self.gamma is None else float(self.gamma)
        self.gamma_auc_ = None
        rows = site | background
        mu = self._memberships(X[rows])
        truth = (y[rows] == self.classes_[1]).astype(int)
        self._select_layers(mu, truth, w[rows])
        if self.operator == "gamma_operator" and self.gamma is None:
            self.gamma_, self.gamma_auc_ = self._choose_gamma(mu[:, self.layers_used_], truth, w[rows])
        return self

    def _select_layers(self, mu, truth, w):
        """Set layer_auc_, layers_used_ and selection_auc_ from training memberships (see Notes)."""
        from sklearn.metrics import roc_auc_score

        n = mu.shape[1]
        self.layer_auc_ = np.array([roc_auc_score(truth, mu[:, j], sample_weight=w) for j in range(n)])
        self.selection_auc_ = None
        if self.layer_selection == "all":
            self.layers_used_ = np.arange(n)
            return
        limit = n if self.max_layers is None else min(int(self.max_layers), n)
        ranked = np.argsort(-self.layer_auc_, kind="stable")
        if self.layer_selection == "top_k":
            self.layers_used_ = np.sort(ranked[:limit])
            return
        gamma = self.gamma if self.operator == "gamma_operator" and self.gamma is not None else 0.0
        used, scores = [int(ranked[0])], [float(self.layer_auc_[ranked[0]])]
        while len(used) < limit:
            rest = [j for j in range(n) if j not in used]
            trial = [roc_auc_score(truth, fuzzy_combine(mu[:, used + [j]], operator=self.operator, gamma=gamma),
                                   sample_weight=w) for j in rest]
            best = int(np.argmax(trial))
            if trial[best] - scores[-1] < self.selection_tolerance:
                break
            used.append(rest[best])
            scores.append(float(trial[best]))
        self.layers_used_ = np.array(used, dtype=int)
        self.selection_auc_ = np.array(scores)

    def _choose_gamma(self, mu, truth, w):
        """The smallest gamma of GAMMA_GRID whose weighted training AUC is within the tolerance of the best."""
        from sklearn.metrics import roc_auc_score

        fap = np.prod(mu, axis=1)
        fas = 1.0 - np.prod(1.0 - mu, axis=1)
        auc = np.array([roc_auc_score(truth, fas**g * fap ** (1.0 - g), sample_weight=w) for g in GAMMA_GRID])
        best = int(np.flatnonzero(auc >= auc.max() - GAMMA_AUC_TOLERANCE)[0])
        return float(GAMMA_GRID[best]), auc

    def predict_memberships(self, X):
        """Membership of each layer at each row, floor included.

        Parameters
        ----------
        X : array_like or DataFrame of shape (n_samples, n_features_in_)

        Returns
        -------
        ndarray of shape (n_samples, n_features_in_)
            Per-layer memberships in [membership_floor, 1].
        """
        check_is_fitted(self)
        return self._memberships(self._validate_X(X, reset=False))

    def _memberships(self, X):
        mu = np.empty(X.shape, dtype=float)
        for j in range(X.shape[1]):
            if self.is_categorical_[j]:
                table = self.category_memberships_[j]
                index = pd.Index(list(table.keys()), dtype=object)
                values = np.append(np.fromiter(table.values(), float, len(table)), 0.0)
                # get_indexer gives -1 for unseen categories, which picks the 0 appended
                mu[:, j] = values[index.get_indexer(pd.Index(X[:, j], dtype=object))]
            else:
                mu[:, j] = fuzzy_membership(
                    X[:, j].astype(float), self.control_points_[j], shape=self.shape
                )
        floor = float(self.membership_floor)
        return mu if floor == 0 else floor + (1.0 - floor) * mu

    def predict_proba(self, X):
        """Return [1 - mu, mu] per row, mu being the combined suitability.

        Parameters
        ----------
        X : array_like or DataFrame of shape (n_samples, n_features_in_)

        Returns
        -------
        ndarray of shape (n_samples, 2)
        """
        memberships = self.predict_memberships(X)[:, self.layers_used_]
        mu = fuzzy_combine(memberships, operator=self.operator, gamma=self.gamma_)
        if self.rescale_product and self.operator in ("algebraic_product", "gamma_operator"):
            mu = mu ** (1.0 / memberships.shape[1])
        return np.column_stack([1.0 - mu, mu])

    def predict(self, X):
        """Return ``classes_[1]`` where mu > 0.5, else ``classes_[0]``.

        Parameters
        ----------
        X : array_like or DataFrame of shape (n_samples, n_features_in_)

        Returns
        -------
        ndarray of shape (n_samples,)
        """
        proba = self.predict_proba(X)
        return self.classes_[(proba[:, 1] > 0.5).astype(int)]

    # -- helpers ---------------------------------------------------------------

    def _check_params(self):
        if self.shape not in _SHAPES:
            raise InputError(f"Unknown shape {self.shape!r}; use one of {_SHAPES}.")
        if self.operator not in _OPERATORS:
            raise InputError(f"Unknown operator {self.operator!r}; use one of {_OPERATORS}.")
        _check_gamma(self.gamma, allow_none=True)
        if self.layer_selection not in _SELECTIONS:
            raise InputError(f"Unknown layer_selection {self.layer_selection!r}; use one of {_SELECTIONS}.")
        k = self.max_layers
        if k is not None and (isinstance(k, bool) or not isinstance(k, Integral) or k < 1):
            raise InputError(f"max_layers must be a whole number >= 1 or left out; got {k!r}.")
        if self.layer_selection == "top_k" and k is None:
            raise InputError('layer_selection="top_k" needs max_layers, the number of layers to keep; e.g. 4.')
        tol = self.selection_tolerance
        if isinstance(tol, bool) or not isinstance(tol, Real) or not (np.isfinite(tol) and tol >= 0):
            raise InputError(f"selection_tolerance must be a number >= 0; got {tol!r}.")
        floor = self.membership_floor
        if isinstance(floor, bool) or not isinstance(floor, Real) or not 0.0 <= floor < 1.0:
            raise InputError(f"membership_floor must be a number in [0, 1); got {floor!r}.")
        p = np.asarray(self.percentiles, dtype=float) if _is_numeric_seq(self.percentiles) else None
        if (
            p is None
            or p.shape != (4,)
            or np.any(~np.isfinite(p))
            or np.any((p < 0) | (p > 100))
            or np.any(np.diff(p) < 0)
        ):
            raise InputError(
                f"percentiles must be 4 non-decreasing numbers in [0, 100]; got "
                f"{self.percentiles!r}. Example: (5, 25, 75, 95)."
            )

    def _validate_X(self, X, y="no_validation", *, reset):
        if not self.categorical_features:
            kwargs = dict(dtype=np.float64)
        else:
            kwargs = dict(dtype=None, ensure_all_finite=False)
        only_X = isinstance(y, str) and y == "no_validation"
        if only_X:
            X = validate_data(self, X, reset=reset, **kwargs)
        else:
            X, y = validate_data(self, X, y, reset=reset, **kwargs)
        if self.categorical_features:
            X = _check_mixed(X, self._categorical_indices(X.shape[1]), self._names())
        return X if only_X else (X, y)

    def _names(self):
        return getattr(self, "feature_names_in_", None)

    def _categorical_indices(self, n_features):
        return resolve_columns(
            self.categorical_features, n_features, self._names(), what="categorical_features"
        )

    def _directions(self, n_features):
        spec = self.monotone
        directions = [None] * n_features
        if spec is None:
            return directions
        if isinstance(spec, dict):
            cols = resolve_columns(list(spec), n_features, self._names(), what="monotone")
            for j, value in zip(cols, spec.values()):
                directions[j] = value
        else:
            if isinstance(spec, str) or len(spec) != n_features:
                raise InputError(
                    f"monotone must be a mapping or a sequence with one entry per column "
                    f"({n_features}); got {spec!r}."
                )
            directions = list(spec)
        for j, value in enumerate(directions):
            if value is not None and value not in _DIRECTIONS:
                raise InputError(
                    f"monotone entry {value!r} for column {j} is invalid; use one of "
                    f"{_DIRECTIONS} or None."
                )
            if value is not None and self.is_categorical_[j]:
                raise InputError(
                    f"Column {j} is categorical and cannot be monotone; remove it from "
                    "monotone."
                )
        return directions


def resolve_columns(spec, n_features, feature_names=None, *, what="columns"):
    """Turn a sequence of column indices or names into sorted unique indices.

    Parameters
    ----------
    spec : sequence of int or str, or None
        Column indices (negative counts from the end) or column names.
    n_features : int
        Number of columns.
    feature_names : array_like of str, optional
        Column names; needed when ``spec`` holds names.
    what : str
        Parameter name used in error messages.

    Returns
    -------
    ndarray of int

    Raises
    ------
    InputError
        If indices are out of range, names are unknown or given without names,
        or indices and names are mixed.
    """
    if spec is None or (not isinstance(spec, str) and len(spec) == 0):
        return np.array([], dtype=int)
    if isinstance(spec, (str, Integral)):
        spec = [spec]
    items = list(spec)
    if all(isinstance(s, str) for s in items):
        if feature_names is None:
            raise InputError(
                f"{what} names columns by name ({items}) but X has no column names; "
                "pass a DataFrame or give column indices."
            )
        lookup = {name: i for i, name in enumerate(feature_names)}
        missing = [s for s in items if s not in lookup]
        if missing:
            raise InputError(
                f"{what} names unknown column(s) {missing}; X has columns "
                f"{list(feature_names)}."
            )
        idx = [lookup[s] for s in items]
    elif all(isinstance(s, Integral) and not isinstance(s, bool) for s in items):
        bad = [s for s in items if not -n_features <= s < n_features]
        if bad:
            raise InputError(
                f"{what} has column index(es) {bad}, but X has {n_features} feature(s); "
                f"use indices 0 to {n_features - 1} or column names."
            )
        idx = [s % n_features for s in items]
    else:
        raise InputError(
            f"{what} must be all column indices or all column names; got {items!r}."
        )
    return np.unique(np.asarray(idx, dtype=int))


def _check_mixed(X, categorical, feature_names):
    """Return X as an object array whose numeric columns are finite floats."""
    X = np.array(X, dtype=object)
    for j in range(X.shape[1]):
        label = feature_names[j] if feature_names is not None else j
        if j in categorical:
            col = pd.Series(X[:, j])
            n_missing = int((col.isna() | col.isin([np.inf, -np.inf])).sum())
            if n_missing:
                raise InputError(
                    f"Categorical column {label!r} has {n_missing} missing or infinite "
                    "value(s); fill or drop those rows first."
                )
            continue
        values = X[:, j].astype(float)
        n_bad = int(np.count_nonzero(~np.isfinite(values)))
        if n_bad:
            raise InputError(
                f"Column {label!r} has {n_bad} NaN or infinite value(s); "
                "fill or drop those rows first."
            )
        X[:, j] = values
    return X


def _check_weights(sample_weight, n_samples):
    """Validate sample weights and return them as a float array."""
    w = np.asarray(sample_weight, dtype=float)
    if w.ndim == 0:
        w = np.full(n_samples, float(w))
    if w.shape != (n_samples,):
        raise InputError(
            f"sample_weight has shape {w.shape}; expected ({n_samples},), one weight per row."
        )
    if not np.all(np.isfinite(w)) or np.any(w < 0):
        raise InputError(
            f"sample_weight has {np.count_nonzero(~(np.isfinite(w) & (w >= 0)))} negative "
            "or non-finite weight(s); weights must be finite and >= 0."
        )
    if not np.any(w > 0):
        raise InputError("All sample weights are zero; at least one must be positive.")
    return w


def _check_control_points(control_points):
    cp = np.asarray(control_points, dtype=float)
    if cp.shape != (4,) or np.any(np.isnan(cp)) or np.any(cp[1:] < cp[:-1]):
        raise InputError(
            f"control_points must be 4 non-decreasing numbers a <= b <= c <= d; got "
            f"{control_points!r}."
        )
    a, b, c, d = cp
    if np.isinf(b) != np.isinf(a) or np.isinf(c) != np.isinf(d):
        raise InputError(
            f"Infinite control points must come in pairs (a = b = -inf or c = d = +inf); "
            f"got {control_points!r}."
        )
    return cp


def _is_numeric_seq(value):
    try:
        return all(isinstance(v, Real) and not isinstance(v, bool) for v in value)
    except TypeError:
        return False
