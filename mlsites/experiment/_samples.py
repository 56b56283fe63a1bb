"""Build the one sample table and the one fold assignment of an experiment.

Terrain layers are derived once and cached by a hash of the DEM and the terrain
settings; presences and background are drawn on the study grid, layer values read
at their cells, and folds assigned once. Every learner later loads the same
table and folds, so comparisons are fair by construction.
"""

from __future__ import annotations

import json
import re
import shutil
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from mlsites import __version__
from mlsites._files import staged_folder
from mlsites.errors import InputError, InsufficientDataError, OutputExistsError
from mlsites.experiment._hashing import entry_digest, input_hashes, settings_digest

__all__ = ["SampleSet", "derive_layers", "cached_terrain", "terrain_features", "terrain_settings",
           "prepare_samples", "buffered_splitter", "check_redundant_features", "FEATURE_EXCLUDED"]

#: Terrain outputs that are not used as model features (codes, circular or redundant).
FEATURE_EXCLUDED = {"aspect", "flow_direction", "filled_dem", "streams", "flow_accumulation"}
#: Terrain outputs that are affine copies of another layer over the study area
#: (``tpi_<R>m_std`` = (``tpi_<R>m`` - mean) / sd): written as layers, not used as
#: features, since they would enter the learners twice.
_STANDARDISED = re.compile(r"^(tpi_.+m)_std$")
SAMPLE_COLUMNS = ["sample_id", "label", "weight", "site_id", "fold", "x", "y", "row", "col"]


@dataclass(frozen=True)
class SampleSet:
    """The sample table and where it was written.

    ``table`` has the columns of :data:`SAMPLE_COLUMNS` then one column per feature;
    ``features`` and ``categorical`` name the feature columns; ``folder`` holds
    ``samples.parquet``, ``folds.csv``, ``blocks.gpkg`` (block folds only),
    ``dropped_records.csv`` and ``sampling.json``.
    """

    table: pd.DataFrame
    features: list
    categorical: list
    folder: Path
    summary: dict


def terrain_settings(exp):
    """The :class:`~mlsites.terrain.TerrainSettings` of an experiment's ``[terrain]`` and ``[distances]``."""
    from mlsites.terrain import TerrainSettings

    t = exp["terrain"]
    return TerrainSettings(
        layers=tuple(t["layers"]),
        tpi_radii_m=tuple(float(r) for r in t["tpi_radii_m"]),
        landform_lookup_cells=t["landform_lookup_cells"],
        landform_flatness_deg=float(t["landform_flatness_deg"]),
        stream_threshold_km2=float(t["stream_threshold_km2"]),
        vectors=dict(exp["distances"]),
        stream_vector=t["stream_lines"],
    )


def cached_terrain(dem, settings, cache_dir, *, dem_sha256, vector_sha256, stream_sha256=None, fresh=False,
                   quiet=False, log=None) -> tuple[Path, dict]:
    """Terrain and distance layers of one DEM, computed once into a cache folder.

    Parameters
    ----------
    dem : path-like
    settings : TerrainSettings
    cache_dir : path-like
        Parent of the cache folders (``terrain-<key>``).
    dem_sha256, vector_sha256, stream_sha256 : str, dict of str to str, str or None
        Hashes of the DEM, of each distance vector layer and of the stream lines;
        with the settings and the version they make the folder's key.
    fresh : bool
        Recompute even when cached.

    Returns
    -------
    (Path, dict)
        The folder and its ``terrain.json`` summary.
    """
    from mlsites.terrain import compute_terrain

    key = {
        "dem": dem_sha256,
        "vectors": {n: vector_sha256[n] for n in settings.vectors},
        "stream_lines": stream_sha256 if settings.stream_vector else None,
        "settings": settings.__dict__, "version": __version__,
    }
    folder = Path(cache_dir) / f"terrain-{settings_digest(key)[:16]}"
    if fresh and folder.exists():
        shutil.rmtree(folder)
    if not (folder / "terrain.json").exists():
        compute_terrain(dem, folder, settings, overwrite=True, quiet=quiet, log=log)
    elif log:
        log(f"terrain layers: cached in {folder.name}")
    return folder, json.loads((folder / "terrain.json").read_text())


def terrain_features(folder, summary) -> dict:
    """Feature layers of a terrain cache folder: name -> (path, kind), excluded layers left out."""
    return {n: (Path(folder) / info["file"], "categorical" if n == "landform" else "continuous")
            for n, info in summary["layers"].items() if _is_feature(n, summary["layers"])}


def derive_layers(exp, cache_dir, *, fresh=False, quiet=False, log=None, hashes=None) -> dict:
    """Terrain and distance layers of an experiment, computed once and cached.

    Returns a dict layer name -> (path, kind). The cache folder's name is a hash of
    the DEM bytes, the vector files and the terrain settings, so a second run reuses
    it and any change recomputes it; ``fresh`` recomputes regardless. ``hashes``
    (from :func:`input_hashes`) saves hashing the inputs again.
    """
    settings = terrain_settings(exp)
    hashes = input_hashes(exp) if hashes is None else hashes
    folder, summary = cached_terrain(
        exp["study"]["dem"], settings, cache_dir, dem_sha256=entry_digest(hashes["study.dem"]),
        vector_sha256={n: entry_digest(hashes[f"distances.{n}"]) for n in exp["distances"]},
        stream_sha256=entry_digest(hashes["terrain.stream_lines"]) if settings.stream_vector else None,
        fresh=fresh, quiet=quiet, log=log)
    layers = terrain_features(folder, summary)
    for n, spec in exp["inputs"].items():
        layers[n] = (Path(spec["path"]), spec["kind"])
    return layers


def _is_feature(name, all_layers) -> bool:
    """Whether a terrain output enters the learners (not excluded, not a standardised copy)."""
    if name in FEATURE_EXCLUDED:
        return False
    copy_of = _STANDARDISED.match(name)
    return not (copy_of and copy_of.group(1) in all_layers)


def check_redundant_features(exp, layers, grid, log=None):
    """Refuse features that copy each other over the study area (|Spearman rho| > 0.99).

    ``layers`` maps name -> (path, kind), as from :func:`derive_layers`. The layers
    are read on a regular lattice of the study grid (:func:`redundant_layer_pairs`);
    categorical layers are not compared.

    Raises
    ------
    InputError
        Naming both layers of every such pair, rho and what to do.
    """
    from mlsites.sampling import redundant_layer_pairs

    pairs = redundant_layer_pairs({n: p for n, (p, _) in layers.items()}, grid,
                                  kinds={n: k for n, (_, k) in layers.items()})
    if log:
        log(f"feature layers compared on a lattice of {pairs.attrs['n_cells']} study-area cells (one in "
            f"{pairs.attrs['step']} along rows and columns): {len(pairs)} pair(s) with |Spearman rho| > 0.99")
    if len(pairs):
        found = "; ".join(f"{r.first} and {r.second} (Spearman rho = {r.spearman:.4f})"
                          for r in pairs.itertuples())
        raise InputError(
            f"{exp.path}: feature layers copy each other over the study area: {found}, on a lattice of "
            f"{pairs.attrs['n_cells']} cells; |rho| above 0.99 makes the pair collinear for logistic "
            "regression and counts it twice in the fuzzy baseline. Remove one layer of each pair from "
            "[terrain] layers, [inputs] or [distances]"
        )


def buffered_splitter(exp, table, grid):
    """The buffered leave-one-site-out splitter of an experiment's sample table.

    Its training sets depend on distances, not on a fold column, so the sample
    table records only which site each row belongs to and every user of the folds
    (cross-validation included) builds this splitter.
    """
    from mlsites.folds import BufferedLeaveOneSiteOut
    from mlsites.sampling._sites import metres_to_crs_units

    site = np.where(table["label"].to_numpy() == 1, table["site_id"].to_numpy(), None)
    buffer = metres_to_crs_units(grid, exp["folds"]["buffer_m"], "folds.buffer_m")
    return BufferedLeaveOneSiteOut(table["x"].to_numpy(), table["y"].to_numpy(), site, buffer=buffer)


def _assign_folds(exp, table, features, categorical, grid, rng_seed, log):
    from mlsites.folds import EnvironmentalFolds, RandomFolds, SpatialBlockFolds, suggest_block_size
    from mlsites.sampling._sites import metres_to_crs_units

    f = exp["folds"]
    method, k = f["method"], f["n_splits"]
    site = np.where(table["label"].to_numpy() == 1, table["site_id"].to_numpy(), None)
    x, y = table["x"].to_numpy(), table["y"].to_numpy()
    info: dict = {"method": method, "n_splits": k}
    blocks = None
    if method in ("square_blocks", "hexagon_blocks"):
        # Sample coordinates are in grid CRS units; block sizes are given in metres.
        per_metre = metres_to_crs_units(grid, 1.0, "folds.block_size_m")
        size = f["block_size_m"]
        if size is None:
            bg = table["label"].to_numpy() == 0
            cont = [c for c in features if c not in categorical]
            sug = suggest_block_size(x[bg], y[bg], {c: table.loc[bg, c].to_numpy() for c in cont},
                                     random_state=rng_seed)
            size = float(sug.block_size) / per_metre
            for c in ("range_param_m", "practical_range_m"):
                sug.table[c] = sug.table[c] / per_metre
            info["variogram"] = sug.table.to_dict(orient="records")
            if log:
                log("fitted variogram range per layer:")
                for row in sug.table.itertuples():
                    log(f"  {row.layer}: {row.model}, practical range {row.practical_range_m:.0f} m"
                        + ("" if row.resolved else " (not resolved, left out)"))
                log(f"block size from predictor variograms: {size:.0f} m ({sug.rule})")
        splitter = SpatialBlockFolds(x, y, site_id=site, block_size=size * per_metre, n_splits=k,
                                     kind="square" if method == "square_blocks" else "hexagon",
                                     origin=(grid.bounds[0], grid.bounds[1]), random_state=rng_seed)
        assignment = splitter.assign(crs=grid.crs)
        fold, blocks = assignment.fold, assignment.blocks
        info["block_size_m"] = size
    elif method == "buffered_leave_one_out":
        fold = buffered_splitter(exp, table, grid).fold_array()
        info["buffer_m"] = f["buffer_m"]
    elif method == "environmental":
        cont = [c for c in features if c not in categorical]
        fold = EnvironmentalFolds(k, random_state=rng_seed).fold_array(
            table[cont].to_numpy(), table["label"].to_numpy(), groups=site)
    else:
        fold = RandomFolds(k, random_state=rng_seed).fold_array(
            table[features].to_numpy(), table["label"].to_numpy(), groups=site)
    return np.asarray(fold, dtype=np.int64), blocks, info


def _sites_outside_survey(pres, sa, grid, log):
    """Count the sites none of whose cells is surveyed (``survey_mode = "inside"``); drop them if asked.

    Returns the presence cells (without the dropped sites) and the dropped site ids.
    """
    import warnings

    from mlsites.errors import DataQualityWarning
    from mlsites.sampling import in_survey

    if not sa["survey_areas"] or sa["survey_mode"] != "inside":
        return pres, []
    inside = pd.Series(in_survey(pres["x"].to_numpy(), pres["y"].to_numpy(), grid, sa["survey_areas"]))
    per_site = inside.groupby(pres["site_id"].to_numpy(), sort=False).any()
    outside = [str(sid) for sid in per_site.index[~per_site.to_numpy()]]
    if not outside:
        return pres, []
    shown = ", ".join(outside[:5]) + (", ..." if len(outside) > 5 else "")
    msg = (f"{len(outside)} of {len(per_site)} sites lie outside the survey areas ({shown}): with "
           f"survey_mode = \"inside\" no background is drawn where they are, so the model cannot compare "
           f"them with their surroundings")
    if sa["drop_unsurveyed_sites"]:
        msg += "; dropped (drop_unsurveyed_sites = true) and listed in dropped_records.csv"
        pres = pres[~pres["site_id"].isin(outside)].reset_index(drop=True)
    else:
        msg += "; kept. Set drop_unsurveyed_sites = true in [sampling] to leave them out"
        outside = []
    warnings.warn(msg, DataQualityWarning, stacklevel=3)
    log(msg)
    return pres, outside


def prepare_samples(exp, out_dir, *, grid=None, cache_dir=None, fresh=False, quiet=False, log=None,
                    hashes=None) -> SampleSet:
    """Build and write the sample table and folds of an experiment.

    Parameters
    ----------
    exp : Experiment
    out_dir : path-like
        Folder for the sample files; must not hold them already unless ``fresh``.
    grid : GridSpec, optional
        The study grid, when the caller has read it from the DEM already.
    cache_dir : path-like, optional
        Where derived terrain layers are cached (default ``out_dir/../cache``).
    fresh : bool
        Recompute cached layers and replace existing sample files.
    hashes : dict, optional
        Input file hashes from :func:`input_hashes`, when the caller has them.

    Returns
    -------
    SampleSet
        The table in memory, equal to what was written to ``samples.parquet``.

    Notes
    -----
    Weights come from :func:`mlsites.sampling.sample_weights`: the cells of a site
    share equal parts of one site's weight (each site counts once), all background
    together weighs as much as all sites (METHODS.md §7), and the weights are scaled
    to average 1, so learner settings mean the same whatever the study size. Samples whose cells lack a value in some layer (edges
    of neighbourhood layers, holes in an input raster) are removed and counted by
    layer; a site that loses all its cells is listed in ``dropped_records.csv``
    with the reason, and the weights of partly affected sites are renormalised.
    """
    from mlsites.grid import read_grid
    from mlsites.sampling import (
        check_n_splits,
        extract_values,
        presence_cells,
        read_sites,
        read_valid_mask,
        sample_background,
        sample_weights,
    )

    log = log or (lambda m: None)
    out_dir = Path(out_dir)
    if (out_dir / "samples.parquet").exists() and not fresh:
        raise OutputExistsError(f"{out_dir}: sample files exist already; use --fresh or another folder")
    seed = exp["study"]["seed"]
    t0 = time.perf_counter()
    dem = exp["study"]["dem"]
    grid = read_grid(dem) if grid is None else grid
    layers = derive_layers(exp, cache_dir or out_dir.parent / "cache", fresh=fresh, quiet=quiet, log=log,
                           hashes=hashes)
    check_redundant_features(exp, layers, grid, log)
    valid = read_valid_mask(dem, grid)
    s = exp["sites"]
    if not s["path"]:
        raise InputError(f"{exp.path}: [sites] path is missing; give the site records file")
    records = read_sites(s["path"], grid, id_field=s["id_field"], x_field=s["x_field"], y_field=s["y_field"],
                         crs=s["crs"], start_field=s["start_field"], end_field=s["end_field"],
                         kind_field=s["kind_field"], certainty_field=s["certainty_field"], layer=s["layer"],
                         valid_mask=valid)
    log(records.summary())
    records.check_n_splits(exp["folds"]["n_splits"])
    sa = exp["sampling"]
    pres = presence_cells(records, grid, buffer_m=sa["site_buffer_m"], valid_mask=valid,
                          one_cell_per_site=sa["one_cell_per_site"], random_state=seed)
    pres, unsurveyed = _sites_outside_survey(pres, sa, grid, log)
    bg = sample_background(grid, n=None if sa["background_fraction"] else sa["background_count"],
                           fraction=sa["background_fraction"], valid_mask=valid, exclude_sites=records,
                           exclusion_m=sa["exclusion_m"], survey=sa["survey_areas"],
                           survey_mode=sa["survey_mode"], effort_field=sa["effort_field"], random_state=seed)
    del valid
    if sa["exclusion_m"] > 0:
        log(f"exclusion_m = {sa['exclusion_m']:g} m: no background within that distance of a site, so the "
            "background are pseudo-absences (not what was available to be found), and each fold's "
            "held-out landscape lacks the cells near sites; set exclusion_m = 0 for presence-background")
    table = pd.concat([pres.assign(label=1), bg.assign(label=0, site_id="")], ignore_index=True)
    names = list(layers)
    values = extract_values({n: p for n, (p, _) in layers.items()}, table["row"].to_numpy(),
                            table["col"].to_numpy(), grid, kinds={n: k for n, (_, k) in layers.items()},
                            bands={n: spec["band"] for n, spec in exp["inputs"].items()})
    table = pd.concat([table, values], axis=1)
    dropped_rows = [{"source_row": r, "site_id": i, "reason": why}
                    for r, i, why in zip(records.dropped["source_row"], records.dropped["site_id"],
                                         records.dropped["reason"])]
    dropped_rows += [{"source_row": None, "site_id": d["site_id"], "reason": d["reason"]}
                     for d in pres.attrs.get("dropped", [])]
    source_row = dict(zip(records.sites["site_id"], records.sites["source_row"]))
    dropped_rows += [{"source_row": source_row.get(sid), "site_id": sid,
                      "reason": "outside the survey areas (drop_unsurveyed_sites = true)"} for sid in unsurveyed]
    missing = table[names].isna()
    counts = {"presence_cells_missing_values": int(missing.any(axis=1)[table["label"] == 1].sum()),
              "background_cells_missing_values": int(missing.any(axis=1)[table["label"] == 0].sum()),
              "missing_by_layer": {n: int(missing[n].sum()) for n in names if missing[n].any()}}
    before = set(table.loc[table["label"] == 1, "site_id"])
    table = table[~missing.any(axis=1)].reset_index(drop=True)
    after = set(table.loc[table["label"] == 1, "site_id"])
    for sid in sorted(before - after):
        dropped_rows.append({"source_row": None, "site_id": sid, "reason": "no cell with values in every layer"})
    if counts["presence_cells_missing_values"] or counts["background_cells_missing_values"]:
        log(f"removed {counts['presence_cells_missing_values']} site cells and "
            f"{counts['background_cells_missing_values']} background cells lacking a layer value "
            f"({', '.join(f'{k}: {v}' for k, v in counts['missing_by_layer'].items())})")
    check_n_splits(len(after), exp["folds"]["n_splits"], source=str(s["path"]))
    pmask = table["label"] == 1
    n_bg = int((~pmask).sum())
    if n_bg == 0:
        raise InsufficientDataError("no background cell has values in every layer; check the input layers")
    table["weight"] = sample_weights(table["label"].to_numpy(), table["site_id"].to_numpy())
    categorical = [n for n, (_, k) in layers.items() if k == "categorical"]
    fold, blocks, fold_info = _assign_folds(exp, table, names, categorical, grid, seed, log)
    table["fold"] = fold
    table.insert(0, "sample_id", np.arange(len(table), dtype=np.int64))
    table = table[SAMPLE_COLUMNS + names]
    summary = {
        "software": f"mlsites {__version__}", "seed": seed,
        "n_sites_read": records.n_read, "n_sites_used": len(after),
        "n_presence_cells": int(pmask.sum()), "n_background_cells": n_bg,
        "removed": counts, "folds": fold_info, "features": names, "categorical": categorical,
        "fold_table": table.groupby("fold").agg(n_samples=("label", "size"), n_presence_cells=("label", "sum"),
                                                n_sites=("site_id", lambda v: v[v != ""].nunique()))
                           .reset_index().to_dict(orient="records"),
        "seconds": round(time.perf_counter() - t0, 2),
    }
    _write_outputs(out_dir, table, blocks, pd.DataFrame(dropped_rows, columns=["source_row", "site_id", "reason"]),
                   summary)
    return SampleSet(table=table, features=names, categorical=categorical, folder=out_dir, summary=summary)


def _write_outputs(out_dir: Path, table, blocks, dropped, summary):
    from mlsites.folds import write_folds

    with staged_folder(out_dir, files=SAMPLE_FILES) as staging:
        if (table["fold"] >= 0).all():
            write_folds(staging, table["sample_id"], table["fold"], blocks, meta=summary["folds"])
        else:
            # Buffered leave-one-site-out: background is in no test fold (-1); the
            # splitter, not this file, defines the training sets.
            table[["sample_id", "fold"]].to_csv(staging / "folds.csv", index=False)
        dropped.to_csv(staging / "dropped_records.csv", index=False)
        (staging / "sampling.json").write_text(json.dumps(summary, indent=2, default=str))
        table.to_parquet(staging / "samples.parquet", index=False)


#: Files a sample folder may hold; blocks and fold metadata only for block folds.
#: The table comes last: a folder with ``samples.parquet`` is complete.
SAMPLE_FILES = ("folds.csv", "blocks.gpkg", "folds_meta.json", "dropped_records.csv", "sampling.json",
                "samples.parquet")
