"""The stages a run calls after its models are fitted, and what they are handed.

:func:`mlsites.experiment.run_experiment` fits and saves the models, then calls,
in this order, each with one :class:`RunContext`:

1. ``mlsites.explain._in_run.explain_in_run`` (attributions, held-out importance;
   may record layer weights for the area of applicability in the model cards),
2. the maps (``[maps] learners``),
3. ``mlsites.explain._in_run.contributions_in_run`` (per-layer contribution maps),
4. ``mlsites.periods._in_run.periods_in_run`` (blocks, envelopes, period models),
5. ``mlsites.mapping._check.check_in_run`` (later-found sites),
6. ``mlsites.report._in_run.report_in_run`` (the HTML report).

Each writes into ``ctx.staging`` (the run folder being built; renamed into place
when the whole run succeeded) and returns a small JSON-ready dict for the
manifest, or None when it had nothing to do.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

__all__ = ["RunContext"]


@dataclass
class RunContext:
    """What a run hands its later stages.

    Attributes
    ----------
    exp : Experiment
        The validated experiment.
    name : str
        Run name.
    run_dir, models_dir : Path
        Where the run and its models will live once published.
    staging, model_staging : Path
        The folders being built now (write here, never to ``run_dir``).
    table : pandas.DataFrame
        The sample table every learner used (``staging/samples/samples.parquet``).
    features, categorical : list of str
        Feature columns, and the categorical ones among them.
    grid : GridSpec
        The study grid.
    crossval : CrossValResult
        Cross-validation of every learner, fold models included.
    factories : dict of str to callable
        Learner name -> zero-argument factory of a fresh estimator.
    splitter : object or None
        The splitter used instead of the fold column (buffered leave-one-out).
    seed, n_jobs : int
    quiet : bool
    log : callable
        Writes a line to the run log (and the console unless quiet).
    maps : dict of str to dict
        Learner -> ``map.json`` summary of the maps made (filled after the maps).
    results : dict of str to dict
        Stage name -> what each earlier stage returned.
    """

    exp: object
    name: str
    run_dir: Path
    models_dir: Path
    staging: Path
    model_staging: Path
    table: object
    features: list
    categorical: list
    grid: object
    crossval: object
    factories: dict
    splitter: object
    seed: int
    n_jobs: int
    quiet: bool
    log: object
    maps: dict = field(default_factory=dict)
    results: dict = field(default_factory=dict)

    @property
    def best(self) -> str:
        """The best learner by mean fold AUC."""
        return str(self.crossval.summary["learner"].iloc[0])

    def card_path(self, learner) -> Path:
        """The model card of a learner, as it is now (in ``model_staging``)."""
        return Path(self.model_staging) / f"{learner}.card.json"
