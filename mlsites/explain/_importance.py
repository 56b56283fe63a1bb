"""The importance table of the explanation stage, and the warnings read from it."""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from mlsites.errors import InputError
from mlsites.explain._permutation import _ranks

__all__ = ["importance_table", "correlated_layers", "check_survey_layers", "DEFAULT_CORRELATION_THRESHOLD"]

#: |Spearman rho| above which two layers are said to share one signal (common practice).
DEFAULT_CORRELATION_THRESHOLD = 0.8

TABLE_COLUMNS = ["learner", "layer", "output_space", "shap_method", "shap_mean_abs", "shap_share", "shap_rank",
                 "permutation_mean", "permutation_sd", "permutation_n", "permutation_rank", "notes"]


def correlated_layers(X, *, layers=None, categorical=(), threshold=DEFAULT_CORRELATION_THRESHOLD):
    """Pairs of numeric layers whose |Spearman rho| exceeds ``threshold``.

    Parameters
    ----------
    X : DataFrame
        Rows standing for the study area (landscape cells).
    layers : sequence of str, optional
        Default every column; categorical layers are skipped (rank correlation of
        class codes means nothing).
    categorical : sequence of str, default ()
    threshold : float in (0, 1), default 0.8

    Returns
    -------
    DataFrame
        ``layer_a``, ``layer_b``, ``spearman``, strongest first.

    Raises
    ------
    InputError
        ``threshold`` outside (0, 1).
    """
    if isinstance(threshold, bool) or not isinstance(threshold, (int, float)) or not 0 < threshold < 1:
        raise InputError(f"correlation_threshold={threshold!r}; expected a number in (0, 1), e.g. 0.8.")
    layers = list(X.columns) if layers is None else list(layers)
    numeric = [c for c in layers if c not in set(categorical)]
    rows = []
    values = X[numeric].to_numpy(dtype=np.float64)
    if len(numeric) >= 2 and len(X) >= 3:
        # a constant layer has no rank correlation; leave it out instead of NaN warnings
        varying = [k for k in range(len(numeric)) if np.ptp(values[:, k]) > 0]
        rho = np.atleast_2d(stats.spearmanr(values[:, varying]).statistic) if len(varying) >= 2 else np.eye(1)
        for a in range(len(varying)):
            for b in range(a + 1, len(varying)):
                r = float(rho[a, b])
                if abs(r) > threshold:
                    rows.append((numeric[varying[a]], numeric[varying[b]], r))
    out = pd.DataFrame(rows, columns=["layer_a", "layer_b", "spearman"])
    return out.reindex(out["spearman"].abs().sort_values(ascending=False).index).reset_index(drop=True)


def importance_table(shap_values, permutation, *, output_spaces, methods, survey_layers=(), correlated=None,
                     threshold=DEFAULT_CORRELATION_THRESHOLD, n_correlation_rows=None):
    """Join SHAP and held-out permutation importance per learner and layer; collect warnings.

    Parameters
    ----------
    shap_values : dict of str to DataFrame
        Learner -> SHAP values (rows x layers) of the explanation sample.
    permutation : dict of str to PermutationImportance or None
        Learner -> result of :func:`heldout_permutation_importance` (None: not
        available, for example without fold models).
    output_spaces, methods : dict of str to str
        Learner -> output space and SHAP method (copied into the table).
    survey_layers : sequence of str, default ()
        Layers that may encode survey effort rather than settlement.
    correlated : DataFrame, optional
        Result of :func:`correlated_layers`.
    threshold : float
        The threshold ``correlated`` was built with (quoted in the warnings).
    n_correlation_rows : int, optional
        Rows the correlations were computed on (quoted in the warnings).

    Returns
    -------
    table : DataFrame
        Columns :data:`TABLE_COLUMNS`; ``shap_share`` = mean |SHAP| of the layer /
        sum over the learner's layers; ranks 1 = most important (ties share the
        smaller rank); ``notes`` flags survey layers ranked first and correlated
        partners.
    warnings : list of str
    """
    warnings, notes = [], {}
    pairs = [] if correlated is None else list(correlated.itertuples(index=False))
    where = f" on {n_correlation_rows} landscape cells" if n_correlation_rows else ""
    for a, b, r in pairs:
        warnings.append(f"layers {a} and {b} are strongly correlated (Spearman {r:+.2f}, |rho| > {threshold:g}"
                        f"{where}): their importances share one signal, so read them together and do not "
                        "take a low rank of either as evidence that it does not matter")
        notes.setdefault(a, []).append(f"correlated with {b} (Spearman {r:+.2f})")
        notes.setdefault(b, []).append(f"correlated with {a} (Spearman {r:+.2f})")
    parts = []
    for learner, phi in shap_values.items():
        layers = list(phi.columns)
        mean_abs = phi.abs().mean(axis=0).to_numpy(dtype=np.float64)
        total = mean_abs.sum()
        part = pd.DataFrame({
            "learner": learner, "layer": layers, "output_space": output_spaces[learner],
            "shap_method": methods[learner], "shap_mean_abs": mean_abs,
            "shap_share": mean_abs / total if total > 0 else np.zeros_like(mean_abs),
        })
        part["shap_rank"] = _ranks(part["shap_mean_abs"].to_numpy())
        pi = permutation.get(learner)
        if pi is not None:
            s = pi.summary.set_index("layer").reindex(layers)
            part["permutation_mean"] = s["importance_mean"].to_numpy()
            part["permutation_sd"] = s["importance_sd"].to_numpy()
            part["permutation_n"] = s["n_values"].to_numpy()
            part["permutation_rank"] = _ranks(part["permutation_mean"].to_numpy())
        else:
            part["permutation_mean"] = np.nan
            part["permutation_sd"] = np.nan
            part["permutation_n"] = 0
            part["permutation_rank"] = pd.NA
        learner_notes = {layer: list(notes.get(layer, [])) for layer in layers}
        for measure, column in (("held-out permutation importance", "permutation_rank"),
                                ("mean |SHAP|", "shap_rank")):
            if part[column].isna().all():
                continue
            top = part.loc[part[column] == 1, "layer"].tolist()
            for layer in top:
                if layer in survey_layers:
                    warnings.append(
                        f"{learner}: the top layer by {measure} is {layer}, listed in [explain] survey_layers as "
                        "plausibly encoding survey effort: the model may have learnt where fieldwork happened "
                        "rather than where sites are; compare with background drawn from surveyed areas "
                        "([sampling] survey_areas) or without this layer before trusting the map")
                    learner_notes[layer].insert(0, f"survey-effort layer ranked first by {measure}")
        part["notes"] = ["; ".join(learner_notes[layer]) for layer in layers]
        parts.append(part)
    table = pd.concat(parts, ignore_index=True)[TABLE_COLUMNS] if parts else pd.DataFrame(columns=TABLE_COLUMNS)
    return table, warnings


def check_survey_layers(survey_layers, features):
    """The survey-layer names, checked against the features (InputError naming the bad ones)."""
    survey_layers = [survey_layers] if isinstance(survey_layers, str) else list(survey_layers or ())
    unknown = [s for s in survey_layers if s not in features]
    if unknown:
        raise InputError(f"[explain] survey_layers names {unknown}, which are not features of the learners; "
                         f"features are {list(features)}. Fix the names or remove them.")
    return survey_layers
