"""The maps a run makes: which learners, and where their folders go."""

from __future__ import annotations

from pathlib import Path

from mlsites.errors import ConfigError

__all__ = ["learners_to_map", "map_run_models"]

#: The training-free learner a run maps beside the best one, for comparison.
BASELINE = "fuzzy"


def learners_to_map(option, ranking) -> list:
    """Learners to map, from the ``[maps] learners`` option and the ranking.

    Parameters
    ----------
    option : str or list of str
        "best_and_baseline" (the best learner and the fuzzy baseline, when it was
        run), "best", "all", "none", or learner names.
    ranking : sequence of str
        Learners of the run, best first.

    Returns
    -------
    list of str

    Examples
    --------
    >>> learners_to_map("best_and_baseline", ["logistic", "fuzzy", "mlp"])
    ['logistic', 'fuzzy']
    >>> learners_to_map("best", ["fuzzy", "mlp"])
    ['fuzzy']
    """
    ranking = list(ranking)
    if isinstance(option, list):
        unknown = [n for n in option if n not in ranking]
        if unknown:
            raise ConfigError(f"[maps] learners names {unknown}, not among the run's learners {ranking}")
        return list(dict.fromkeys(option))
    if option == "none":
        return []
    if option == "all":
        return ranking
    if option == "best":
        return ranking[:1]
    if option == "best_and_baseline":
        return list(dict.fromkeys(ranking[:1] + ([BASELINE] if BASELINE in ranking else [])))
    raise ConfigError(f"[maps] learners = {option!r}; expected best_and_baseline, best, all, none or a list of "
                      "learner names")


def map_run_models(option, ranking, model_dir, maps_dir, *, final_model_dir, training_table=None, n_jobs=1,
                   quiet=False, log=None):
    """Map the chosen learners of a run into ``maps_dir/LEARNER/``.

    Parameters
    ----------
    option : str or list of str
        The ``[maps] learners`` option (see :func:`learners_to_map`).
    ranking : sequence of str
        Learners, best first.
    model_dir : path-like
        Folder holding the model cards now (the run's staging folder).
    maps_dir : path-like
        Parent of the map folders (``runs/NAME/maps`` while staged).
    final_model_dir : path-like
        Where the model cards will live once the run is published; ``map.json``
        records that path.
    training_table : path-like, optional
        Where the sample table is now (the cards name its published place).
    n_jobs : int
    quiet : bool
    log : callable, optional

    Returns
    -------
    dict of str to dict
        Learner -> the ``map.json`` summary of its map.
    """
    from mlsites.mapping._map import map_model

    log = log or (lambda m: None)
    out = {}
    for learner in learners_to_map(option, ranking):
        card = Path(model_dir) / f"{learner}.card.json"
        result = map_model(card, Path(maps_dir) / learner, n_jobs=n_jobs, quiet=quiet, log=log,
                           card_label=str(Path(final_model_dir) / card.name), training_table=training_table)
        zones = ", ".join(f"{z['name']} {100 * z['area_share']:.1f} %" for z in result.summary["zones"])
        log(f"map {learner}: {result.summary['cells']['mapped']} cells, zones by area {zones}")
        out[learner] = result.summary
    return out
