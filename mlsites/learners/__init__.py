"""Named learner presets and the percentile-fuzzy suitability baseline.

Every learner is a scikit-learn compatible classifier with ``predict_proba`` that
honours ``sample_weight`` and ``random_state``. Build one by name with
:func:`make_learner` and fit it with :func:`fit_learner`, which routes sample weights
to every step that uses them. :func:`fast_predictor` predicts the site probability
of a fitted learner, through compiled tree walks for the tree ensembles.
"""

from mlsites.learners._fuzzy import (
    FuzzySuitability,
    category_memberships,
    fuzzy_combine,
    fuzzy_membership,
    weighted_percentile,
)
from mlsites.learners._fast_predict import SitePredictor, fast_predictor
from mlsites.learners._presets import (
    LEARNERS,
    LayerEncoder,
    MeanLossLogisticRegression,
    balanced_draws_share,
    fit_learner,
    make_learner,
)

__all__ = [
    "LEARNERS",
    "FuzzySuitability",
    "category_memberships",
    "LayerEncoder",
    "MeanLossLogisticRegression",
    "balanced_draws_share",
    "SitePredictor",
    "fast_predictor",
    "fit_learner",
    "make_learner",
    "fuzzy_combine",
    "fuzzy_membership",
    "weighted_percentile",
]
