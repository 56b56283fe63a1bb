"""The methods paragraph: what the run did, in its own settings, with the published methods cited.

:func:`methods_section` writes the paragraphs from the run's settings and files
(never from defaults the run did not use) and lists the references it cites, so
the report can be cited as it stands.
"""

from __future__ import annotations

from pathlib import Path

__all__ = ["REFERENCES", "methods_section", "learner_settings"]

#: Citation key -> full reference. A key is cited as "(key)" in the text.
REFERENCES = {
    "Horn 1981": "Horn, B. K. P. (1981). Hill shading and the reflectance map. Proceedings of the IEEE 69(1), "
                 "14–47. doi:10.1109/PROC.1981.11918",
    "Zevenbergen & Thorne 1987": "Zevenbergen, L. W. & Thorne, C. R. (1987). Quantitative analysis of land "
                                 "surface topography. Earth Surface Processes and Landforms 12(1), 47–56. "
                                 "doi:10.1002/esp.3290120107",
    "Guisan et al. 1999": "Guisan, A., Weiss, S. B. & Weiss, A. D. (1999). GLM versus CCA spatial modeling of "
                          "plant species distribution. Plant Ecology 143, 107–122. doi:10.1023/A:1009841519580",
    "Riley et al. 1999": "Riley, S. J., DeGloria, S. D. & Elliot, R. (1999). A terrain ruggedness index that "
                         "quantifies topographic heterogeneity. Intermountain Journal of Sciences 5, 23–27.",
    "Wilson et al. 2007": "Wilson, M. F. J., O'Connell, B., Brown, C., Guinan, J. C. & Grehan, A. J. (2007). "
                          "Multiscale terrain analysis of multibeam bathymetry data for habitat mapping on the "
                          "continental slope. Marine Geodesy 30, 3–35. doi:10.1080/01490410701295962",
    "Jasiewicz & Stepinski 2013": "Jasiewicz, J. & Stepinski, T. F. (2013). Geomorphons — a pattern recognition "
                                  "approach to classification and mapping of landforms. Geomorphology 182, "
                                  "147–156. doi:10.1016/j.geomorph.2012.11.005",
    "Barnes et al. 2014": "Barnes, R., Lehman, C. & Mulla, D. (2014). Priority-flood: an optimal "
                          "depression-filling and watershed-labeling algorithm for digital elevation models. "
                          "Computers & Geosciences 62, 117–127. doi:10.1016/j.cageo.2013.04.024",
    "O'Callaghan & Mark 1984": "O'Callaghan, J. F. & Mark, D. M. (1984). The extraction of drainage networks "
                               "from digital elevation data. Computer Vision, Graphics, and Image Processing "
                               "28(3), 323–344. doi:10.1016/S0734-189X(84)80011-0",
    "Rennó et al. 2008": "Rennó, C. D., Nobre, A. D., Cuartas, L. A., Soares, J. V., Hodnett, M. G., Tomasella, "
                         "J. & Waterloo, M. J. (2008). HAND, a new terrain descriptor using SRTM-DEM. Remote "
                         "Sensing of Environment 112(9), 3469–3481. doi:10.1016/j.rse.2008.03.018",
    "Phillips et al. 2009": "Phillips, S. J., Dudík, M., Elith, J., Graham, C. H., Lehmann, A., Leathwick, J. & "
                            "Ferrier, S. (2009). Sample selection bias and presence-only distribution models: "
                            "implications for background and pseudo-absence data. Ecological Applications 19(1), "
                            "181–197. doi:10.1890/07-2153.1",
    "Roberts et al. 2017": "Roberts, D. R. et al. (2017). Cross-validation strategies for data with temporal, "
                           "spatial, hierarchical, or phylogenetic structure. Ecography 40(8), 913–929. "
                           "doi:10.1111/ecog.02881",
    "Breiman 2001": "Breiman, L. (2001). Random forests. Machine Learning 45, 5–32. doi:10.1023/A:1010933404324",
    "Valavi et al. 2021": "Valavi, R., Elith, J., Lahoz-Monfort, J. J. & Guillera-Arroita, G. (2021). Modelling "
                          "species presence-only data with random forests. Ecography 44(12), 1731–1742. "
                          "doi:10.1111/ecog.05615",
    "Friedman et al. 2010": "Friedman, J., Hastie, T. & Tibshirani, R. (2010). Regularization paths for "
                            "generalized linear models via coordinate descent. Journal of Statistical Software "
                            "33(1), 1–22. doi:10.18637/jss.v033.i01",
    "Friedman 2001": "Friedman, J. H. (2001). Greedy function approximation: a gradient boosting machine. Annals "
                     "of Statistics 29(5), 1189–1232. doi:10.1214/aos/1013203451",
    "Kingma & Ba 2015": "Kingma, D. P. & Ba, J. (2015). Adam: a method for stochastic optimization. "
                        "International Conference on Learning Representations. arXiv:1412.6980",
    "Zimmermann & Zysno 1980": "Zimmermann, H.-J. & Zysno, P. (1980). Latent connectives in human decision "
                               "making. Fuzzy Sets and Systems 4(1), 37–51. doi:10.1016/0165-0114(80)90062-7",
    "Kvamme 1988": "Kvamme, K. L. (1988). Development and testing of quantitative models. In W. J. Judge & "
                   "L. Sebastian (eds), Quantifying the Present and Predicting the Past: Theory, Method, and "
                   "Application of Archaeological Predictive Modeling, 325–428.",
    "Hirzel et al. 2006": "Hirzel, A. H., Le Lay, G., Helfer, V., Randin, C. & Guisan, A. (2006). Evaluating the "
                          "ability of habitat suitability models to predict species presences. Ecological "
                          "Modelling 199(2), 142–152. doi:10.1016/j.ecolmodel.2006.05.017",
    "Boyce et al. 2002": "Boyce, M. S., Vernier, P. R., Nielsen, S. E. & Schmiegelow, F. K. A. (2002). Evaluating "
                         "resource selection functions. Ecological Modelling 157, 281–300. "
                         "doi:10.1016/S0304-3800(02)00200-4",
    "Wilson 1927": "Wilson, E. B. (1927). Probable inference, the law of succession, and statistical inference. "
                   "Journal of the American Statistical Association 22, 209–212. doi:10.1080/01621459.1927.10502953",
    "Meyer & Pebesma 2021": "Meyer, H. & Pebesma, E. (2021). Predicting into unknown space? Estimating the area "
                            "of applicability of spatial prediction models. Methods in Ecology and Evolution "
                            "12(9), 1620–1633. doi:10.1111/2041-210X.13650",
    "Lundberg & Lee 2017": "Lundberg, S. M. & Lee, S.-I. (2017). A unified approach to interpreting model "
                           "predictions. Advances in Neural Information Processing Systems 30, 4765–4774.",
    "Lundberg et al. 2020": "Lundberg, S. M. et al. (2020). From local explanations to global understanding with "
                            "explainable AI for trees. Nature Machine Intelligence 2, 56–67. "
                            "doi:10.1038/s42256-019-0138-9",
    "Fisher et al. 2019": "Fisher, A., Rudin, C. & Dominici, F. (2019). All models are wrong, but many are useful: "
                          "learning a variable's importance by studying an entire class of prediction models "
                          "simultaneously. Journal of Machine Learning Research 20(177), 1–81.",
    "Ratcliffe 2000": "Ratcliffe, J. H. (2000). Aoristic analysis: the spatial interpretation of unspecific "
                      "temporal events. International Journal of Geographical Information Science 14(7), 669–679. "
                      "doi:10.1080/136588100424963",
    "Crema 2012": "Crema, E. R. (2012). Modelling temporal uncertainty in archaeological analysis. Journal of "
                  "Archaeological Method and Theory 19, 440–461. doi:10.1007/s10816-011-9122-3",
    "Scott 1992": "Scott, D. W. (1992). Multivariate Density Estimation: Theory, Practice, and Visualization. "
                  "Wiley, New York.",
    "Spearman 1904": "Spearman, C. (1904). The proof and measurement of association between two things. American "
                     "Journal of Psychology 15(1), 72–101. doi:10.2307/1412159",
    "Pedregosa et al. 2011": "Pedregosa, F. et al. (2011). Scikit-learn: machine learning in Python. Journal of "
                             "Machine Learning Research 12, 2825–2830.",
}

def _cited(text):
    """Reference keys cited in ``text`` (each key written as it is in :data:`REFERENCES`)."""
    return [k for k in REFERENCES if k in text]


def _list(words):
    words = list(words)
    if len(words) <= 1:
        return "".join(words)
    return ", ".join(words[:-1]) + " and " + words[-1]


def _g(v):
    if isinstance(v, float):
        return f"{v:g}"
    if isinstance(v, (list, tuple)):
        return "(" + ", ".join(_g(x) for x in v) + ")"
    return str(v)


def learner_settings(name, params):
    """The preset's estimator settings with the experiment's ``params`` applied: a flat dict."""
    from mlsites.learners import make_learner

    params = {k: tuple(v) if isinstance(v, list) else v for k, v in (params or {}).items()}
    pipe = make_learner(name, **params)
    out = dict(pipe.named_steps["model"].get_params(deep=False))
    if "encode" in pipe.named_steps:
        out.update({f"encode_{k}": v for k, v in pipe.named_steps["encode"].get_params(deep=False).items()})
    return out


def _fuzzy_models(run):
    """(final model, list of fold models) of the run's fuzzy baseline, or None when its models are absent."""
    if run.models_dir is None or not (run.models_dir / "fuzzy.card.json").is_file():
        return None
    from mlsites.errors import MlsitesError
    from mlsites.experiment._models import load_fold_models, load_model

    try:
        saved = load_model(run.models_dir / "fuzzy.card.json")
        folds = load_fold_models(saved)
    except MlsitesError:
        return None

    def model(est):
        return est.named_steps["model"] if hasattr(est, "named_steps") else est

    return model(saved.estimator), [model(f) for f in folds]


def _fuzzy_layers(p, models):
    """How the fuzzy baseline chose its layers, and which the final model (and the folds) used."""
    rule = p.get("layer_selection", "all")
    if rule == "all":
        return "; every layer combined"
    if rule == "top_k":
        text = (f"; the {p['max_layers']} layers whose own membership has the highest weighted training AUC "
                "(sites against background), chosen in each fold from that fold's training rows only")
    else:
        limit = f", at most {p['max_layers']} layers" if p.get("max_layers") else ""
        text = (f"; layers chosen in each fold from that fold's training rows only by forward selection: first "
                f"the layer whose own membership has the highest weighted training AUC (sites against "
                f"background), then, one at a time, the layer that raises the training AUC of the combination "
                f"most, while it gains at least {_g(float(p['selection_tolerance']))}{limit}")
        if p["operator"] == "gamma_operator" and p.get("gamma") is None:
            text += " (the combination scored as the algebraic product until gamma is chosen on the layers kept)"
    if models is None or getattr(models[0], "layers_used_", None) is None:
        return text
    final, folds = models
    names = getattr(final, "feature_names_in_", None)
    used = [str(names[j]) if names is not None else f"column {j}" for j in final.layers_used_]
    text += f"; the final model combines {', '.join(used)} ({len(used)} of {final.n_features_in_} layers)"
    counts = [len(f.layers_used_) for f in folds if getattr(f, "layers_used_", None) is not None]
    if counts:
        text += (f", each fold {counts[0]} layer{'s' if counts[0] != 1 else ''}" if min(counts) == max(counts)
                 else f", the folds {min(counts)} to {max(counts)} layers")
    return text


def _learner_sentence(run, name, table):
    s = run.settings
    params = (s.get("learners", {}).get("settings") or {}).get(name, {})
    p = learner_settings(name, params)
    if name == "random_forest":
        draws = ""
        if "max_samples" in params:
            draws = f"max_samples = {_g(params['max_samples'])}"
        elif table is not None:
            n_sites = table.loc[table["label"] == 1, "site_id"].nunique()
            share = min(1.0, 2.0 * n_sites / float(table["weight"].sum()))
            draws = (f"each tree drawing rows in proportion to their weights, {share:.3f} of the weight total "
                     f"(about two draws per site: the down-sampled forest of Valavi et al. 2021)")
        leaf = f", at least {p['min_samples_leaf']} samples per leaf" if p.get("min_samples_leaf", 1) != 1 else ""
        depth = f", depth at most {p['max_depth']}" if p.get("max_depth") else ""
        return (f"a random forest (Breiman 2001) of {p['n_estimators']} trees, {p['max_features']} of the layer "
                f"columns tried per split{leaf}{depth}" + (f", {draws}" if draws else ""))
    if name == "logistic":
        splines = p.get("encode_splines") or 0
        return (f"logistic regression on standardised layers with an L2 penalty of strength "
                f"{_g(p['penalty_strength'])} on the weighted mean log-loss (as in Friedman et al. 2010)"
                + (f" and cubic B-spline terms with {splines} knots per numeric layer" if splines else ""))
    if name == "mlp":
        return (f"a multilayer perceptron with hidden layers {_g(p['hidden_layer_sizes'])}, {p['activation']} "
                f"units, L2 penalty {_g(p['alpha'])}, trained by adam (Kingma & Ba 2015) with learning rate "
                f"{_g(p['learning_rate_init'])} for at most {p['max_iter']} epochs, no early stopping")
    if name == "gradient_boosting":
        return (f"histogram gradient boosting (Friedman 2001) with {p['max_iter']} trees of at most "
                f"{p['max_leaf_nodes']} leaves, learning rate {_g(p['learning_rate'])}, categorical layers split "
                "natively")
    if name == "fuzzy":
        op = p["operator"]
        models = _fuzzy_models(run)
        text = (f"a percentile-fuzzy suitability baseline: per numeric layer a trapezoid membership from the "
                f"P{_g(p['percentiles'][0])}/P{_g(p['percentiles'][1])}/P{_g(p['percentiles'][2])}/"
                f"P{_g(p['percentiles'][3])} percentiles of the layer at the training sites, never below "
                f"{_g(p['membership_floor'])}; per categorical layer each class's relative site density; "
                f"memberships combined by the {op.replace('_', ' ')}")
        if op == "gamma_operator":
            text += " (Zimmermann & Zysno 1980)"
            if p.get("gamma") is not None:
                text += f" with gamma = {_g(p['gamma'])} as given"
            else:
                text += (", its gamma chosen in each fold from that fold's training rows only (the smallest gamma "
                         "on a grid of 0 to 1 by 0.05 whose weighted training AUC is within 0.001 of the best)")
                gammas = None if models is None else (models[0].gamma_, [f.gamma_ for f in models[1]])
                if gammas is not None and gammas[0] is not None:
                    folds = [g for g in gammas[1] if g is not None]
                    text += f": {_g(gammas[0])} for the final model"
                    if folds:
                        text += f", {_g(min(folds))} to {_g(max(folds))} in the folds"
        if op in ("gamma_operator", "algebraic_product") and p.get("rescale_product", True):
            text += ", reported as the geometric mean per layer used (same order of cells)"
        return text + _fuzzy_layers(p, models)
    return name


_TERRAIN_TEXT = {
    "slope": "slope (Horn 1981)", "aspect": "aspect (Horn 1981)",
    "northness": "northness and eastness, the cosine and sine of aspect (Horn 1981)",
    "profile_curvature": "profile and plan curvature (Zevenbergen & Thorne 1987)",
    "ruggedness": "the terrain ruggedness index (Riley et al. 1999)",
    "roughness": "roughness, the range of the 3 × 3 window (Wilson et al. 2007)",
    "landform": "landform classes by geomorphons (Jasiewicz & Stepinski 2013)",
    "stream_distance": "the distance to streams",
    "height_above_drainage": "height above the nearest drainage (Rennó et al. 2008) along D8 flow paths "
                             "(O'Callaghan & Mark 1984) on the DEM with depressions filled (Barnes et al. 2014)",
}


def _terrain_paragraph(run):
    s = run.settings
    t = s.get("terrain", {})
    features = (run.json("sampling.json") or {}).get("features") or run.manifest.get("samples", {}).get("features", [])
    layers = list(t.get("layers") or [])
    parts = []
    for layer in layers:
        if layer == "eastness" and "northness" in layers:
            continue
        if layer == "plan_curvature" and "profile_curvature" in layers:
            continue
        if layer == "tpi":
            radii = ", ".join(f"{r:g}" for r in t.get("tpi_radii_m") or [])
            parts.append(f"the topographic position index over discs of {radii} m (Guisan et al. 1999)")
        elif layer == "landform":
            parts.append(f"{_TERRAIN_TEXT['landform']} with a lookup of {t.get('landform_lookup_cells')} cells and "
                         f"a flatness threshold of {_g(t.get('landform_flatness_deg'))}°")
        elif layer == "stream_distance":
            how = ("the mapped stream lines" if t.get("stream_lines") else
                   f"streams draining more than {_g(t.get('stream_threshold_km2'))} km²")
            parts.append(f"the distance to {how}")
        elif layer in _TERRAIN_TEXT:
            parts.append(_TERRAIN_TEXT[layer])
        else:
            parts.append(layer.replace("_", " "))
    cell = ""
    if run.grid is not None:
        dx, dy = run.grid.res
        cell = f" ({dx * run.unit_m:g} m cells)"
    text = f"Terrain layers were derived from the DEM{cell}: {_list(parts)}."
    inputs = s.get("inputs") or {}
    if inputs:
        text += (" Further layers were aligned onto the study grid: "
                 + _list(f"{n} ({v.get('kind', 'continuous')})" for n, v in inputs.items()) + ".")
    distances = s.get("distances") or {}
    if distances:
        text += " Distances were measured to the features of " + _list(distances) + "."
    if features:
        text += (f" The learners used {len(features)} layers ({', '.join(features)}); aspect and standardised "
                 "copies are left out by design, and pairs of layers with |Spearman ρ| above 0.99 over the study "
                 "area would have stopped the run.")
    return text


def _sampling_paragraph(run):
    s = run.settings
    sa, sampling = s.get("sampling", {}), run.json("sampling.json") or {}
    n_read, n_used = sampling.get("n_sites_read"), sampling.get("n_sites_used")
    text = f"Of {n_read} site records, {n_used} were used" if n_read is not None else "Sites were read"
    dropped = run.csv("dropped_records.csv")
    if dropped is not None and len(dropped):
        text += " (" + ", ".join(f"{n} left out: {r}" for r, n in dropped["reason"].value_counts().items()) + ")"
    text += "."
    if sa.get("one_cell_per_site"):
        text += " Each site was represented by one of its cells, drawn with the seed."
    else:
        buffer = float(sa.get("site_buffer_m", 0.0) or 0.0)
        cover = (f"the cells within {_g(buffer)} m of it" if buffer > 0 else "the cell that holds it")
        text += (f" Each point site covered {cover} (polygons: the cells whose centre they contain), which "
                 "shared one unit of weight, so every site counts once whatever its size.")
    n_bg = sampling.get("n_background_cells")
    asked = (f"{sa['background_count']}" if sa.get("background_count") and not sa.get("background_fraction")
             else f"a share {_g(sa.get('background_fraction'))} of the area")
    where = "from the whole study area"
    if sa.get("survey_areas"):
        where = ("only inside the surveyed areas (target-group background, Phillips et al. 2009)"
                 if sa.get("survey_mode") == "inside" else
                 f"with probability in proportion to the survey effort '{sa.get('effort_field')}' of the surveyed "
                 "areas (target-group background, Phillips et al. 2009)")
    text += (f" Background cells ({asked} asked for; {n_bg} with a value in every layer) were drawn at random "
             f"with the seed {s.get('study', {}).get('seed')} {where}")
    if sa.get("exclusion_m"):
        text += (f", kept {_g(sa['exclusion_m'])} m away from sites (which makes them pseudo-absences rather than "
                 "a sample of the landscape)")
    text += ("; all background together weighed as much as all sites, and weights were rescaled to a mean of 1.")
    return text


def _folds_paragraph(run):
    f = run.settings.get("folds", {})
    sampling = (run.json("sampling.json") or {}).get("folds") or {}
    method = sampling.get("method", f.get("method"))
    n = sampling.get("n_splits", f.get("n_splits"))
    size = sampling.get("block_size_m", f.get("block_size_m"))
    kinds = {"square_blocks": f"square spatial blocks of {_g(size)} m", "hexagon_blocks":
             f"hexagonal spatial blocks of {_g(size)} m",
             "buffered_leave_one_out": f"buffered leave-one-site-out folds (buffer {_g(f.get('buffer_m'))} m)",
             "environmental": "environmental blocks (k-means clusters of the standardised layers)",
             "random": "random folds (which flatter models on autocorrelated data)"}
    text = (f"Learners were compared by cross-validation on {n} folds of {kinds.get(method, method)} (Roberts et "
            "al. 2017), assigned once and shared by every learner, all cells of a site in one fold; each fold's "
            "model scored the held-out sites against the held-out landscape it had not seen. Measures: ROC AUC, "
            "the continuous Boyce index (Hirzel et al. 2006; Boyce et al. 2002), the share of held-out sites in "
            "the top shares of the area "
            + "(" + ", ".join(pct_words(v) for v in run.settings.get("evaluation", {}).get("top_area_shares", []))
            + ") and Kvamme's gain (Kvamme 1988); each learner's fold AUCs were compared with the best "
            "learner's by a paired test (Wilcoxon's signed-rank test with six folds or more, else a paired "
            "t-test).")
    return text


def pct_words(v):
    return f"{100 * float(v):g} %"


def _zones_paragraph(run):
    targets = run.settings.get("evaluation", {}).get("zone_targets") or {}
    zone_text = _list(f"{z} {pct_words(t)}" for z, t in targets.items())
    return (f"Zones were set by targets of held-out sites ({zone_text}; the rest of the area is 'low') and "
            "calibrated on the cross-validation, not on the training sites: every held-out site was placed at "
            "its fold's area rank, and the least area share holding each target was read off and applied to the "
            "map of the final model (refitted on all samples). Each fold's zones were tested with the other "
            "folds' calibration; held-out shares are given with 95 % Wilson intervals (Wilson 1927).")


def _maps_paragraph(run):
    infos = {p.parent.name: run.json(p.relative_to(run.folder)) for p in sorted(run.folder.glob("maps/*/map.json"))}
    if not infos:
        return ""
    names = _list(infos)
    text = (f"Maps were made of {names}: the refitted model's score per cell, the zones, and the standard "
            "deviation of the fold models' scores (spread).")
    aoa = next((i.get("applicability") for i in infos.values() if i and i.get("applicability")), None)
    if aoa:
        weights = aoa.get("weights", "equal")
        text += (f" The area of applicability (Meyer & Pebesma 2021) marks cells whose dissimilarity index — the "
                 f"distance to the nearest training sample in standardised layer space ({weights} layer "
                 f"weights), over the mean distance between training samples — exceeds the largest "
                 f"cross-validated training value below the upper whisker (threshold {aoa.get('threshold', 0):.3f}"
                 f", from {aoa.get('n_reference')} training samples).")
    return text


def _explain_paragraph(run):
    info = run.json("explain/explain.json")
    if info is None:
        return ""
    text = (f"Explanations: SHAP values (Lundberg & Lee 2017) of {info.get('n_explain')} landscape cells drawn "
            "with the seed, exact path-dependent TreeSHAP for the tree ensembles (Lundberg et al. 2020), the "
            "linear solution for logistic regression and antithetic permutation sampling against "
            f"{info.get('n_background')} background cells for the others; held-out permutation importance "
            f"(Breiman 2001; Fisher et al. 2019) with {info.get('n_repeats')} shuffles per fold and layer, "
            "measured on each fold's held-out sites and landscape; partial dependence and individual response "
            "curves.")
    contrib = run.json("explain/contributions/contributions.json")
    if contrib:
        text += (f" Contribution maps give the SHAP values of {contrib.get('learner')}'s top layers "
                 f"({', '.join(contrib.get('layers', []))}) per cell.")
    return text


def _periods_paragraph(run):
    info = run.json("periods/periods.json")
    if info is None:
        return ""
    blocks = info.get("blocks") or {}
    maps = info.get("maps") or {}
    text = (f"Dates: each site's range was spread over blocks of {_g(blocks.get('width_years'))} years "
            f"({info.get('density', {}).get('kind', 'uniform')} density; aoristic analysis, Ratcliffe 2000) and "
            f"{info.get('n_simulations')} Monte Carlo draws of one date per site gave envelopes of the counts "
            "(Crema 2012), against a null of constant numbers through time.")
    if maps.get("bandwidth_m"):
        text += (f" Density maps per block used a Gaussian kernel of {maps['bandwidth_m']:.0f} m "
                 + ("(Scott 1992)." if "Scott" in str(maps.get("bandwidth_rule", "")) else "(as given)."))
    return text


def _check_paragraph(run):
    folders = sorted(p.parent.name for p in run.folder.glob("check/*/check.csv"))
    if not folders:
        return ""
    return (f"The maps of {_list(folders)} were checked on later-found sites: their share in each zone with "
            "its Wilson interval (Wilson 1927), a one-sided exact binomial test against the zone's area share, "
            "Kvamme's gain, AUC and the Boyce index.")


def _reference_paragraph(run):
    path = run.section.get("reference_surface")
    if not path:
        return ""
    return (f"The map was compared with a reference surface ({Path(path).name}) by Spearman's rank correlation "
            "(Spearman 1904) over the mapped cells.")


def _software_paragraph(run):
    v = run.manifest.get("versions") or {}
    libs = ", ".join(f"{k} {v[k]}" for k in ("numpy", "scipy", "pandas", "scikit-learn") if k in v)
    text = f"Software: mlsites {v.get('mlsites', '')}"
    if v.get("python"):
        text += f" on Python {v['python']}"
    if libs:
        text += f", with {libs} (Pedregosa et al. 2011)"
    return text + f"; seed {run.settings.get('study', {}).get('seed')}, so the run is reproducible from its " \
                  "experiment file."


def methods_section(run):
    """The methods section: paragraphs in the run's own settings, then the references cited."""
    from mlsites.report._blocks import items, para, section

    table = None
    p = run.folder / "samples" / "samples.parquet"
    if p.is_file():
        import pandas as pd

        table = pd.read_parquet(p, columns=["label", "site_id", "weight"])
    learners = run.manifest.get("learners") or run.settings.get("learners", {}).get("use", [])
    learner_text = "; ".join(_learner_sentence(run, n, table) for n in learners)
    paragraphs = [
        _terrain_paragraph(run),
        _sampling_paragraph(run),
        f"Learners ({len(learners)}), all honouring the sample weights and the seed: {learner_text}.",
        _folds_paragraph(run),
        _zones_paragraph(run),
        _maps_paragraph(run),
        _explain_paragraph(run),
        _periods_paragraph(run),
        _check_paragraph(run),
        _reference_paragraph(run),
        _software_paragraph(run),
    ]
    paragraphs = [t for t in paragraphs if t]
    keys = list(dict.fromkeys(k for t in paragraphs for k in _cited(t)))
    refs = [REFERENCES[k] for k in sorted(keys, key=lambda k: REFERENCES[k])]
    return section("methods", "Methods", [para(t) for t in paragraphs]
                   + [{"kind": "heading", "text": "References"}, items(refs)])
