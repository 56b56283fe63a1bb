"""The sections of the report, each drawn from the files of a run folder.

Every function takes a :class:`~mlsites.report._run_files.RunFiles` and returns
one section (see :mod:`mlsites.report._blocks`); a section whose files are
missing is returned as absent with one line naming the file. No table holds a
coordinate; sites appear only in maps, as squares unless exact positions are
asked for.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from mlsites.report._blocks import (
    absent,
    figure,
    figures,
    items,
    mean_sd,
    note,
    num,
    para,
    pct,
    row,
    section,
    share_ci,
    share_sd,
    table,
)
from mlsites.report._figures import Panel, draw_curves, draw_maps, png_data_uri
from mlsites.report._style import (
    CONTRIBUTION_RAMP,
    DISSIMILARITY_RAMP,
    FOLD_COLOURS,
    POTENTIAL_RAMP,
    SPREAD_RAMP,
    zone_palette,
)

__all__ = ["glance", "study", "folds", "comparison", "curves", "zones", "maps", "reliability", "explanations",
           "periods", "check", "best_learner", "mapped_best"]

#: Ids listed at most for one reason in the table of dropped records.
_MAX_IDS = 8
#: Response-curve figures shown (the best learner's most important layers).
_N_RESPONSE = 4


# ---------------------------------------------------------------- helpers


def best_learner(run):
    """The best learner by mean fold AUC (first row of metrics_summary.csv), or None."""
    summary = run.csv("metrics_summary.csv")
    if summary is None or summary.empty:
        return None
    return str(summary.sort_values("rank")["learner"].iloc[0]) if "rank" in summary else str(summary["learner"].iloc[0])


def mapped_best(run):
    """(learner, map folder) of the highest-ranked learner with a map, or (None, None)."""
    summary = run.csv("metrics_summary.csv")
    ranking = [] if summary is None else list(summary.sort_values("rank")["learner"]) if "rank" in summary else \
        list(summary["learner"])
    maps = run.folder / "maps"
    for name in ranking + sorted(p.name for p in maps.glob("*") if p.is_dir()):
        if (maps / name / "potential.tif").is_file():
            return name, maps / name
    return None, None


def _crs_text(grid):
    epsg = grid.crs.to_epsg() if grid.crs is not None else None
    if epsg:
        name = grid.crs.to_dict().get("proj", "")
        try:
            from pyproj import CRS as ProjCRS

            name = ProjCRS.from_user_input(grid.crs.to_wkt()).name
        except Exception:  # noqa: BLE001 - the name is only a courtesy next to the EPSG code
            pass
        return f"EPSG:{epsg} ({name})" if name else f"EPSG:{epsg}"
    return "no CRS" if grid.crs is None else grid.crs.to_string()[:80]


def _map_png(run, panels, note_text=""):
    return png_data_uri(draw_maps(panels, run.shade, run.extent, unit_m=run.unit_m, note=note_text))


def _percentile(values):
    """Each finite value's percentile rank among the finite values (0-100), NaN elsewhere."""
    from scipy.stats import rankdata

    out = np.full(values.shape, np.nan)
    ok = np.isfinite(values)
    if ok.any():
        out[ok] = 100.0 * (rankdata(values[ok]) - 0.5) / ok.sum()
    return out


def _zone_classes(map_json, n_zones):
    palette = zone_palette(n_zones)
    names = {int(k): v for k, v in (map_json.get("zone_codes") or {}).items()}
    codes = sorted((c for c in palette if c != 255), reverse=True) + [255]
    return [(c, names.get(c, f"zone {c}") if c != 255 else "outside the area of applicability", palette[c])
            for c in codes]


# ---------------------------------------------------------------- at a glance


def glance(run):
    summary, zones = run.csv("metrics_summary.csv"), run.csv("zones.csv")
    sampling = run.json("sampling.json") or {}
    if summary is None or summary.empty:
        return absent("glance", "At a glance", "metrics_summary.csv not found: the run has no comparison of learners.")
    best = best_learner(run)
    row = summary[summary["learner"] == best].iloc[0]
    n_folds = int(row.get("n_folds", 0)) if "n_folds" in row else None
    lines = [f"{sampling.get('n_sites_used', '?')} sites were used of {sampling.get('n_sites_read', '?')} read; "
             f"{len(summary)} learners were compared on the same {n_folds or ''} spatial folds.".replace("  ", " "),
             f"Best learner by mean held-out AUC: {best} ({mean_sd(row['auc_mean'], row.get('auc_sd'))}; "
             f"continuous Boyce index {mean_sd(row.get('boyce_mean'), row.get('boyce_sd'))})."]
    if zones is not None and not zones.empty:
        top = zones[zones["learner"] == best]
        if not top.empty:
            z = top.iloc[0]
            lines.append(
                f"Its {z['zone']} zone covers {pct(z['area_share'])} of the area and held "
                f"{share_ci(z['heldout_site_share'], z['heldout_site_share_ci_low'], z['heldout_site_share_ci_high'])}"
                f" of held-out sites (target {pct(z['target'], 0)}; 95 % interval in brackets); Kvamme's gain "
                f"{num(z['heldout_gain'], 2)}.")
    return section("glance", "At a glance", [items(lines)])


# ---------------------------------------------------------------- the study


def _layer_source(name, settings):
    if name in (settings.get("inputs") or {}):
        return "input raster"
    if name.startswith("distance_") and name[len("distance_"):] in (settings.get("distances") or {}):
        return "distance to vector features"
    return "derived from the DEM"


def study(run):
    s = run.settings
    sampling = run.json("sampling.json")
    blocks = []
    facts = [("experiment", run.manifest.get("experiment", "")), ("run", run.manifest.get("run", ""))]
    if s.get("study", {}).get("description"):
        facts.append(("description", s["study"]["description"]))
    if run.grid is not None:
        g = run.grid
        dx, dy = g.res
        facts += [("coordinate reference system", _crs_text(g)),
                  ("grid", f"{g.width} × {g.height} cells of {dx * run.unit_m:g} × {dy * run.unit_m:g} m"),
                  ("extent", f"{g.width * dx * run.unit_m / 1000:.1f} × {g.height * dy * run.unit_m / 1000:.1f} km "
                             f"({g.n_cells * dx * dy * run.unit_m ** 2 / 1e6:.1f} km²)")]
    maps = sorted((run.folder / "maps").glob("*/map.json"))
    if maps and run.grid is not None:
        cells = (run.json(maps[0].relative_to(run.folder)) or {}).get("cells", {})
        if cells.get("mapped"):
            area = cells["mapped"] * run.grid.cell_area_m2() / 1e6
            facts.append(("mapped area", f"{cells['mapped']} cells ({area:.1f} km²) with a value in every layer"))
    if s.get("study", {}).get("dem"):
        facts.append(("DEM", Path(s["study"]["dem"]).name))
    if s.get("sites", {}).get("path"):
        facts.append(("site records", Path(s["sites"]["path"]).name))
    facts_table = table(["", ""], facts, caption="The study", numeric=[False, False])
    if sampling is None:
        blocks += [facts_table, note("sampling.json not found: counts of sites and background cells are not "
                                     "available.")]
        return section("study", "The study", blocks)
    features = sampling.get("features") or run.manifest.get("samples", {}).get("features", [])
    categorical = set(sampling.get("categorical") or [])
    layers_table = table(["layer", "kind", "source"],
                         [(f, "categorical" if f in categorical else "continuous", _layer_source(f, s))
                          for f in features], caption=f"The {len(features)} layers the learners used",
                         numeric=[False, False, False])
    sa = s.get("sampling", {})
    removed = sampling.get("removed", {})
    counts = [("site records read", sampling.get("n_sites_read")), ("sites used", sampling.get("n_sites_used")),
              ("site cells (within the site buffer)", sampling.get("n_presence_cells")),
              ("background cells", sampling.get("n_background_cells")),
              ("site cells removed: a layer without value", removed.get("presence_cells_missing_values")),
              ("background cells removed: a layer without value", removed.get("background_cells_missing_values"))]
    blocks.append(row([facts_table, layers_table,
                       table(["", "count"], [(k, "" if v is None else v) for k, v in counts],
                             caption="Sites and background cells")]))
    dropped = run.csv("dropped_records.csv")
    if dropped is not None and not dropped.empty and "reason" in dropped:
        rows = []
        for reason, group in dropped.groupby("reason", sort=True):
            ids = [str(i) for i in group.get("site_id", []) if str(i) != "nan"]
            shown = ", ".join(ids[:_MAX_IDS]) + (f", … ({len(ids) - _MAX_IDS} more)" if len(ids) > _MAX_IDS else "")
            rows.append((reason, len(group), shown))
        blocks.append(table(["reason", "records", "site ids"], rows, numeric=[False, True, False],
                            caption="Site records left out, and why (all are listed in dropped_records.csv)"))
    elif dropped is not None:
        blocks.append(para("No site record was left out."))
    missing = removed.get("missing_by_layer") or {}
    if missing:
        blocks.append(para("Cells without a value, by layer (one cell may lack several): "
                           + ", ".join(f"{k} {v}" for k, v in missing.items()) + "."))
    survey = sa.get("survey_areas")
    if survey:
        how = ("drawn only inside the surveyed areas" if sa.get("survey_mode") == "inside" else
               f"drawn in proportion to survey effort ({sa.get('effort_field')})")
        blocks.append(para(f"Background cells were {how} ({Path(survey).name}), so that the model compares sites "
                           "with ground searched as thoroughly (target-group background)."))
    else:
        blocks.append(para("No survey areas were given: background cells were drawn over the whole study area, so "
                           "the model may learn where fieldwork happened as much as where sites are."))
    return section("study", "The study", blocks)


# ---------------------------------------------------------------- folds


def folds(run):
    s = run.settings.get("folds", {})
    sampling = run.json("sampling.json") or {}
    info = sampling.get("folds") or {}
    method = info.get("method", s.get("method", "?"))
    size = info.get("block_size_m", s.get("block_size_m"))
    text = f"Method: {method}; {info.get('n_splits', s.get('n_splits', '?'))} folds"
    if size:
        text += f"; blocks of {size:g} m"
    text += (". Folds were assigned once and every learner used the same ones; all cells of a site are in one "
             "fold, and each fold's model was scored on the sites and landscape of the blocks it did not see.")
    blocks = [para(text)]
    fold_table = sampling.get("fold_table") or []
    if fold_table:
        blocks.append(table(["fold", "sites", "site cells", "samples"],
                            [(f.get("fold"), f.get("n_sites"), f.get("n_presence_cells"), f.get("n_samples"))
                             for f in fold_table], caption="Held-out sets of the folds"))
    gpkg = run.path("samples/blocks.gpkg")
    if gpkg.is_file() and run.grid is not None:
        import geopandas as gpd

        frame = gpd.read_file(gpkg)
        if frame.crs is not None and run.grid.crs is not None and frame.crs != run.grid.crs:
            frame = frame.to_crs(run.grid.crs)
        shapes = []
        for geom, fold in zip(frame.geometry, frame["fold"]):
            if geom is None or geom.is_empty:
                continue
            c = FOLD_COLOURS[int(fold) % len(FOLD_COLOURS)]
            shapes.append((geom, c, str(int(fold))))
        from matplotlib.patches import Patch

        legend = [Patch(facecolor=FOLD_COLOURS[k % len(FOLD_COLOURS)], alpha=0.6, label=f"fold {k}")
                  for k in sorted({int(f) for f in frame["fold"]})]
        panel = Panel(title="Spatial blocks by fold", shapes=shapes, legend_extra=legend)
        blocks.append(figure(_map_png(run, [panel], "numbers: the fold of each block"),
                             alt="Map of the spatial blocks coloured by fold",
                             caption="Blocks holding samples, coloured and numbered by fold (samples/blocks.gpkg)."))
    elif method in ("square_blocks", "hexagon_blocks"):
        blocks.append(note("samples/blocks.gpkg not found: no map of the blocks."))
    else:
        blocks.append(para(f"The {method} method has no blocks to map."))
    return section("folds", "Spatial folds", blocks)


# ---------------------------------------------------------------- comparison


def comparison(run):
    summary = run.csv("metrics_summary.csv")
    if summary is None or summary.empty:
        return absent("comparison", "Learners compared", "metrics_summary.csv not found.")
    summary = summary.sort_values("rank") if "rank" in summary else summary
    tops = sorted({c[len("captured_top_"):-len("_mean")] for c in summary.columns
                   if c.startswith("captured_top_") and c.endswith("_mean")}, key=float)
    columns = ["rank", "learner", "AUC", "Boyce index"] + [f"sites in top {t} %" for t in tops] + \
        ["gain, high zone", "AUC vs best", "p vs best"]
    rows = []
    for _, r in summary.iterrows():
        test, p = r.get("test_vs_best"), r.get("p_value_vs_best")
        rows.append([int(r["rank"]) if "rank" in r else "", r["learner"], mean_sd(r["auc_mean"], r.get("auc_sd")),
                     mean_sd(r.get("boyce_mean"), r.get("boyce_sd"))]
                    + [share_sd(r.get(f"captured_top_{t}_mean"), r.get(f"captured_top_{t}_sd")) for t in tops]
                    + [mean_sd(r.get("gain_high_mean"), r.get("gain_high_sd"), 2),
                       num(r.get("auc_diff_vs_best")), num(p) if isinstance(test, str) else ""])
    n_folds = int(summary["n_folds"].iloc[0]) if "n_folds" in summary else "the"
    tests = sorted({t for t in summary.get("test_vs_best", []) if isinstance(t, str)})
    test_text = {"ttest_rel": "a paired t-test", "wilcoxon": "Wilcoxon's signed-rank test"}
    blocks = [para(f"Mean ± standard deviation over {n_folds} held-out spatial folds. AUC: held-out sites "
                   "against the fold's held-out landscape; Boyce index: continuous Boyce index; sites in top k %: "
                   "share of held-out sites in the highest-scoring k % of the fold's landscape; gain: Kvamme's "
                   "gain of the high zone. The last columns compare each learner's fold AUCs with the best "
                   "learner's on the same folds ("
                   + (" / ".join(test_text.get(t, t) for t in tests) or "paired test")
                   + "); a large p says the folds cannot tell the two apart."),
              table(columns, rows, numeric=[True, False] + [True] * (len(columns) - 2),
                    caption="Learners ranked by mean fold AUC (metrics_summary.csv)")]
    return section("comparison", "Learners compared", blocks)


def curves(run):
    frame = run.csv("curves.csv")
    if frame is None or frame.empty:
        return absent("curves", "Capture curves", "curves.csv not found.")
    learners = list(run.manifest.get("learners") or dict.fromkeys(frame["learner"]))
    return section("curves", "Capture curves", [
        figure(png_data_uri(draw_curves(frame, learners)), alt="Capture and ROC curves of every learner",
               caption="Left: share of held-out sites against the share of the study area, highest scores first; "
                       "right: ROC of held-out sites against the held-out landscape (both pooled over folds, "
                       "curves.csv). The diagonal is chance.", wide=True)])


# ---------------------------------------------------------------- zones


def zones(run):
    frame = run.csv("zones.csv")
    if frame is None or frame.empty:
        return absent("zones", "Potential zones", "zones.csv not found.")
    summary = run.csv("metrics_summary.csv")
    order = list(summary.sort_values("rank")["learner"]) if summary is not None and "rank" in summary else []
    frame = frame.assign(_o=frame["learner"].map({n: i for i, n in enumerate(order)}).fillna(len(order)))
    frame = frame.sort_values(["_o"], kind="stable")
    rows = [(r["learner"], r["zone"], pct(r["target"], 0), pct(r["area_share"]),
             share_ci(r["heldout_site_share"], r["heldout_site_share_ci_low"], r["heldout_site_share_ci_high"]),
             num(r["heldout_gain"], 2), f"{pct(r['insample_cut_site_share'])} in {pct(r['insample_cut_area_share'])}")
            for _, r in frame.iterrows()]
    blocks = [para("Each zone and the zones above it together (shares are cumulative). The area share comes from "
                   "the held-out sites of the cross-validation: the least area whose scores hold the target share "
                   "of them. The test: each fold's zones are cut with the other folds' calibration on its own "
                   "landscape, and the pooled share of held-out sites inside is given with its 95 % Wilson "
                   "interval. The last column is the optimistic rule for comparison only: zones cut at the "
                   "training sites' own scores."),
              table(["learner", "zone", "target", "area share", "held-out sites (95 % interval)",
                     "gain", "training-site cut: sites in area"], rows, numeric=[False, False] + [True] * 5,
                    caption="Zones calibrated on held-out sites (zones.csv)")]
    return section("zones", "Potential zones", blocks)


# ---------------------------------------------------------------- maps


def maps(run):
    name, folder = mapped_best(run)
    if name is None:
        return absent("maps", "Potential map", "no maps/LEARNER/potential.tif in the run ([maps] learners = "
                      "\"none\"?); make one with `mlsites map`.")
    if run.grid is None:
        return absent("maps", "Potential map", "the study grid is unknown, so the map cannot be drawn.")
    info = run.json(Path("maps") / name / "map.json") or {}
    best = best_learner(run)
    blocks = []
    if best != name:
        blocks.append(note(f"The best learner ({best}) was not mapped; the map shown is of {name}, the "
                           "highest-ranked learner with a map."))
    potential = run.read_display(folder / "potential.tif")
    pot_panel = Panel(title=f"Potential: {name}", image=potential, ramp=POTENTIAL_RAMP, vmin=0.0,
                      vmax=float(np.nanmax(potential)) if np.isfinite(potential).any() else 1.0,
                      label="potential (model score, 0–1)", **run.site_layers())
    panels = [pot_panel]
    zone_list = info.get("zones") or []
    if (folder / "zones.tif").is_file():
        codes = run.read_display(folder / "zones.tif", kind="categorical")
        n_zones = max(len(zone_list), int(np.nanmax(np.where(codes == 255, 0, codes))) if np.isfinite(codes).any()
                      else 1)
        panels.append(Panel(title=f"Zones: {name}", image=codes, classes=_zone_classes(info, n_zones)))
    blocks.append(figure(_map_png(run, panels), alt=f"Potential and zone maps of {name} over a hillshade",
                         caption=run.site_note(), wide=True))
    if zone_list:
        rows = [(z.get("name"), pct(z.get("target"), 0), pct(z.get("area_share")),
                 "" if z.get("area_km2") is None else f"{z['area_km2']:.2f}", z.get("cells"),
                 z.get("cells_outside_applicability", ""),
                 share_ci(z.get("heldout_site_share"), *(z.get("heldout_site_share_ci") or (None, None))))
                for z in zone_list]
        blocks.append(table(["zone", "target", "share of the map", "km²", "cells", "cells outside AOA",
                             "held-out sites (cumulative, 95 % interval)"], rows, numeric=[False] + [True] * 6,
                            caption=f"Zones of the map of {name} (map.json)"))
    others = [p.parent.name for p in sorted((run.folder / "maps").glob("*/potential.tif")) if p.parent.name != name]
    if others:
        blocks.append(para("Other maps of this run (maps/LEARNER/): " + ", ".join(others) + "."))
    blocks.append(para("A zone is a share of the area ranked by the model's score: the high zone is where recorded "
                       "sites resemble the landscape most. A low zone is not a zone without sites."))
    return section("maps", "Potential map", blocks)


def reliability(run):
    name, folder = mapped_best(run)
    if name is None or run.grid is None:
        return absent("reliability", "Where the map is less sure", "no map of the run.")
    panels, texts = [], []
    if (folder / "spread.tif").is_file():
        spread = run.read_display(folder / "spread.tif")
        if np.isfinite(spread).any():
            panels.append(Panel(title="Spread of the fold models", image=spread, ramp=SPREAD_RAMP, vmin=0.0,
                                vmax=float(np.nanpercentile(spread, 99)) or 1.0,
                                label="standard deviation of the fold models' scores"))
            texts.append("Spread: where the models of the cross-validation folds disagree about the score; "
                         "treat those cells with extra caution.")
    info = run.json(Path("maps") / name / "map.json") or {}
    aoa = info.get("applicability") or {}
    if (folder / "dissimilarity.tif").is_file():
        di = run.read_display(folder / "dissimilarity.tif")
        outline = None
        if (folder / "applicable.tif").is_file():
            app = run.read_display(folder / "applicable.tif", kind="categorical")
            outline = app == 0
        threshold = aoa.get("threshold")
        top = max(float(np.nanpercentile(di, 99)) if np.isfinite(di).any() else 1.0, threshold or 0.0)
        panels.append(Panel(title="Dissimilarity from the training samples", image=di, ramp=DISSIMILARITY_RAMP,
                            vmin=0.0, vmax=top, label="dissimilarity index", outline=outline,
                            outline_label="edge of the area of applicability"))
        outside = (info.get("cells") or {}).get("outside_applicability")
        mapped = (info.get("cells") or {}).get("mapped")
        share = f" ({pct(outside / mapped)} of the mapped cells)" if outside is not None and mapped else ""
        texts.append(f"Area of applicability (Meyer & Pebesma 2021): cells whose layer values are farther from "
                     f"every training sample than the cross-validated training samples are from each other "
                     f"(dissimilarity index above {num(threshold)}) lie outside it{share}; zones.tif codes them "
                     f"255. Layer weights: {aoa.get('weights', 'equal')}.")
    if not panels:
        return absent("reliability", "Where the map is less sure", f"maps/{name}/ holds neither spread.tif nor "
                      "dissimilarity.tif.")
    return section("reliability", "Where the map is less sure",
                   [figure(_map_png(run, panels), alt=f"Spread and area-of-applicability maps of {name}",
                           wide=True), items(texts)])


# ---------------------------------------------------------------- explanations


def explanations(run):
    imp = run.csv("explain/importance.csv")
    if imp is None:
        return absent("explain", "Why the learners predict what they do",
                      "explain/importance.csv not found: the run made no explanations.")
    best = best_learner(run)
    blocks = [para("Mean |SHAP| (Lundberg & Lee 2017) says how much a layer moves a learner's output on "
                   "landscape cells; held-out permutation importance says how much the held-out AUC drops when "
                   "the layer is shuffled among a fold's held-out cells. Correlated layers share importance, so "
                   "read flagged pairs together; none of this tells settlement choice from survey practice.")]
    rows_best = imp[imp["learner"] == best] if best is not None else imp.iloc[0:0]
    if rows_best.empty and not imp.empty:
        best = str(imp["learner"].iloc[0])
        rows_best = imp[imp["learner"] == best]
    key = "permutation_rank" if rows_best["permutation_rank"].notna().any() else "shap_rank"
    rows_best = rows_best.sort_values([key, "layer"])
    blocks.append(table(
        ["layer", "mean |SHAP|", "share", "SHAP rank", "held-out AUC drop", "permutation rank", "notes"],
        [(r["layer"], num(r["shap_mean_abs"], 4), pct(r["shap_share"]), _int(r["shap_rank"]),
          mean_sd(r["permutation_mean"], r["permutation_sd"], 4), _int(r["permutation_rank"]),
          "" if not isinstance(r.get("notes"), str) else r["notes"]) for _, r in rows_best.iterrows()],
        numeric=[False, True, True, True, True, True, False],
        caption=f"Layers of {best} ({rows_best['output_space'].iloc[0] if len(rows_best) else ''}), most "
                "important first (explain/importance.csv holds every learner)"))
    ranks = imp.pivot_table(index="layer", columns="learner", values=key, aggfunc="first")
    if ranks.shape[1] > 1:
        ranks = ranks.loc[ranks.mean(axis=1).sort_values().index]
        blocks.append(table(["layer"] + list(ranks.columns),
                            [[layer] + [_int(v) for v in row] for layer, row in ranks.iterrows()],
                            caption=f"Rank of each layer by learner ({key.replace('_', ' ')})"))
    if run.has("explain/importance.png"):
        blocks.append(figure(png_data_uri(run.path("explain/importance.png")), alt="Importance of the layers",
                             caption="Importance of each layer for every learner.", wide=True))
    layers = rows_best["layer"].tolist()[:_N_RESPONSE]
    from mlsites.explain._stage import _safe

    blocks.append(figures([figure(png_data_uri(run.path(f"explain/response_{_safe(layer)}.png")),
                                  alt=f"Response to {layer}", caption=f"Response of every learner to {layer}")
                           for layer in layers if run.has(f"explain/response_{_safe(layer)}.png")]))
    corr = run.csv("explain/correlated_layers.csv")
    if corr is not None and not corr.empty:
        blocks.append(table(list(corr.columns), [[c if isinstance(c, str) else num(c) for c in r]
                                                 for r in corr.itertuples(index=False)],
                            caption="Correlated layer pairs (explain/correlated_layers.csv)"))
    settings = run.json("explain/explain.json") or {}
    for w in settings.get("warnings", []):
        blocks.append(note(w))
    blocks.append(_contribution_maps(run))
    return section("explain", "Why the learners predict what they do", blocks)


def _int(v):
    return "" if v is None or not np.isfinite(v) else int(v)


def _contribution_maps(run):
    info = run.json("explain/contributions/contributions.json")
    if info is None:
        return note("explain/contributions/contributions.json not found: no contribution maps in this run.")
    if run.grid is None:
        return None
    layers = [layer for layer in info.get("layers", []) if run.has(f"explain/contributions/{layer}.tif")]
    arrays = {layer: run.read_display(run.path(f"explain/contributions/{layer}.tif")) for layer in layers}
    if not arrays:
        return note("contributions.json names no contribution raster that exists.")
    top = max(float(np.nanpercentile(np.abs(a), 99)) if np.isfinite(a).any() else 0.0 for a in arrays.values())
    top = top or 1.0
    units = info.get("units", "")
    panels = [Panel(title=f"{layer}", image=a, ramp=CONTRIBUTION_RAMP, vmin=-top, vmax=top,
                    label=f"contribution ({units})" if units else "contribution") for layer, a in arrays.items()]
    learner = info.get("learner", "")
    return figure(_map_png(run, panels), alt=f"Contribution maps of {learner}", wide=True,
                  caption=f"Per-cell SHAP contributions of {learner}'s top layers: orange raises the score, "
                          "blue lowers it, relative to the learner's mean.")


# ---------------------------------------------------------------- periods


def periods(run):
    info = run.json("periods/periods.json")
    if info is None:
        return absent("periods", "Sites through time", "periods/periods.json not found: the run has no dates "
                      "(or the periods stage did not run).")
    blocks = [para(f"{info.get('n_sites_dated', '?')} of {info.get('n_sites_read', '?')} sites dated; blocks of "
                   f"{(info.get('blocks') or {}).get('width_years', '?'):g} years; "
                   f"{info.get('n_simulations', '?')} Monte Carlo draws of the dates within their ranges "
                   "(Crema 2012) and the aoristic sum (Ratcliffe 2000), against a null of constant site "
                   "numbers through time.")]
    figs = []
    if run.has("periods/site_counts.png"):
        figs.append(figure(png_data_uri(run.path("periods/site_counts.png")), alt="Sites through time",
                           caption="Sites per block and change from the block before."))
    maps_info = info.get("maps") or {}
    if run.has("periods/density_maps.png"):
        exact = "exact" in str(maps_info.get("sites_on_png", ""))
        if exact and not run.show_sites:
            blocks.append(note("periods/density_maps.png shows exact site positions, so it is left out of this "
                               "report; rebuild it with --show-sites to include it."))
        else:
            figs.append(figure(png_data_uri(run.path("periods/density_maps.png")), alt="Density maps per block",
                               caption=f"Kernel density per block ({maps_info.get('units', '')}); "
                                       f"{maps_info.get('sites_on_png', '')}.", wide=True))
    blocks.append(figures(figs))
    windows = run.csv("periods/windows/window_metrics.csv")
    if windows is not None and not windows.empty:
        cols = [c for c in ("window", "learner", "auc_mean", "auc_sd", "boyce_mean", "n_sites", "effective_sites")
                if c in windows.columns]
        blocks.append(table(cols, [[num(v) if isinstance(v, float) else v for v in r]
                                   for r in windows[cols].itertuples(index=False)],
                            caption="Learners per time window (periods/windows/window_metrics.csv)",
                            numeric=[not isinstance(windows[c].iloc[0], str) for c in cols]))
    cont = run.csv("periods/windows/continuity.csv")
    if cont is not None and not cont.empty:
        blocks.append(table(list(cont.columns), [[num(v) if isinstance(v, float) else v for v in r]
                                                 for r in cont.itertuples(index=False)],
                            caption="Continuity of the high zones between consecutive windows "
                                    "(periods/windows/continuity.csv)",
                            numeric=[not isinstance(cont[c].iloc[0], str) for c in cont.columns]))
    return section("periods", "Sites through time", blocks)


# ---------------------------------------------------------------- external check


def check(run):
    folders = sorted(p.parent for p in (run.folder / "check").glob("*/check.csv"))
    if not folders:
        return absent("check", "Check on later-found sites", "check/LEARNER/check.csv not found: the experiment "
                      "names no later-found sites ([check] sites).")
    blocks = [para("Sites found after the model was made, not used to fit or calibrate it. A check on few sites "
                   "is weak, and it is fair only on sites found by survey that did not follow the map.")]
    for folder in folders:
        frame = run.csv(folder.relative_to(run.folder) / "check.csv")
        rows = [(r["zone"], num(r["sites_in_zone"], 1), share_ci(r["site_share"], r["site_share_low"],
                                                                 r["site_share_high"]),
                 pct(r["area_share"]), num(r["gain"], 2), num(r["p_value"], 4))
                for _, r in frame.iterrows() if r["zone"] != "all"]
        blocks.append(table(["zone", "new sites in zone", "share (95 % interval)", "area share", "gain",
                             "p (one-sided binomial)"], rows, numeric=[False] + [True] * 5,
                            caption=f"{folder.name}: new sites per zone (check/{folder.name}/check.csv)"))
        total = frame[frame["zone"] == "all"]
        lines = []
        if not total.empty:
            t = total.iloc[0]
            lines.append(f"{folder.name}: {num(t['n_sites'], 0)} new sites; AUC {num(t.get('auc'))}, "
                         f"Boyce index {num(t.get('boyce'))}.")
        lines += [str(v) for v in frame.get("verdict", []) if isinstance(v, str)]
        blocks.append(items(lines))
    return section("check", "Check on later-found sites", blocks)

