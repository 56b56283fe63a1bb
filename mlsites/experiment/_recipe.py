"""What a model card records so that a map can rebuild the model's features.

A model is only as good as the layers it reads. The card therefore names every
feature's file with its hash, and also how the layers were made (the DEM, the
terrain settings, the input rasters, the distance and stream vectors), so a map of
another DEM can derive the same features with the same settings, and the zones
calibrated by the cross-validation, so the map cuts them at the same area shares.
"""

from __future__ import annotations

from pathlib import Path

from mlsites.experiment._hashing import file_digest

__all__ = ["feature_recipe", "zone_calibration"]


def feature_recipe(exp, layers, features, hashes, *, cache_folder=None) -> dict:
    """The card entries that rebuild an experiment's features.

    Parameters
    ----------
    exp : Experiment
    layers : dict of str to (path, kind)
        The feature layers of the run, as :func:`derive_layers` returns them.
    features : sequence of str
        Feature names in the model's order.
    hashes : dict
        Input file hashes of the run (:func:`input_hashes`).
    cache_folder : path-like, optional
        The run's cache folder (``<runs_dir>/.cache``), where a map of another DEM
        puts its derived layers by default.

    Returns
    -------
    dict
        ``feature_layers``: one entry per feature, in order, with ``name``,
        ``source`` ("terrain" for a layer derived from the DEM, "input" for a
        raster of ``[inputs]``), ``path``, ``kind``, ``band`` and ``sha256``;
        ``terrain``: the DEM (path, hash), the terrain settings, the distance
        vectors and stream lines (path, hash each) and the cache folder.
    """
    from mlsites.experiment._samples import terrain_settings

    entries = []
    for name in features:
        path, kind = layers[name]
        if name in exp["inputs"]:
            spec = exp["inputs"][name]
            entries.append({"name": name, "source": "input", "path": str(path), "kind": kind,
                            "band": int(spec.get("band", 1)), "sha256": hashes[f"inputs.{name}"]["sha256"]})
        else:
            entries.append({"name": name, "source": "terrain", "path": str(path), "kind": kind, "band": 1,
                            "sha256": file_digest(path)})
    settings = terrain_settings(exp)
    stream = settings.stream_vector
    terrain = {
        "dem": {"path": str(exp["study"]["dem"]), "sha256": hashes["study.dem"]["sha256"]},
        "settings": {"layers": list(settings.layers), "tpi_radii_m": list(settings.tpi_radii_m),
                     "landform_lookup_cells": settings.landform_lookup_cells,
                     "landform_flatness_deg": settings.landform_flatness_deg,
                     "stream_threshold_km2": settings.stream_threshold_km2},
        "distances": {n: {"path": str(p), "sha256": hashes[f"distances.{n}"]["sha256"]}
                      for n, p in settings.vectors.items()},
        "stream_lines": ({"path": str(stream), "sha256": hashes["terrain.stream_lines"]["sha256"]}
                         if stream else None),
        "cache_folder": str(Path(cache_folder)) if cache_folder is not None else None,
    }
    return {"feature_layers": entries, "terrain": terrain}


def zone_calibration(zones, learner) -> dict:
    """The card entry with a learner's calibrated zones, from ``CrossValResult.zones``.

    Returns
    -------
    dict
        ``remainder`` (name of the lowest zone) and ``zones``: from the top, each
        with ``name``, ``target``, ``area_share`` (cumulative share of the area the
        map gives this zone and all above it), ``heldout_site_share`` with
        ``heldout_site_share_ci_low`` / ``_ci_high`` and ``n_heldout_sites``.
    """
    rows = zones[zones["learner"] == learner]
    keys = ("target", "area_share", "heldout_site_share", "heldout_site_share_ci_low",
            "heldout_site_share_ci_high")
    out = [{"name": str(r["zone"]), **{k: float(r[k]) for k in keys}, "n_heldout_sites": int(r["n_heldout_sites"])}
           for _, r in rows.iloc[:-1].iterrows()]
    return {"remainder": str(rows["zone"].iloc[-1]), "zones": out}
