"""Explain one saved model from its card: the body of ``mlsites explain``."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd

from mlsites.errors import InputError, OutputExistsError

__all__ = ["explain_saved_model", "default_explain_dir"]


def default_explain_dir(card: dict, card_path: Path) -> Path:
    """``RUN_DIR/explain_LEARNER`` for the run named in the card, else beside the card."""
    run_dir = card.get("run_dir")
    parent = Path(run_dir) if run_dir and Path(run_dir).is_dir() else Path(card_path).parent
    return parent / f"explain_{card.get('name', Path(card_path).name.removesuffix('.card.json'))}"


def _training_table(card, card_path):
    from mlsites.experiment._hashing import file_digest

    entry = card.get("training_table")
    if not entry:
        raise InputError(f"{card_path}: the model card names no training table; explanations need the sample "
                         "table the model was fitted on (re-run the experiment with this version)")
    path = Path(entry["path"])
    if not path.is_file():
        raise InputError(f"{card_path}: training table {path} not found; keep the run folder beside the models "
                         "or re-run the experiment")
    if entry.get("sha256") and file_digest(path) != entry["sha256"]:
        raise InputError(f"{path}: SHA-256 differs from training_table in {Path(card_path).name}; the table "
                         "changed after the model was fitted (re-run the experiment)")
    table = pd.read_parquet(path)
    missing = [c for c in list(card["features"]) + ["label", "weight", "site_id", "fold"] if c not in table.columns]
    if missing:
        raise InputError(f"{path}: column(s) {', '.join(missing)} missing; it is not the sample table of the model "
                         f"card {Path(card_path).name}")
    return table


def _run_settings(card):
    """The ``[explain]`` settings of the card's run (its manifest), else the defaults."""
    from mlsites.explain._in_run import STAGE_KEYS
    from mlsites.explain._stage import EXPLAIN_DEFAULTS

    settings = {k: EXPLAIN_DEFAULTS[k] for k in STAGE_KEYS}
    manifest = Path(card.get("run_dir") or "") / "manifest.json"
    if card.get("run_dir") and manifest.is_file():
        try:
            given = json.loads(manifest.read_text(encoding="utf-8")).get("settings", {}).get("explain", {})
        except (json.JSONDecodeError, UnicodeDecodeError):
            given = {}
        settings.update({k: given[k] for k in STAGE_KEYS if k in given})
    return settings


def _fold_models(saved, table):
    """Fold tuples for the permutation importance, or (None, reason) when they cannot be had."""
    from mlsites.experiment._models import load_fold_models
    from mlsites.explain._in_run import fold_model_tuples, heldout_fold_rows

    entries = saved.card.get("fold_models") or []
    if not entries:
        return None, "the model card lists no fold models"
    absent = [e["file"] for e in entries if not saved.card_path.with_name(e["file"]).is_file()]
    if absent:
        return None, f"{len(absent)} of its {len(entries)} fold model files are missing ({absent[0]}, ...)"
    fold = table["fold"].to_numpy()
    if np.issubdtype(fold.dtype, np.number) and np.any(fold < 0):
        return None, "its folds are buffered leave-one-site-out, which only the run rebuilds"
    return fold_model_tuples(load_fold_models(saved), heldout_fold_rows(table)), None


def explain_saved_model(card, out_dir=None, *, fresh=False, quiet=False, log=None, warn=None):
    """Explain the model of a model card into ``out_dir``.

    Parameters
    ----------
    card : path-like
        ``models/NAME/LEARNER.card.json``.
    out_dir : path-like, optional
        Default :func:`default_explain_dir`: ``explain_LEARNER`` in the card's run folder.
    fresh : bool, default False
        Replace an existing ``out_dir``; otherwise it is refused before any work.
    log, warn : callable, optional
        Receive step lines and warning lines.

    Returns
    -------
    ExplainResult

    Notes
    -----
    The training table is the card's ``training_table`` (hash checked); the
    settings are the ``[explain]`` section of the card's run (from its
    manifest), else :data:`EXPLAIN_DEFAULTS`; the seed is the card's. Held-out
    permutation importance uses the fold models saved beside the card
    (``LEARNER.fold<k>.skops``) on the table's fold column; without them it is
    skipped with one warning.
    """
    from mlsites.experiment._models import load_model
    from mlsites.explain._stage import explain_learners

    log = log or (lambda m: None)
    warn = warn or log
    saved = load_model(card)
    name = saved.card.get("name") or saved.card_path.name.removesuffix(".card.json")
    out_dir = Path(out_dir) if out_dir is not None else default_explain_dir(saved.card, saved.card_path)
    if out_dir.exists() and not fresh:
        raise OutputExistsError(f"{out_dir}: exists already; use --fresh to replace it or --out for another folder")
    table = _training_table(saved.card, saved.card_path)
    folds, reason = _fold_models(saved, table)
    if folds is None:
        warn(f"{name}: no held-out permutation importance: {reason}; it needs the fold models of the run that "
             "fitted this model (re-run the experiment to keep them beside the card)")
    settings = _run_settings(saved.card)
    seed = int((saved.card.get("settings") or {}).get("seed", 0))

    def emit(message):
        # the missing-fold warning is said once, above
        if folds is None and "no fold models" in message:
            return
        (warn if message.startswith("warning:") else log)(message.removeprefix("warning: "))

    return explain_learners({name: saved.estimator}, table, features=saved.card["features"],
                            categorical=saved.card.get("categorical") or (),
                            fold_models={name: folds} if folds is not None else None, out_dir=out_dir,
                            **settings, random_state=seed, overwrite=fresh, quiet=quiet, log=emit)
