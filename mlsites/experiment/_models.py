"""Fitted models on disk: a skops file plus a JSON model card that vouches for it.

A model file is written with :mod:`skops.io`, a format that describes objects
instead of pickling them, so loading runs no code of the file's choosing. Next to
it a model card (JSON) records the features and their order, the grid, a hash of
the training table, the settings, the cross-validated measures, the library
versions and the SHA-256 of the model file. :func:`load_model` refuses a file
whose hash differs from its card, and any type outside a short allow-list.
"""

from __future__ import annotations

import json
import platform
import zipfile
from dataclasses import dataclass
from pathlib import Path

from mlsites._files import replacing
from mlsites.errors import InputError
from mlsites.experiment._hashing import file_digest

__all__ = ["SavedModel", "TRUSTED_TYPES", "library_versions", "load_fold_models", "load_model", "save_model"]

#: Types beyond skops' defaults that a preset pipeline holds and that load as plain
#: data (tree arrays, optimiser state, the boosting predictor and its input check).
#: Types of mlsites itself are trusted by prefix, see :func:`load_model`.
TRUSTED_TYPES = (
    "sklearn.tree._tree.Tree",
    "sklearn.neural_network._stochastic_optimizers.AdamOptimizer",
    "sklearn.neural_network._stochastic_optimizers.SGDOptimizer",
    "sklearn.ensemble._hist_gradient_boosting.predictor.TreePredictor",
    "sklearn.ensemble._hist_gradient_boosting.binning._BinMapper",
    "sklearn.utils.validation.check_array",
    # a partial is only rebuilt around a function that is itself in this list
    "functools.partial",
)
_OWN_PREFIX = "mlsites."
CARD_SUFFIX = ".card.json"
MODEL_SUFFIX = ".skops"


@dataclass(frozen=True)
class SavedModel:
    """A fitted estimator with its model card and file paths."""

    estimator: object
    card: dict
    model_path: Path
    card_path: Path


def library_versions() -> dict:
    """Versions of Python and the libraries a fitted model depends on."""
    import numpy
    import pandas
    import scipy
    import skops
    import sklearn

    from mlsites import __version__

    return {"python": platform.python_version(), "mlsites": __version__, "numpy": numpy.__version__,
            "scipy": scipy.__version__, "pandas": pandas.__version__, "scikit-learn": sklearn.__version__,
            "skops": skops.__version__}



def save_model(estimator, directory, name, *, features, categorical=(), grid=None,
               training_data_sha256=None, settings=None, metrics=None, extra=None,
               fold_estimators=()) -> SavedModel:
    """Write a fitted estimator as ``NAME.skops`` and its card as ``NAME.card.json``.

    Parameters
    ----------
    estimator : fitted estimator or Pipeline
    directory : path-like
        Created if missing; existing files of the same name are replaced.
    name : str
        File stem, usually the learner name.
    features : sequence of str
        Feature columns in the order the estimator expects them.
    categorical : sequence of str
        The categorical features.
    grid : GridSpec or dict, optional
        The study grid the features were read on.
    training_data_sha256 : str, optional
        SHA-256 of the training table file (``samples.parquet``).
    settings : dict, optional
        Learner settings and seed.
    metrics : dict, optional
        Cross-validated measures (one row of ``metrics_summary.csv``).
    extra : dict, optional
        Further card entries (experiment name, run directory ...).
    fold_estimators : sequence of fitted estimators, optional
        The cross-validation's model of each fold, saved beside the model as
        ``NAME.fold<k>.skops`` and listed with their SHA-256 under ``fold_models``
        in the card (the spread layer of a map predicts with them).

    Returns
    -------
    SavedModel
    """
    import skops.io as sio

    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    model_path = directory / f"{name}{MODEL_SUFFIX}"
    card_path = directory / f"{name}{CARD_SUFFIX}"
    with replacing(model_path) as tmp:
        sio.dump(estimator, tmp, compression=zipfile.ZIP_DEFLATED)
    fold_models = []
    for k, fold_estimator in enumerate(fold_estimators):
        fold_path = directory / f"{name}.fold{k}{MODEL_SUFFIX}"
        with replacing(fold_path) as tmp:
            sio.dump(fold_estimator, tmp, compression=zipfile.ZIP_DEFLATED)
        fold_models.append({"file": fold_path.name, "sha256": file_digest(fold_path)})
    if grid is not None and not isinstance(grid, dict):
        grid = grid.to_dict()
    card = {
        "name": name,
        "model_file": model_path.name,
        "model_sha256": file_digest(model_path),
        "format": "skops",
        "estimator": type(estimator).__name__,
        "features": list(features),
        "categorical": list(categorical),
        "grid": grid,
        "training_data_sha256": training_data_sha256,
        "settings": settings or {},
        "cross_validated": metrics or {},
        "fold_models": fold_models,
        "versions": library_versions(),
        **(extra or {}),
    }
    text = json.dumps(card, indent=2, default=_json_default) + "\n"
    with replacing(card_path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return SavedModel(estimator, card, model_path, card_path)


def _json_default(obj):
    import numpy as np

    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    return str(obj)


def _card_and_model_paths(path: Path) -> tuple[Path, Path]:
    if path.name.endswith(CARD_SUFFIX):
        return path, path
    if path.suffix == MODEL_SUFFIX:
        return path.with_name(path.name[: -len(MODEL_SUFFIX)] + CARD_SUFFIX), path
    raise InputError(f"{path}: expected a model card (*{CARD_SUFFIX}) or a model file (*{MODEL_SUFFIX})")


def load_model(path) -> SavedModel:
    """Load a model saved by :func:`save_model`, after checking it against its card.

    Parameters
    ----------
    path : path-like
        The model card (``NAME.card.json``) or the model file (``NAME.skops``);
        the other is found beside it.

    Returns
    -------
    SavedModel

    Raises
    ------
    InputError
        The card or model file is missing, the model file's SHA-256 differs from
        the card's, or the file holds a type outside the trusted set.

    Notes
    -----
    Two checks run before anything is rebuilt. The file's SHA-256 must equal
    ``model_sha256`` of the card, so a swapped or edited file is refused. Then
    :func:`skops.io.get_untrusted_types` lists the types skops does not trust by
    default; each must be an mlsites type or in :data:`TRUSTED_TYPES`, and only
    those are passed to :func:`skops.io.load`.
    """
    card_path, model_path = _card_and_model_paths(Path(path))
    if not card_path.exists():
        raise InputError(f"{card_path}: model card not found; a model is only loaded with its card")
    try:
        card = json.loads(card_path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"{card_path}: not a readable model card ({exc}); rewrite it by re-running") from None
    if model_path == card_path:
        model_path = card_path.with_name(card.get("model_file", ""))
    if not model_path.is_file():
        raise InputError(f"{model_path}: model file named by {card_path.name} not found")
    estimator = _load_checked(model_path, card.get("model_sha256"), card_path)
    return SavedModel(estimator, card, model_path, card_path)


def _load_checked(model_path: Path, expected_sha256, card_path: Path):
    """Load a skops file after checking its SHA-256 and its types (see :func:`load_model`)."""
    import skops.io as sio

    digest = file_digest(model_path)
    if digest != expected_sha256:
        raise InputError(
            f"{model_path}: SHA-256 {digest[:16]}... differs from {expected_sha256 or 'none'!s:.16}... "
            f"in {card_path.name}; refusing to load a model file its card does not vouch for "
            "(re-run the experiment to rebuild it)"
        )
    untrusted = sio.get_untrusted_types(file=model_path)
    unknown = [t for t in untrusted if not t.startswith(_OWN_PREFIX) and t not in TRUSTED_TYPES]
    if unknown:
        raise InputError(f"{model_path}: holds type(s) outside the trusted set ({', '.join(unknown)}); "
                         "refusing to load it")
    return sio.load(model_path, trusted=untrusted)


def load_fold_models(saved: SavedModel) -> list:
    """The fold models listed in a model card, each checked like the model itself.

    Parameters
    ----------
    saved : SavedModel
        From :func:`load_model`.

    Returns
    -------
    list of fitted estimators
        In fold order; empty when the card lists none.

    Raises
    ------
    InputError
        A listed file is missing, its SHA-256 differs from the card's or it holds
        an untrusted type.
    """
    models = []
    for entry in saved.card.get("fold_models") or []:
        path = saved.card_path.with_name(entry["file"])
        if not path.is_file():
            raise InputError(f"{path}: fold model named by {saved.card_path.name} not found; re-run the "
                             "experiment to rebuild it")
        models.append(_load_checked(path, entry.get("sha256"), saved.card_path))
    return models
