"""Explanations: why a learner predicts what it does.

SHAP values per layer for every learner preset (:class:`LayerExplainer`, exact
TreeSHAP for tree ensembles, the linear solution for logistic regression,
antithetic permutation sampling otherwise), permutation importance on the held-out
spatial folds (:func:`heldout_permutation_importance`), partial dependence with
individual curves (:func:`response_curves`), and the stage that writes them all
with the importance table and its warnings (:func:`explain_learners`).
:func:`layer_contributions` gives per-layer SHAP values of map cells, window by
window, for contribution maps.
"""

from mlsites.explain._importance import (
    DEFAULT_CORRELATION_THRESHOLD,
    check_survey_layers,
    correlated_layers,
    importance_table,
)
from mlsites.explain._permutation import PermutationImportance, auc_scorer, heldout_permutation_importance
from mlsites.explain._response import response_curves, response_grid
from mlsites.explain._shap import (
    LayerExplainer,
    encoded_layers,
    layer_contributions,
    output_space,
    predicted_score,
    raw_output,
)
from mlsites.explain._stage import EXPLAIN_DEFAULTS, ExplainResult, explain_learners
from mlsites.explain._trees import FlatTrees, flatten_trees, tree_shap

__all__ = [
    "LayerExplainer",
    "layer_contributions",
    "encoded_layers",
    "output_space",
    "raw_output",
    "predicted_score",
    "FlatTrees",
    "flatten_trees",
    "tree_shap",
    "PermutationImportance",
    "heldout_permutation_importance",
    "auc_scorer",
    "response_grid",
    "response_curves",
    "importance_table",
    "correlated_layers",
    "check_survey_layers",
    "DEFAULT_CORRELATION_THRESHOLD",
    "EXPLAIN_DEFAULTS",
    "ExplainResult",
    "explain_learners",
]
