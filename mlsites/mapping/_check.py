"""Checks of a saved model on sites found after it was made: the body of ``mlsites check``.

:func:`check_model` reads the new site records onto the grid of a map of the
model (the run's map, a map folder given, or a map made for the check), turns
them into cells as the training sites were (same site buffer, each site weighing
1 in all), takes each cell's score, zone and applicability from the map, and
compares the sites with the whole mapped landscape
(:func:`mlsites.evaluation.new_site_check`). :func:`check_in_run` does the same
for the maps of a run when the experiment has a ``[check]`` section.
"""

from __future__ import annotations

import contextlib
import json
import tempfile
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from mlsites._files import staged_folder
from mlsites.errors import DataQualityWarning, InputError, OutputExistsError

__all__ = ["CheckResult", "check_model", "check_in_run", "CHECK_FILES", "MAX_LANDSCAPE_CELLS"]

#: Files of a check folder; ``check.json`` comes last (a folder with it is complete).
CHECK_FILES = ("check.csv", "check_sites.csv", "dropped_sites.csv", "check.json")
#: Mapped cells up to which the landscape of AUC and Boyce is every mapped cell;
#: above it, this many cells drawn at random (seeded) stand for it.
MAX_LANDSCAPE_CELLS = 4_000_000
#: Boyce index windows: 10 % of the score range, 100 positions (METHODS.md §5, common choices).
BOYCE_WINDOW, BOYCE_N_WINDOWS = 0.1, 100
#: Cells read per strip of the potential raster (bounds memory whatever the grid).
_STRIP_CELLS = 4_000_000
_NOTICE = ("A check says how the map does on these sites only. A few sites make a weak check; sites found by a "
           "survey that followed the map cannot test it; a map never replaces field survey, nor the heritage "
           "law and licensed practice of the place.")


@dataclass(frozen=True)
class CheckResult:
    """What :func:`check_model` found (and wrote, when given a folder).

    Attributes
    ----------
    out_dir : Path or None
        The folder written, or None.
    table : pandas.DataFrame
        ``check.csv``: the table of :func:`mlsites.evaluation.new_site_check`, one
        row per zone from the top down and a row ``all``.
    sites : pandas.DataFrame
        ``check_sites.csv``: one row per site used (ids, no coordinates unless
        asked).
    dropped : pandas.DataFrame
        ``dropped_sites.csv``: ``source_row``, ``site_id``, ``reason``.
    summary : dict
        The content of ``check.json``.
    """

    out_dir: Path | None
    table: pd.DataFrame
    sites: pd.DataFrame
    dropped: pd.DataFrame
    summary: dict


# ------------------------------------------------------------------ the map used


def _read_map_json(folder: Path) -> dict:
    path = folder / "map.json"
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"{path}: not a readable map summary ({exc}); map the model card again") from None


def _map_of_card(folder: Path, card_sha: str, card_path: Path):
    """``(map.json summary, None)`` if ``folder`` holds a map of this card, else ``(None, why not)``."""
    if not (folder / "map.json").is_file():
        return None, f"no map at {folder} (no map.json)"
    summary = _read_map_json(folder)
    made_from = (summary.get("model_card") or {}).get("sha256") or ""
    if made_from != card_sha:
        return None, (f"{folder / 'map.json'} was made from another model card (SHA-256 {made_from[:16] or 'none'}..., "
                      f"{card_path.name} has {card_sha[:16]}...)")
    missing = [f for f in ("potential.tif", "zones.tif") if not (folder / f).is_file()]
    if missing:
        return None, f"{folder} lacks {', '.join(missing)} (an incomplete map folder)"
    return summary, None


def _run_map_folder(card: dict):
    """``<run_dir>/maps/<learner>`` of the run that saved the card, or None."""
    run_dir = card.get("run_dir")
    if not run_dir and (card.get("training_table") or {}).get("path"):
        # cards written before run_dir was recorded: the table is <run_dir>/samples/samples.parquet
        run_dir = Path(card["training_table"]["path"]).parent.parent
    return Path(run_dir) / "maps" / str(card["name"]) if run_dir else None


# ------------------------------------------------------------------ cells and landscape


def _potential_lookup(potential: Path, grid):
    """``f(rows, cols) -> bool``: True where the map has a potential (the mapped area)."""
    from mlsites.sampling import extract_values

    def lookup(rows, cols):
        values = extract_values({"potential": potential}, rows, cols, grid)["potential"].to_numpy()
        return np.isfinite(values)

    return lookup


def _landscape(potential: Path, grid, n_mapped: int, max_cells: int, random_state):
    """Potential of the landscape for AUC and Boyce: every mapped cell, or a seeded sample.

    Returns ``(values, info)``. The raster is read in strips; with more than
    ``max_cells`` mapped cells, ``max_cells`` of them are drawn uniformly with
    replacement by their rank in row-major order, so the draw depends on the seed
    and the map only, never on the strip size.
    """
    from mlsites.grid import AlignedRaster, iter_windows
    from mlsites.sampling._sites import resolve_rng

    draws = None
    if n_mapped > max_cells:
        draws = np.sort(resolve_rng(random_state).integers(0, n_mapped, size=max_cells))
    parts, seen, lo, hi = [], 0, np.inf, -np.inf
    with AlignedRaster(potential, grid) as src:
        for w in iter_windows(grid, block_rows=max(1, min(grid.height, _STRIP_CELLS // grid.width))):
            v = src.read(w.core).ravel()
            v = v[~np.isnan(v)]
            if v.size:
                lo, hi = min(lo, float(v.min())), max(hi, float(v.max()))
            if draws is None:
                parts.append(v)
            else:
                a, b = np.searchsorted(draws, [seen, seen + v.size])
                parts.append(v[draws[a:b] - seen])
            seen += v.size
    if seen != n_mapped:
        raise InputError(f"{potential}: {seen} mapped cells, but its map.json counts {n_mapped}; the map folder was "
                         "changed after it was made: map the model card again")
    values = np.concatenate(parts).astype(np.float64)
    info = {"cells": "all mapped cells" if draws is None else "random sample of mapped cells",
            "n_cells": int(values.size), "n_mapped": int(n_mapped), "score_range": [lo, hi]}
    if draws is not None:
        info.update(seed=random_state if isinstance(random_state, int) else None,
                    draw="uniform, with replacement, by cell rank in row-major order")
    return values, info


def _training_matches(new_sites: pd.DataFrame, training: pd.DataFrame, cell_size: float) -> pd.Series:
    """Per new site: "same id", "same place", both, or "" (not a training site).

    A site is at the same place as a training site when the centres of their
    cells (mean of the cell centres) are less than one cell apart along both
    axes. ``new_sites`` has ``site_id``, ``x``, ``y`` per site.
    """
    from scipy.spatial import cKDTree

    pres = training[training["label"] == 1]
    centres = pres.groupby("site_id", sort=False)[["x", "y"]].mean()
    same_id = new_sites["site_id"].isin(set(centres.index.astype(str))).to_numpy()
    same_place = np.zeros(len(new_sites), dtype=bool)
    if len(centres):
        tree = cKDTree(centres.to_numpy())
        near = tree.query_ball_point(new_sites[["x", "y"]].to_numpy(), r=cell_size * (1 - 1e-9), p=np.inf)
        same_place = np.array([len(n) > 0 for n in near], dtype=bool)
    label = np.select([same_id & same_place, same_id, same_place], ["same id and place", "same id", "same place"],
                      default="")
    return pd.Series(label, index=new_sites.index, dtype=object)


def _flag_training_sites(site_rows, centres, card, training_table, grid, log):
    """Add ``training_site`` to the per-site table; return ``({site id: match}, table path)``."""
    training, path = _training_table(card, training_table, log)
    if training is None:
        return {}, None
    site_rows["training_site"] = _training_matches(centres, training, float(max(grid.res))).to_numpy()
    hit = site_rows[site_rows["training_site"] != ""]
    matches = {str(r.site_id): r.training_site for r in hit.itertuples()}
    if matches:
        shown = ", ".join(list(matches)[:5]) + (", ..." if len(matches) > 5 else "")
        log(f"{len(matches)} of the {len(site_rows)} later-found sites are training sites of the model (same id, "
            f"or within a cell of one: {shown}); a check on them is not independent of the model, see "
            "training_site in check_sites.csv")
    return matches, path


def _training_table(card: dict, training_table, log):
    """The card's training table (label, site_id, x, y), or None when it cannot be read."""
    path = training_table or (card.get("training_table") or {}).get("path")
    if not path:
        log("the model card names no training table: later-found sites are not compared with training sites")
        return None, None
    path = Path(path)
    if not path.is_file():
        log(f"training table {path} not found: later-found sites are not compared with training sites")
        return None, None
    return pd.read_parquet(path, columns=["label", "site_id", "x", "y"]), path


# ------------------------------------------------------------------ per-site table


def _site_table(pres, scores, codes, applicable, code_names, with_coordinates):
    """One row per site: cells, mean potential, main zone, share inside the area of applicability."""
    frame = pd.DataFrame({"site_id": pres["site_id"].to_numpy(), "w": pres["weight"].to_numpy(),
                          "score": scores, "code": codes, "x": pres["x"].to_numpy(), "y": pres["y"].to_numpy()})
    frame["ws"] = frame["w"] * frame["score"]
    g = frame.groupby("site_id", sort=False)
    out = pd.DataFrame({"n_cells": g.size(), "potential": g["ws"].sum() / g["w"].sum()})
    # the zone holding most of the site's weight (the higher zone on a tie)
    by_zone = frame.groupby(["site_id", "code"], sort=False)["w"].sum().reset_index()
    by_zone = by_zone.sort_values(["site_id", "w", "code"], ascending=[True, False, False], kind="stable")
    main = by_zone.drop_duplicates("site_id").set_index("site_id")
    out["zone"] = main.loc[out.index, "code"].map(code_names).to_numpy()
    out["zone_share"] = (main.loc[out.index, "w"].to_numpy() / g["w"].sum().to_numpy())
    if applicable is not None:
        frame["wa"] = frame["w"] * applicable
        out["share_applicable"] = g["wa"].sum() / g["w"].sum()
    centres = g[["x", "y"]].mean()
    out = out.reset_index()
    if with_coordinates:
        out["x"], out["y"] = centres["x"].to_numpy(), centres["y"].to_numpy()
    return out, centres.reset_index()


def _dropped_table(records, pres):
    rows = records.dropped[["source_row", "site_id", "reason"]].to_dict(orient="records")
    source_row = dict(zip(records.sites["site_id"], records.sites["source_row"]))
    rows += [{"source_row": source_row.get(d["site_id"]), "site_id": d["site_id"], "reason": d["reason"]}
             for d in pres.attrs.get("dropped", [])]
    frame = pd.DataFrame(rows, columns=["source_row", "site_id", "reason"])
    frame["source_row"] = frame["source_row"].astype("Int64")
    return frame


def _crs_text(crs) -> str:
    from pyproj import CRS

    crs = CRS.from_user_input(crs)
    epsg = crs.to_epsg()
    return f"EPSG:{epsg}" if epsg else crs.name


# ------------------------------------------------------------------ the check


def check_model(card, sites, *, out_dir=None, map_dir=None, layer=None, id_field="site_id", x_field=None,
                y_field=None, crs=None, fresh=False, quiet=False, log=None, n_jobs=1, training_table=None,
                look_for_run_map=True, card_label=None, max_landscape_cells=MAX_LANDSCAPE_CELLS,
                random_state=0, with_coordinates=False, confidence=0.95) -> CheckResult:
    """Check a saved model on sites found after it was made.

    Parameters
    ----------
    card : path-like
        The model card (``models/NAME/LEARNER.card.json``); its model file is
        checked against the card's hash before anything else.
    sites : path-like or geopandas.GeoDataFrame
        The later-found sites: points or polygons in a vector file, or a CSV with
        coordinate columns, in any CRS (reprojected to the map's, and said). Read
        with :func:`mlsites.sampling.read_sites`.
    out_dir : path-like, optional
        Folder to create for ``check.csv``, ``check_sites.csv``,
        ``dropped_sites.csv`` and ``check.json``; refused if it exists unless
        ``fresh``. Default: write nothing, return the result.
    map_dir : path-like, optional
        A folder written by :func:`mlsites.mapping.map_model` for this card (its
        ``map.json`` must name the card's SHA-256). Default: the run's
        ``maps/LEARNER/`` if it was made from this card, else the card is mapped
        into a temporary folder first (which takes as long as ``mlsites map``).
    layer, id_field, x_field, y_field, crs
        How to read ``sites``, as in :func:`~mlsites.sampling.read_sites`
        (``id_field`` default "site_id"; ``crs`` required for a CSV).
    fresh : bool, default False
        Replace an existing ``out_dir``.
    quiet : bool, default False
        No progress bars (of a temporary map).
    log : callable, optional
        Receives one line per step, and the notes on dropped records.
    n_jobs : int, default 1
        Worker processes for a temporary map.
    training_table : path-like, optional
        The sample table the model was fitted on (default: the card's); new sites
        that are training sites (same id, or the same place within a cell) are
        reported.
    look_for_run_map : bool, default True
        Without ``map_dir``, look for the run's map of the card first.
    card_label : str, optional
        Card path as recorded in ``check.json`` (default ``card`` as given).
    max_landscape_cells : int, default 4 000 000
        Up to this many mapped cells the landscape of AUC and the Boyce index is
        every mapped cell; beyond, this many cells drawn at random (``random_state``)
        stand for it, and ``check.json`` says so.
    random_state : int, default 0
        Seed of that draw.
    with_coordinates : bool, default False
        Add the sites' x and y (centre of their cells, map CRS) to
        ``check_sites.csv``. Off by default: site locations are sensitive.
    confidence : float, default 0.95
        Level of the Wilson intervals.

    Returns
    -------
    CheckResult

    Raises
    ------
    OutputExistsError
        ``out_dir`` exists and ``fresh`` is false (checked before any work).
    InputError
        The model file fails its hash, ``map_dir`` is no map of this card, or a
        field of the site file is missing.
    InsufficientDataError
        No site lies on a mapped cell (all outside the grid, for instance).
    CRSError
        The sites' CRS is unknown (a CSV without ``crs``) or contradicts the file.

    Notes
    -----
    A point site covers the cells within the card's ``site_buffer_m`` of it (the
    buffer of its training sites), a polygon the cells whose centre it holds; the
    cells of a site share its weight of 1 (:func:`~mlsites.sampling.presence_cells`).
    Sites outside the map's grid or only on unmapped cells are dropped and listed
    with the reason. Each cell's zone is the zone of its score on the map (by the
    map's thresholds, so a cell outside the area of applicability still has its
    zone), the zone shares of the area are the map's realised shares, and AUC and
    the Boyce index (windows over the map's score range) compare the sites with
    the mapped landscape. The outputs hold site ids, never coordinates, unless
    ``with_coordinates``.
    """
    from mlsites.evaluation import new_site_check
    from mlsites.experiment._hashing import file_digest
    from mlsites.experiment._models import load_model
    from mlsites.grid import GridSpec
    from mlsites.mapping._map import map_model

    log = log or (lambda m: None)
    out_dir = Path(out_dir) if out_dir is not None else None
    if out_dir is not None and out_dir.exists() and not fresh:
        raise OutputExistsError(f"{out_dir}: exists already; use --fresh to replace it or --out for another folder")
    saved = load_model(card)  # integrity check of the model file before any work
    card_path, card_data = saved.card_path, saved.card
    card_sha = file_digest(card_path)
    learner = str(card_data.get("name", card_path.name))
    with contextlib.ExitStack() as stack:
        folder, summary, how = _choose_map(card_data, card_path, card_sha, map_dir, look_for_run_map, log)
        if summary is None:
            parent = out_dir.parent if out_dir is not None else None
            if parent is not None:
                parent.mkdir(parents=True, exist_ok=True)
            tmp = Path(stack.enter_context(tempfile.TemporaryDirectory(prefix=".check-map-", dir=parent)))
            log(f"{how}; mapping {card_path.name} into a temporary folder first (removed after the check)")
            result = map_model(card_path, tmp / learner, n_jobs=n_jobs, quiet=quiet, log=log,
                               training_table=training_table, card_label=card_label)
            folder, summary, how = result.out_dir, result.summary, "made for this check (temporary)"
        grid = GridSpec.from_dict(summary["grid"])
        potential = folder / "potential.tif"
        mapped = _potential_lookup(potential, grid)

        buffer_m = card_data.get("site_buffer_m")
        if buffer_m is None:
            log(f"{card_path.name} records no site buffer: each point site covers the cell that holds it")
            buffer_m = 0.0
        records, pres, notes, reprojected = _new_site_cells(
            sites, grid, mapped, float(buffer_m), dict(id_field=id_field, x_field=x_field, y_field=y_field, crs=crs,
                                                       layer=layer), log)
        dropped = _dropped_table(records, pres)
        zone_rows = summary["zones"]
        scores, codes, applicable = _cell_values(folder, summary, pres, grid)
        landscape, land_info = _landscape(potential, grid, int(summary["cells"]["mapped"]), int(max_landscape_cells),
                                          random_state)
        lo, hi = land_info["score_range"]
        score_range = (lo, hi) if hi > lo else None  # Boyce windows over the map's scores
        table = new_site_check(scores, codes, landscape, {z["name"]: float(z["area_share"]) for z in zone_rows},
                               site_applicable=applicable, site_weight=pres["weight"].to_numpy(),
                               zone_codes={z["name"]: int(z["code"]) for z in zone_rows}, confidence=confidence,
                               boyce_window=BOYCE_WINDOW, boyce_n_windows=BOYCE_N_WINDOWS, score_range=score_range)
        code_names = {int(z["code"]): z["name"] for z in zone_rows}
        site_rows, centres = _site_table(pres, scores, codes, applicable, code_names, with_coordinates)

        matches, training_path = _flag_training_sites(site_rows, centres, card_data, training_table, grid, log)

        n_used = int(len(site_rows))
        summary_out = {
            "model_card": {"path": card_label or str(card), "sha256": card_sha, "learner": learner,
                           "model_sha256": card_data.get("model_sha256")},
            "map": {"folder": str(folder) if "temporary" not in how else None, "source": how,
                    "model_card_sha256": summary["model_card"]["sha256"],
                    "cells_mapped": int(summary["cells"]["mapped"])},
            "sites": {"file": str(sites) if not hasattr(sites, "geometry") else "a GeoDataFrame",
                      "layer": layer, "id_field": id_field, "x_field": x_field, "y_field": y_field,
                      "crs": crs, "reprojected": reprojected, "site_buffer_m": float(buffer_m)},
            "counts": {"read": int(records.n_read), "used": n_used, "dropped": int(len(dropped)),
                       "dropped_by_reason": {str(k): int(v) for k, v in
                                             dropped["reason"].value_counts().items()},
                       "site_cells": int(len(pres)), "cells_on_unmapped": int(pres.attrs.get("n_nodata_cells", 0)),
                       "cells_outside_grid": int(pres.attrs.get("n_outside_cells", 0))},
            "training_sites": {"table": str(training_path) if training_path else None,
                               "n_matching": len(matches), "matching": matches},
            "landscape": land_info,
            "settings": {"confidence": confidence, "boyce_window": BOYCE_WINDOW, "boyce_n_windows": BOYCE_N_WINDOWS,
                         "max_landscape_cells": int(max_landscape_cells), "with_coordinates": bool(with_coordinates)},
            "zones": [{"name": z["name"], "code": int(z["code"]), "threshold": z["threshold"],
                       "area_share": z["area_share"]} for z in zone_rows],
            "verdicts": [f"{r.zone}: {r.verdict}" for r in table.itertuples()],
            "notes": notes,
            "notice": _NOTICE,
        }
        if out_dir is not None:
            with staged_folder(out_dir) as staging:
                _write_csv(table, staging / "check.csv")
                _write_csv(site_rows, staging / "check_sites.csv")
                _write_csv(dropped, staging / "dropped_sites.csv")
                (staging / "check.json").write_text(json.dumps(summary_out, indent=2, default=_json_default) + "\n")
    top = table.iloc[0]
    log(f"check of {learner} on {n_used} later-found sites: {top['zone']} zone holds {100 * top['site_share']:.0f} % "
        f"of them in {100 * top['area_share']:.1f} % of the area (gain {top['gain']:.2f})")
    return CheckResult(out_dir=out_dir, table=table, sites=site_rows, dropped=dropped, summary=summary_out)


def _new_site_cells(sites, grid, mapped, buffer_m, read_kw, log):
    """Read the new sites onto the map's grid and turn them into weighted cells.

    Returns ``(records, presence cells, notes, reprojected)``: the notes are the
    lines on dropped records and cells (logged, and kept for ``check.json``),
    ``reprojected`` the two CRS names when the sites were reprojected.
    """
    from pyproj import CRS as ProjCRS

    from mlsites.sampling import presence_cells, read_sites

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", DataQualityWarning)
        records = read_sites(sites, grid, valid_mask=mapped, **read_kw)
        pres = presence_cells(records, grid, buffer_m=buffer_m, valid_mask=mapped)
    log(records.summary())
    notes = []
    for w in caught:
        if not issubclass(w.category, DataQualityWarning):
            warnings.showwarning(w.message, w.category, w.filename, w.lineno)
        elif str(w.message) != records.summary():
            notes.append(str(w.message))
            log(str(w.message))
    reprojected = None
    if records.source_crs is not None and not records.source_crs.equals(ProjCRS.from_user_input(grid.crs)):
        reprojected = {"from": _crs_text(records.source_crs), "to": _crs_text(grid.crs)}
        log(f"reprojected the {records.n_read} site records of {records.source} from {reprojected['from']} "
            f"to the map's CRS {reprojected['to']}")
    return records, pres, [records.summary()] + notes, reprojected


def _cell_values(folder, summary, pres, grid):
    """Potential, zone code (by score, with the map's thresholds) and applicability of each site cell."""
    from mlsites.evaluation import assign_zones
    from mlsites.sampling import extract_values

    layers, kinds = {"potential": folder / "potential.tif"}, {"potential": "continuous"}
    if "applicable.tif" in summary.get("files", []):
        layers["applicable"], kinds["applicable"] = folder / "applicable.tif", "categorical"
    values = extract_values(layers, pres["row"].to_numpy(), pres["col"].to_numpy(), grid, kinds=kinds)
    scores = values["potential"].to_numpy()
    thresholds = {z["name"]: float(z["threshold"]) for z in summary["zones"][:-1]}
    codes = assign_zones(scores, thresholds).astype(np.int64) if thresholds else np.ones(scores.size, np.int64)
    applicable = values["applicable"].to_numpy() == 1 if "applicable" in values else None
    return scores, codes, applicable


def _choose_map(card, card_path, card_sha, map_dir, look_for_run_map, log):
    """``(folder, map.json summary, how)``; summary None when the card must be mapped first."""
    if map_dir is not None:
        folder = Path(map_dir)
        summary, why = _map_of_card(folder, card_sha, card_path)
        if summary is None:
            raise InputError(f"--map {folder}: {why}; give the map folder of this model card (mlsites map "
                             f"{card_path.name} --out DIR), or leave out --map to map the card for the check")
        log(f"using the map in {folder}")
        return folder, summary, "given"
    folder = _run_map_folder(card) if look_for_run_map else None
    if folder is None:
        return None, None, f"{card_path.name} names no run with maps"
    summary, why = _map_of_card(folder, card_sha, card_path)
    if summary is None:
        return None, None, why
    log(f"using the run's map in {folder}")
    return folder, summary, "run map"


def _json_default(obj):
    if isinstance(obj, np.generic):
        return obj.item()
    return str(obj)


def _write_csv(frame: pd.DataFrame, path: Path):
    frame.to_csv(path, index=False, float_format="%.10g", lineterminator="\n")


# ------------------------------------------------------------------ in a run


def check_in_run(ctx):
    """Check the run's maps on the experiment's later-found sites (``[check]``).

    Writes ``check/LEARNER/`` (the files of :func:`check_model`) into the run
    folder being built, for the learners of ``[check] learners`` (default: the
    learners the run mapped; one without a map is mapped for the check), and
    returns a summary per learner for the manifest, or None without ``[check]
    sites``.
    """
    spec = ctx.exp["check"]
    if not spec["sites"]:
        return None
    learners = list(spec["learners"]) if spec["learners"] is not None else list(ctx.maps)
    if not learners:
        ctx.log("[check] sites given, but the run mapped no learner and [check] learners names none: "
                "nothing checked")
        return None
    out = {}
    for learner in learners:
        map_dir = Path(ctx.staging) / "maps" / learner
        result = check_model(ctx.card_path(learner), spec["sites"], out_dir=Path(ctx.staging) / "check" / learner,
                             map_dir=map_dir if learner in ctx.maps else None, look_for_run_map=False,
                             layer=spec["layer"], id_field=spec["id_field"], x_field=spec["x_field"],
                             y_field=spec["y_field"], crs=spec["crs"], quiet=ctx.quiet, log=ctx.log,
                             n_jobs=ctx.n_jobs, training_table=Path(ctx.staging) / "samples" / "samples.parquet",
                             card_label=str(Path(ctx.models_dir) / f"{learner}.card.json"), random_state=ctx.seed)
        top = result.table.iloc[0]
        all_row = result.table.iloc[-1]
        out[learner] = {
            "sites_used": result.summary["counts"]["used"], "sites_dropped": result.summary["counts"]["dropped"],
            "training_sites": result.summary["training_sites"]["n_matching"],
            "top_zone": {"zone": top["zone"], "site_share": float(top["site_share"]),
                         "site_share_ci": [float(top["site_share_low"]), float(top["site_share_high"])],
                         "area_share": float(top["area_share"]), "gain": _float_or_none(top["gain"]),
                         "p_value": float(top["p_value"])},
            "auc": float(all_row["auc"]), "boyce": _float_or_none(all_row["boyce"]),
        }
    return {"sites": str(spec["sites"]), "learners": out}


def _float_or_none(v):
    v = float(v)
    return v if np.isfinite(v) else None
