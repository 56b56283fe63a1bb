"""Run a whole experiment: inputs, samples, spatial cross-validation, models, tables.

:func:`run_experiment` is the body of ``mlsites run``. Every output is built in a
staging folder beside its destination (:func:`mlsites._files.staged_folder`) and
renamed into place only when the run succeeded, so a failed run leaves nothing
half-written and an existing run is never replaced unless asked for (``fresh``). Derived terrain layers and the sample
table are cached under ``<runs_dir>/.cache`` by a hash of their inputs and
settings, so a second run only redoes what changed.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import functools
import json
import os
import re
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from mlsites import __version__
from mlsites._files import link_or_copy, staged_folder
from mlsites.errors import ConfigError, OutputExistsError
from mlsites.experiment._hashing import entry_digest, file_digest, input_hashes, settings_digest
from mlsites.experiment._stages import RunContext

__all__ = ["RunResult", "run_experiment", "sample_experiment", "check_input_layers", "check_learner_settings",
           "output_roots", "samples_key"]

#: An integer layer declared continuous with this many distinct codes or fewer (but
#: more than two, where both kinds give the same model) is taken for a class map.
MAX_CODES_CONTINUOUS = 32
#: Cells read (per side, decimated) to inspect an input layer's values.
_INSPECT_CELLS = 256
_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*$")
#: Sections of the experiment that change the sample table.
_SAMPLE_SECTIONS = ("study", "terrain", "sites", "sampling", "folds", "inputs", "distances")
#: Files copied from the sample folder to the top of the run folder.
_SAMPLE_REPORTS = ("dropped_records.csv", "sampling.json")


@dataclass(frozen=True)
class RunResult:
    """What :func:`run_experiment` produced.

    Attributes
    ----------
    name : str
        Run name (the experiment name unless another was given).
    run_dir : Path
        ``<runs_dir>/<name>``: manifest, tables, curves, log, samples.
    models_dir : Path
        ``<models_dir>/<name>``: ``<learner>.skops`` and ``<learner>.card.json``.
    summary : pandas.DataFrame
        The comparison table (``metrics_summary.csv``), best learner first.
    manifest : dict
        The content of ``manifest.json``.
    """

    name: str
    run_dir: Path
    models_dir: Path
    summary: object
    manifest: dict


class _Log:
    """Collects stage lines for ``run.log`` and passes them on to ``echo``."""

    def __init__(self, echo=None):
        self.lines: list[str] = []
        self.echo = echo
        self.stages: dict[str, float] = {}

    def __call__(self, message: str):
        for line in str(message).splitlines():
            self.lines.append(line)
            if self.echo is not None:
                self.echo(line)

    @contextlib.contextmanager
    def stage(self, name: str):
        t0 = time.perf_counter()
        yield
        seconds = time.perf_counter() - t0
        self.stages[name] = round(seconds, 2)
        self(f"{name}: done in {seconds:.1f} s")


def samples_key(exp, hashes=None) -> str:
    """Hash of everything the sample table depends on (settings, file bytes, version)."""
    hashes = input_hashes(exp) if hashes is None else hashes
    return settings_digest({"settings": {s: exp[s] for s in _SAMPLE_SECTIONS},
                            "files": {k: entry_digest(v) for k, v in hashes.items()},
                            "version": __version__})[:16]


# ---------------------------------------------------------------- input checks


def _crs_label(crs) -> str:
    if crs is None:
        return "no CRS"
    epsg = crs.to_epsg()
    return f"EPSG:{epsg}" if epsg else crs.to_string()[:60]


def check_input_layers(exp, grid, log=None) -> dict:
    """Check the ``[inputs]`` layers against the study grid and their declared kind.

    Parameters
    ----------
    exp : Experiment
    grid : GridSpec
        The study grid (the DEM's).
    log : callable, optional
        Receives one line per layer that will be aligned onto the grid.

    Returns
    -------
    dict of str to str
        Layer name -> "on grid" or "aligned".

    Raises
    ------
    ConfigError
        A band the raster does not have, a layer declared continuous that looks
        categorical, or the reverse.

    Notes
    -----
    A layer on another CRS, resolution or extent is aligned onto the study grid
    while it is read (bilinear for continuous layers, nearest for categorical
    ones); this is said in the log. The kind check reads the band decimated to at
    most 256 x 256 cells: a layer declared continuous is taken for a class map
    when its metadata names classes (``class_<code>`` tags) or when it is stored
    as integers with 3 to 32 distinct codes (two codes behave the same either
    way). A layer declared categorical must hold whole numbers.
    """
    from rasterio.enums import Resampling

    from mlsites.grid import open_raster

    log = log or (lambda m: None)
    status = {}
    for name, spec in exp["inputs"].items():
        path, kind, band = spec["path"], spec["kind"], spec.get("band", 1)
        with open_raster(path) as src:
            aligned = not grid.matches(src.crs, src.transform, (src.height, src.width))
            if aligned and src.crs is not None:
                how = "nearest" if kind == "categorical" else "bilinear"
                log(f"aligned {name} from {_crs_label(src.crs)}, {abs(src.res[0]):g} x {abs(src.res[1]):g} "
                    f"cells onto the study grid ({how})")
            status[name] = "aligned" if aligned else "on grid"
            if band > src.count:
                raise ConfigError(f"{exp.where(f'inputs.{name}.band')}: [inputs.{name}] band = {band}, but "
                                  f"{path} has {src.count} band(s); give a band from 1 to {src.count}")
            shape = (min(src.height, _INSPECT_CELLS), min(src.width, _INSPECT_CELLS))
            values = src.read(band, out_shape=shape, resampling=Resampling.nearest, masked=True)
            dtype = np.dtype(src.dtypes[band - 1])
            tags = src.tags(band) | src.tags()
        values = np.asarray(values.compressed(), dtype=np.float64)
        values = values[np.isfinite(values)]
        codes = np.unique(values)
        class_tags = sorted(k for k in tags if k.startswith("class_"))
        where = f"{exp.where(f'inputs.{name}.kind')}: [inputs.{name}]"
        if kind == "continuous":
            reason = None
            if class_tags:
                reason = f"its metadata names classes ({', '.join(class_tags[:3])}{', ...' if len(class_tags) > 3 else ''})"
            elif np.issubdtype(dtype, np.integer) and 2 < codes.size <= MAX_CODES_CONTINUOUS:
                reason = f"it holds {codes.size} distinct integer codes ({', '.join(f'{c:g}' for c in codes[:6])}{', ...' if codes.size > 6 else ''})"
            if reason:
                raise ConfigError(
                    f"{where} kind = \"continuous\" but {Path(path).name} looks categorical: {reason}; "
                    f"set kind = \"categorical\", or store measured values as floating point (for example "
                    f"gdal_translate -ot Float32) if they really are continuous"
                )
        elif codes.size and not np.all(codes == np.round(codes)):
            sample = codes[codes != np.round(codes)][:3]
            raise ConfigError(
                f"{where} kind = \"categorical\" but {Path(path).name} holds non-integer values "
                f"({', '.join(f'{v:g}' for v in sample)}); class codes must be whole numbers: "
                f"set kind = \"continuous\" or give the class raster"
            )
    return status


# ---------------------------------------------------------------- samples


def _cached_samples(exp, cache_dir: Path, grid, *, fresh, quiet, log, hashes):
    """The experiment's sample set from the cache, built there unless cached.

    Returns ``(samples, key, cached)``. A table just built is passed on in memory
    (it equals its parquet file, see :func:`prepare_samples`); a cached one is
    read from the cache folder. Either way ``samples.folder`` is the cache folder.
    """
    from mlsites.experiment._samples import prepare_samples

    key = samples_key(exp, hashes)
    folder = cache_dir / f"samples-{key}"
    if (folder / "samples.parquet").exists() and not fresh:
        log(f"sample table: cached in {folder.name}")
        return _load_sample_set(folder), key, True
    samples = prepare_samples(exp, folder, grid=grid, cache_dir=cache_dir, fresh=True, quiet=quiet, log=log,
                              hashes=hashes)
    return samples, key, False


def _load_sample_set(folder: Path):
    import pandas as pd

    from mlsites.experiment._samples import SampleSet

    summary = json.loads((folder / "sampling.json").read_text())
    table = pd.read_parquet(folder / "samples.parquet")
    return SampleSet(table=table, features=list(summary["features"]), categorical=list(summary["categorical"]),
                     folder=folder, summary=summary)


def _sample_files(folder: Path):
    """The files of a sample folder (not staging leftovers)."""
    return sorted(p for p in folder.iterdir() if p.is_file() and not p.name.startswith("."))


def output_roots(exp) -> tuple[Path, Path]:
    """``runs_dir`` and ``models_dir`` of an experiment, absolute.

    Paths written in the file are already relative to it; the defaults ("runs",
    "models") are taken relative to the experiment file's folder as well, so a
    run's place does not depend on the working directory.
    """
    out = exp["outputs"]
    return tuple((exp.path.parent / out[k]).resolve() for k in ("runs_dir", "models_dir"))


def _check_name(name: str, exp) -> str:
    if not _NAME_RE.match(name or ""):
        raise ConfigError(f"{exp.path}: run name {name!r} cannot be a folder name; use letters, digits, "
                          f"'_', '-' and '.' (not starting with '.'), e.g. --name {exp.name}_2")
    return name


def sample_experiment(path, *, out_dir=None, fresh=False, quiet=False, log=None):
    """Build (or reuse from the cache) the sample table of an experiment file.

    Parameters
    ----------
    path : path-like or Experiment
        Experiment TOML file, or an experiment already built (for example from
        command-line flags with :func:`experiment_from_flags`).
    out_dir : path-like, optional
        Folder for the sample files (default ``<runs_dir>/<name>/samples``).
    fresh : bool, default False
        Ignore the cache and replace existing sample files in ``out_dir``.
    quiet : bool, default False
        No progress bars.
    log : callable, optional
        Receives the stage lines.

    Returns
    -------
    SampleSet
        With ``folder`` = ``out_dir``.

    Raises
    ------
    OutputExistsError
        ``out_dir`` holds sample files and ``fresh`` is false.
    ConfigError, InputError, InsufficientDataError, ...
        Before anything is written to ``out_dir``.
    """
    from dataclasses import replace

    from mlsites.experiment._config import Experiment, load_experiment
    from mlsites.experiment._samples import SAMPLE_FILES
    from mlsites.grid import read_grid

    log = _Log(log)
    exp = path if isinstance(path, Experiment) else load_experiment(path)
    runs_dir, _ = output_roots(exp)
    out_dir = Path(out_dir) if out_dir is not None else runs_dir / exp.name / "samples"
    if (out_dir / "samples.parquet").exists() and not fresh:
        raise OutputExistsError(f"{out_dir}: sample files exist already; use --fresh to replace them "
                                "or --out for another folder")
    grid = read_grid(exp["study"]["dem"])
    check_input_layers(exp, grid, log)
    cache_dir = runs_dir / ".cache"
    with log.stage("samples"):
        hashes = input_hashes(exp, memo_dir=cache_dir)
        samples, _, _ = _cached_samples(exp, cache_dir, grid, fresh=fresh, quiet=quiet, log=log, hashes=hashes)
    with staged_folder(out_dir, files=SAMPLE_FILES) as staging:
        for p in _sample_files(samples.folder):
            link_or_copy(p, staging / p.name)
    return replace(samples, folder=out_dir)


# ---------------------------------------------------------------- the run


#: Learner settings the run sets itself, and where the user sets them instead.
_RUN_SET = {"random_state": "[study] seed", "n_jobs": "--jobs", "categorical_features": "the kind of each layer"}
#: Settings that only scale the work; a dry fit caps them so it stays instant.
_SIZE_KEYS = ("n_estimators", "max_iter")


def _learner_params(exp, name) -> dict:
    params = dict(exp["learners"]["settings"].get(name, {}))
    for key, value in params.items():
        if isinstance(value, list):  # TOML has no tuples (hidden_layer_sizes and the like)
            params[key] = tuple(value)
    return params


def _valid_settings(name) -> list[str]:
    """Setting names of a learner: its estimator's parameters and the preset's options."""
    import inspect

    from mlsites.learners import LEARNERS, make_learner

    model = make_learner(name).named_steps["model"]
    options = [p.name for p in inspect.signature(LEARNERS[name]).parameters.values()
               if p.kind is p.KEYWORD_ONLY]
    return sorted((set(model.get_params(deep=False)) | set(options)) - set(_RUN_SET))


def _dry_table(n_categorical):
    """24 invented rows (half sites) with two numeric layers and the categorical ones."""
    import pandas as pd

    rng = np.random.default_rng(0)
    columns = {"a": rng.random(24), "b": rng.random(24)}
    columns.update({f"c{i}": np.tile([1.0, 2.0, 3.0], 8) for i in range(n_categorical)})
    return pd.DataFrame(columns), np.r_[np.ones(12, dtype=int), np.zeros(12, dtype=int)]


def check_learner_settings(exp) -> None:
    """Check the names and values of every ``[learners.<name>]`` setting before any work.

    Names are checked against the learner's settings; values by scikit-learn's own
    parameter validation and then by a dry fit on 24 invented rows (with the
    iteration and tree counts capped, so it takes a moment), which also catches
    combinations that are only refused when fitting (a penalty the solver lacks).

    Raises
    ------
    ConfigError
        One line per problem, with file and line, in the words of the experiment
        file; the valid settings of a learner are listed once.
    """
    import warnings

    from mlsites.learners import fit_learner, make_learner

    if not exp["learners"]["use"]:
        raise ConfigError(f"{exp.where('learners.use')}: [learners] use is empty; name at least one learner")
    n_categorical = min(1, sum(spec["kind"] == "categorical" for spec in exp["inputs"].values())
                        + ("landform" in exp["terrain"]["layers"]))
    problems = []
    for name in exp["learners"]["use"]:
        params = _learner_params(exp, name)
        valid = _valid_settings(name)

        def bad(key, msg, name=name):
            problems.append(f"{exp.where(f'learners.{name}.{key}')}: [learners.{name}] {msg}")

        unknown = [k for k in params if k not in valid and k not in _RUN_SET]
        for key in [k for k in params if k in _RUN_SET]:
            bad(key, f"{key} is set by the run; use {_RUN_SET[key]} instead")
        for key in unknown:
            bad(key, f"unknown setting {key!r}")
        if unknown:
            problems[-1] += f"; settings of {name} are {', '.join(valid)}"
        if unknown or any(k in _RUN_SET for k in params):
            continue
        learner = make_learner(name, random_state=exp["study"]["seed"],
                               categorical_features=[f"c{i}" for i in range(n_categorical)], **params)
        model = learner.named_steps["model"]
        if hasattr(model, "_parameter_constraints"):
            try:
                model._validate_params()
            except ValueError as exc:  # sklearn's InvalidParameterError is a ValueError
                m = re.match(r"The '(\w+)' parameter of \w+ must be (.*)\. Got (.*) instead\.", str(exc))
                if m:
                    bad(m.group(1), f"{m.group(1)} = {params.get(m.group(1), m.group(3))!r} is not allowed: "
                                    f"it must be {m.group(2)}")
                else:
                    problems.append(f"{exp.where(f'learners.{name}')}: [learners.{name}] {str(exc).splitlines()[0]}")
                continue
        current = model.get_params(deep=False)
        model.set_params(**{k: min(current[k], 2) for k in _SIZE_KEYS if isinstance(current.get(k), int)})
        X, y = _dry_table(n_categorical)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                fit_learner(learner, X, y, sample_weight=np.ones(len(y)))
        except (ValueError, TypeError) as exc:
            problems.append(f"{exp.where(f'learners.{name}')}: [learners.{name}] these settings cannot be "
                            f"fitted: {str(exc).splitlines()[0]}")
    if problems:
        raise ConfigError("\n".join(problems) if len(problems) == 1 else
                          f"{len(problems)} problems in the learner settings:\n" + "\n".join(problems))


def _learner_factories(exp, categorical, seed, table):
    """One learner factory per learner in use (settings checked by :func:`check_learner_settings`).

    The random forest draws about two rows per site for each tree unless the
    experiment sets ``max_samples`` (:func:`mlsites.learners.balanced_draws_share`).
    """
    from mlsites.learners import balanced_draws_share, make_learner

    factories = {}
    for name in exp["learners"]["use"]:
        params = _learner_params(exp, name)
        if name == "random_forest" and "max_samples" not in params:
            n_sites = int(table.loc[table["label"] == 1, "site_id"].nunique())
            params["max_samples"] = balanced_draws_share(table["weight"].to_numpy(), n_sites)
        factories[name] = functools.partial(make_learner, name, random_state=seed,
                                            categorical_features=tuple(categorical), **params)
    return factories


#: Stages after the maps: (manifest name, module, function of a RunContext).
_AFTER_MAPS = (
    ("contributions", "mlsites.explain._in_run", "contributions_in_run"),
    ("periods", "mlsites.periods._in_run", "periods_in_run"),
    ("check", "mlsites.mapping._check", "check_in_run"),
    ("report", "mlsites.report._in_run", "report_in_run"),
)


def _later_stage(ctx, stage, module, func):
    """Run one later stage (see mlsites.experiment._stages); record what it returned."""
    import importlib

    run = getattr(importlib.import_module(module), func)
    t0 = time.perf_counter()
    out = run(ctx)
    if out is not None:
        ctx.results[stage] = out
        seconds = time.perf_counter() - t0
        ctx.log.stages[stage] = round(seconds, 2)
        ctx.log(f"{stage}: done in {seconds:.1f} s")


def _samples_only(run_dir: Path) -> bool:
    """True for a run folder holding only what ``mlsites sample`` wrote (no finished run)."""
    return run_dir.is_dir() and [p.name for p in run_dir.iterdir()] == ["samples"]


def _reserve(target: Path, fresh: bool, what: str, name: str):
    if target.exists() and not fresh and not (what == "output folder" and _samples_only(target)):
        raise OutputExistsError(
            f"{target}: the {what} of a run named {name!r} exists already; use --fresh to replace it "
            f"or --name NEW_NAME to keep it"
        )


@contextlib.contextmanager
def _convergence_notes(log, what):
    """Count non-convergence warnings of fits in this process into one log line.

    Other warnings are shown as usual. (Fits in worker processes warn there.)
    """
    import warnings

    from sklearn.exceptions import ConvergenceWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ConvergenceWarning)
        yield
    n = 0
    for w in caught:
        if issubclass(w.category, ConvergenceWarning):
            n += 1
        else:
            warnings.showwarning(w.message, w.category, w.filename, w.lineno)
    if n:
        log(f"{what}: {n} fit(s) stopped at their iteration limit before converging; raise max_iter "
            "(or tol) in the learner's [learners.<name>] table")


def _progress(total, desc, quiet):
    from tqdm.auto import tqdm

    return tqdm(total=total, desc=desc, unit="fit", disable=quiet, leave=False)


def _map_card_entries(exp, result, features, hashes, cache_dir, quiet, log) -> dict:
    """Per learner, the model-card entries a map needs: feature recipe and calibrated zones."""
    from mlsites.experiment._recipe import feature_recipe, zone_calibration
    from mlsites.experiment._samples import derive_layers

    layers = derive_layers(exp, cache_dir, quiet=quiet, hashes=hashes)
    recipe = feature_recipe(exp, layers, features, hashes, cache_folder=cache_dir)
    return {n: {**recipe, "zones": zone_calibration(result.zones, n)} for n in result.summary["learner"]}


def run_experiment(path, *, fresh=False, name=None, quiet=False, log=None, n_jobs=None) -> RunResult:
    """Run an experiment file end to end: samples, cross-validation, models, tables.

    Parameters
    ----------
    path : path-like
        Experiment TOML file (may ``extends`` a base file).
    fresh : bool, default False
        Replace an existing run of the same name and ignore every cache.
    name : str, optional
        Run name (default: ``[study] name`` or the file stem); outputs go to
        ``<runs_dir>/<name>`` and ``<models_dir>/<name>``.
    quiet : bool, default False
        No progress bars.
    log : callable, optional
        Receives each stage line as it happens (the CLI prints them); they are
        also written to ``run.log``.
    n_jobs : int, optional
        Parallel (learner, fold) fits; results do not depend on it. Default: the
        number of CPU cores, at most 4 (each worker holds a copy of the samples).

    Returns
    -------
    RunResult

    Raises
    ------
    OutputExistsError
        The run or model folder exists and ``fresh`` is false (nothing touched).
    ConfigError, InputError, InsufficientDataError, CRSError, ...
        Bad input; nothing is left behind (no run folder, no partial folder).

    Notes
    -----
    Run folder: ``manifest.json`` (resolved settings, input file hashes, library
    versions, seed, seconds per stage), ``metrics_by_fold.csv``,
    ``metrics_summary.csv``, ``zones.csv``, ``curves.csv``, ``capture_curves.png``,
    ``roc_curves.png``, ``dropped_records.csv``, ``sampling.json``, ``run.log`` and
    ``samples/`` (the sample table and folds every learner used). After
    cross-validation each learner is refitted on all samples and saved with
    :func:`save_model`, its fold models beside it and, in the card, what a map
    needs to rebuild its features and its calibrated zones; the learners chosen by
    ``[maps] learners`` are then mapped into ``maps/LEARNER/``
    (:func:`mlsites.mapping.map_model`). A table just built is used as it is in
    memory, which equals its parquet file, so a cached and a fresh run feed the
    learners identical data and give identical metrics files (tested).
    """
    import pandas as pd

    from mlsites.evaluation import cross_validate, write_crossval
    from mlsites.experiment._config import load_experiment
    from mlsites.experiment._models import library_versions, save_model
    from mlsites.grid import read_grid
    from mlsites.learners import fit_learner

    started = _dt.datetime.now(_dt.timezone.utc)
    if n_jobs is None:
        n_jobs = max(1, min(os.cpu_count() or 1, 4))
    log = _Log(log)
    t_start = time.perf_counter()
    exp = load_experiment(path)
    name = _check_name(name or exp.name, exp)
    runs_dir, models_root = output_roots(exp)
    run_dir, models_dir = runs_dir / name, models_root / name
    _reserve(run_dir, fresh, "output folder", name)
    _reserve(models_dir, fresh, "model folder", name)
    seed = exp["study"]["seed"]
    log(f"experiment {exp.name} ({exp.path.name}), run {name}, seed {seed}")
    if _samples_only(run_dir) and not fresh:
        log(f"{run_dir} holds only a samples/ folder from `mlsites sample`; the run replaces it")
    with log.stage("checks"):
        grid = read_grid(exp["study"]["dem"])
        check_input_layers(exp, grid, log)
        check_learner_settings(exp)
        from mlsites.periods._in_run import check_periods_in_run

        check_periods_in_run(exp)  # bad dates stop the run here, not at its periods stage
    cache_dir = runs_dir / ".cache"
    with staged_folder(run_dir) as staging, staged_folder(models_dir) as model_staging:
        with log.stage("samples"):
            hashes = input_hashes(exp, memo_dir=cache_dir)
            samples, key, cached = _cached_samples(exp, cache_dir, grid, fresh=fresh, quiet=quiet, log=log,
                                                   hashes=hashes)
            # The run keeps the files every learner used; cache files are never
            # changed in place (every writer renames a new file over the old), so
            # a hard link is as safe as a copy.
            (staging / "samples").mkdir()
            for p in _sample_files(samples.folder):
                link_or_copy(p, staging / "samples" / p.name)
            for fname in _SAMPLE_REPORTS:
                link_or_copy(samples.folder / fname, staging / fname)
            table, features, categorical = samples.table, samples.features, samples.categorical
            n_sites = int(table.loc[table["label"] == 1, "site_id"].nunique())
            log(f"samples: {int((table['label'] == 1).sum())} site cells of {n_sites} sites, "
                f"{int((table['label'] == 0).sum())} background cells, {len(features)} features")
        factories = _learner_factories(exp, categorical, seed, table)
        ev = exp["evaluation"]
        splitter = None
        if exp["folds"]["method"] == "buffered_leave_one_out":
            from mlsites.experiment._samples import buffered_splitter

            splitter = buffered_splitter(exp, table, grid)
        n_folds = splitter.get_n_splits() if splitter is not None else int(table["fold"].nunique())
        with log.stage("cross-validation"), _convergence_notes(log, "cross-validation"):
            with _progress(len(factories) * n_folds, "cross-validation", quiet) as bar:
                result = cross_validate(table, features=features, categorical=categorical, learners=factories,
                                        fold_column="fold", splitter=splitter, random_state=seed,
                                        zone_targets=ev["zone_targets"], top_area_shares=tuple(ev["top_area_shares"]),
                                        n_jobs=n_jobs, progress=bar)
            write_crossval(result, staging)
            folds = result.by_fold[(result.by_fold["fold"] != "all")
                                   & (result.by_fold["learner"] == result.by_fold["learner"].iloc[0])]
            if (folds["landscape"] == "within_buffer").any():
                n_land = folds["n_test_background"]
                log(f"landscape of each held-out site: the background within buffer_m = "
                    f"{exp['folds']['buffer_m']:g} m of it, never seen by its fold's model "
                    f"(median {n_land.median():.0f} cells, fewest {n_land.min()})")
            best = result.summary.iloc[0]
            log(f"best learner by mean fold AUC: {best['learner']} ({best['auc_mean']:.3f})")
        with log.stage("models"), _convergence_notes(log, "refit"):
            # what a map needs to rebuild the features (layer files, settings, zones)
            card_extras = _map_card_entries(exp, result, features, hashes, runs_dir / ".cache", quiet, log)
            data_hash = file_digest(staging / "samples" / "samples.parquet")
            X, y, w = table[features], table["label"].to_numpy(), table["weight"].to_numpy()
            rows = result.summary.set_index("learner")
            with _progress(len(factories), "refit on all samples", quiet) as bar:
                for lname, factory in factories.items():
                    t0 = time.perf_counter()
                    # one fit at a time here, so a learner may use every job (the forest's trees)
                    estimator = fit_learner(factory(n_jobs=n_jobs), X, y, sample_weight=w)
                    save_model(estimator, model_staging, lname, features=features, categorical=categorical,
                               grid=grid, training_data_sha256=data_hash,
                               settings={"learner": lname, "seed": seed,
                                         "params": exp["learners"]["settings"].get(lname, {})},
                               metrics=rows.loc[lname].to_dict() if lname in rows.index else {},
                               extra={"experiment": exp.name, "run": name, "run_dir": str(run_dir),
                                      "n_samples": int(len(table)), "n_sites": n_sites, **card_extras[lname],
                                      # a check on later-found sites gives them the same footprint
                                      "site_buffer_m": float(exp["sampling"]["site_buffer_m"]),
                                      # the table the area of applicability of a map is fitted on
                                      "training_table": {"path": str(run_dir / "samples" / "samples.parquet"),
                                                         "sha256": data_hash}},
                               fold_estimators=result.fold_models.get(lname, ()))
                    bar.update(1)
                    log(f"model {lname}: fitted on all {len(table)} samples in {time.perf_counter() - t0:.1f} s")
        ctx = RunContext(exp=exp, name=name, run_dir=run_dir, models_dir=models_dir, staging=staging,
                         model_staging=model_staging, table=table, features=features, categorical=categorical,
                         grid=grid, crossval=result, factories=factories, splitter=splitter, seed=seed,
                         n_jobs=n_jobs, quiet=quiet, log=log)
        _later_stage(ctx, "explain", "mlsites.explain._in_run", "explain_in_run")
        with log.stage("maps"):
            from mlsites.mapping._run_maps import map_run_models

            ctx.maps = map_run_models(exp["maps"]["learners"], list(result.summary["learner"]), model_staging,
                                      staging / "maps", final_model_dir=models_dir,
                                      training_table=staging / "samples" / "samples.parquet", n_jobs=n_jobs,
                                      quiet=quiet, log=log)
        for stage, module, func in _AFTER_MAPS:
            _later_stage(ctx, stage, module, func)
        log(f"run {name}: done in {time.perf_counter() - t_start:.1f} s")
        manifest = {
            "run": name, "experiment": exp.name, "experiment_file": str(exp.path),
            "sources": [str(p) for p in exp.sources], "settings": exp.settings,
            "input_files": hashes, "samples": {"key": key, "cached": cached, "sha256": data_hash,
                                               "features": features, "categorical": categorical},
            "seed": seed, "versions": library_versions(), "seconds": dict(log.stages),
            "started_utc": started.isoformat(timespec="seconds"),
            "finished_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
            "run_dir": str(run_dir), "models_dir": str(models_dir), "learners": list(factories),
            "maps": sorted(ctx.maps), "stages": ctx.results,
        }
        (staging / "manifest.json").write_text(json.dumps(manifest, indent=2, default=str) + "\n")
        (staging / "run.log").write_text("\n".join(log.lines) + "\n")
        # A run that appeared meanwhile (another process) is not replaced without fresh.
        _reserve(run_dir, fresh, "output folder", name)
        _reserve(models_dir, fresh, "model folder", name)
    summary = pd.read_csv(run_dir / "metrics_summary.csv")
    return RunResult(name=name, run_dir=run_dir, models_dir=models_dir, summary=summary, manifest=manifest)
