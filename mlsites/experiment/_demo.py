"""The fictional demo study: a valley, site records of invented phases, survey strips.

Everything is invented and deterministic from a seed. The landscape comes from
:func:`mlsites.synthetic.make_landscape` (one valley, 6 km north-south by 9 km
east-west): the study area is its western 6 x 6 km, and a neighbouring area
overlapping it by 1 km holds the DEM for the transfer example. Sites of five
invented phases are placed with :func:`mlsites.synthetic.make_virtual_sites` by
known preferences that shift over time: the two early phases keep to gentle
ground near the water, the middle phase mixes slope, aspect, position and water,
the two late phases seek high convex ground. Surveyors recorded most sites inside
the walked strips and few outside; some of the sites nobody recorded become the
"later found" sites of the external check. ``demo_data/make_demo.py`` and
``mlsites demo`` call :func:`write_demo_data`.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from mlsites._files import replacing
from mlsites.errors import OutputExistsError

__all__ = ["DEMO_FILES", "DEMO_SETTINGS", "DEMO_CATEGORIES", "DEMO_REGIMES", "write_demo_data",
           "prepare_demo_folder"]

#: Files written by :func:`write_demo_data`.
DEMO_FILES = ("dem.tif", "soil.tif", "streams.gpkg", "sites.gpkg", "survey.gpkg", "later_sites.gpkg",
              "truth.tif", "neighbour_dem.tif")
#: Settings of the files shipped in ``demo_data/`` (``experiments/demo.toml`` expects them).
DEMO_SETTINGS = dict(shape=(600, 600), cellsize=10.0, n_sites=420, n_later=60, full=True, random_state=7)
#: Width of the neighbouring area east of the study area (``full`` demo), and of its
#: overlap with it, as shares of the study area's width (400 and 100 columns).
_NEIGHBOUR_SHARE, _OVERLAP_SHARE = 2 / 3, 1 / 6


def _phase_table():
    from mlsites.synthetic import PHASES

    names = list(PHASES)
    table = {n: tuple(float(v) for v in PHASES[n]) for n in names}
    for a, b in zip(names, names[1:]):
        table[f"{a} to {b}"] = (float(PHASES[a][0]), float(PHASES[b][1]))
    return table


#: The demo's dating categories -> [start, end) years: the five invented phases and the
#: four spans of two adjacent phases ([periods.categories] of experiments/periods.toml).
DEMO_CATEGORIES = _phase_table()


def _regimes():
    from mlsites.synthetic import DEFAULT_PREFERENCE, PHASE_PREFERENCES

    return {
        # (share of the sites, phases, spans of two phases, preference terms)
        "early": (0.35, ("Reedbank phase", "Tallow Hill phase"), ("Reedbank phase to Tallow Hill phase",),
                  PHASE_PREFERENCES["Mirewalk phase"]),
        "middle": (0.25, ("Copperlane phase",),
                   ("Tallow Hill phase to Copperlane phase", "Copperlane phase to Quernstone phase"),
                   DEFAULT_PREFERENCE),
        "late": (0.40, ("Quernstone phase", "Lantern Road phase"), ("Quernstone phase to Lantern Road phase",),
                 PHASE_PREFERENCES["Spurfire phase"]),
    }


#: How settlement preferences change over the demo's chronology: regime -> (share of
#: the sites, phases, two-phase spans its records may carry, preference terms as in
#: :data:`mlsites.synthetic.DEFAULT_PREFERENCE`). Early: near water on gentle ground;
#: late: high convex ground (positive TPI).
DEMO_REGIMES = _regimes()
#: Share of a regime's records dated only to a span of two phases.
_SPAN_SHARE = 1 / 3


def _write_vector(frame, path: Path, layer: str):
    with replacing(path) as tmp:
        frame.to_file(tmp, layer=layer, driver="GPKG")


def _write_float(path: Path, grid, array, description, tags):
    from mlsites.grid import RasterWriter

    with RasterWriter(path, grid, dtype=np.float32, description=description, tags=tags) as w:
        w.write(np.asarray(array, dtype=np.float32))


def _round_to(array, step):
    return (np.round(np.asarray(array, dtype=np.float64) / step) * step).astype(np.float32)


def write_demo_data(directory, *, shape=(600, 600), cellsize: float = 10.0, n_sites: int = 360,
                    n_later: int = 0, full: bool = False, random_state: int = 7,
                    overwrite: bool = False) -> dict:
    """Write the fictional demo study into ``directory``.

    Parameters
    ----------
    directory : path-like
        Created if missing.
    shape : (int, int), default (600, 600)
        Rows and columns of the study area.
    cellsize : float, default 10.0
        Cell size in metres.
    n_sites : int, default 360
        Virtual sites placed before survey bias (about half get recorded).
    n_later : int, default 0
        Sites nobody recorded that become the "later found" sites of
        ``later_sites.gpkg`` (fewer if fewer went unrecorded); 0 writes no such
        file.
    full : bool, default False
        The shipped demo (:data:`DEMO_SETTINGS`): preferences that shift over
        time, a neighbouring area and elevations to the centimetre (see
        Notes). False gives the small studies of the tests: one preference
        (:data:`mlsites.synthetic.DEFAULT_PREFERENCE`) and every file on the
        study grid.
    random_state : int, default 7
        Seed of the landscape and the sites; the same seed gives the same files.
    overwrite : bool, default False
        Replace existing files; otherwise :class:`OutputExistsError`.

    Returns
    -------
    dict of str to Path
        ``dem``, ``soil``, ``streams``, ``sites``, ``survey``, ``truth``, with
        ``n_later`` also ``later_sites``, with ``full`` also ``neighbour_dem``.

    Notes
    -----
    The preference surfaces use slope, northness, TPI (100 m disc) and the
    distance to the carved channels; the models never see them, only the files.
    ``truth.tif`` (float32, 0-1) is the intensity the sites were drawn from, up
    to their clustering.

    With ``full`` the landscape is one valley of ``shape[0]`` rows and 1.5
    times ``shape[1]`` columns; the study area is its first ``shape[1]``
    columns and ``neighbour_dem.tif`` its last two thirds of ``shape[1]`` (one
    sixth of ``shape[1]`` shared with the study area: 400 and 100 columns for
    the demo). ``soil.tif`` and ``streams.gpkg`` cover both areas, so a model
    can be mapped on the neighbour with ``mlsites map CARD --dem
    neighbour_dem.tif``. Each regime of :data:`DEMO_REGIMES` places its share
    of ``n_sites`` by its own preference surface ``t_r``; the truth is
    ``sum_r n_r t_r / sum(t_r)`` scaled to a maximum of 1, stored in steps of
    1/4096. Each site gets one of its regime's phases, or one time in three
    one of its two-phase spans, with that category's years
    (:data:`DEMO_CATEGORIES`). Six walked strips 720 m wide record a site
    inside with probability 0.85 and outside 0.05; ``n_later`` of the
    unrecorded sites, drawn at random, are the later-found sites, most of
    them outside the strips.
    """
    from rasterio.windows import Window

    from mlsites.synthetic import make_landscape, make_virtual_sites
    from mlsites.terrain import distance_to_cells, northness, slope, tpi

    directory = Path(directory)
    paths = {Path(f).stem: directory / f for f in DEMO_FILES}
    if not full:
        paths.pop("neighbour_dem")
    if not n_later:
        paths.pop("later_sites")
    existing = [str(p) for p in paths.values() if p.exists()]
    if existing and not overwrite:
        raise OutputExistsError(f"{', '.join(existing)} already exist(s); use another folder or overwrite")
    directory.mkdir(parents=True, exist_ok=True)
    rows, cols = shape
    width_m = min(shape) * cellsize
    options = dict(cellsize=cellsize, random_state=random_state, valley_width_m=min(1000.0, 0.3 * width_m),
                   relief_m=min(300.0, 0.05 * width_m))
    tags = {"source": "fictional landscape (mlsites.synthetic); not a real place"}
    if full:
        n_neighbour = max(1, round(_NEIGHBOUR_SHARE * cols))
        whole = (rows, cols + n_neighbour - round(_OVERLAP_SHARE * cols))
        valley = make_landscape(whole, **options)
        # soil and channel lines of the whole valley, the DEM of the study area only
        valley.write(directory, overwrite=True)
        window = Window(whole[1] - n_neighbour, 0, n_neighbour, rows)
        # Elevations to the centimetre, so the shipped GeoTIFFs compress better.
        _write_float(paths["neighbour_dem"], make_landscape(whole, window=window, **options).grid,
                     _round_to(valley.dem[:, whole[1] - n_neighbour:], 0.01), "elevation",
                     dict(tags, layer="elevation", units="m", area="neighbouring area of the demo valley"))
        del valley
        land = make_landscape(whole, window=Window(0, 0, cols, rows), **options)
        study_dem = _round_to(land.dem, 0.01)
        _write_float(paths["dem"], land.grid, study_dem, "elevation", dict(tags, layer="elevation", units="m"))
    else:
        land = make_landscape(shape, **options)
        land.write(directory, overwrite=overwrite)
        study_dem = land.dem
    dem = study_dem.astype(np.float64)
    layers = {
        "slope": slope(dem, cellsize),
        "northness": northness(dem, cellsize),
        "tpi": tpi(dem, cellsize, radius=100.0),
        "stream_distance": distance_to_cells(land.streams > 0, cellsize),
    }
    strip = max(10 * cellsize, 0.12 * width_m)
    rng = np.random.default_rng(random_state)
    if full:
        everyone, survey, truth = _shifting_sites(layers, land.grid, n_sites, strip, rng, random_state)
        inside = everyone.within(survey.union_all()).to_numpy()
        recorded = rng.random(len(everyone)) < np.where(inside, 0.85, 0.05)
        sites = everyone[recorded].reset_index(drop=True)
    else:
        virtual = make_virtual_sites(layers, land.grid, n_sites=n_sites, strip_width_m=strip,
                                     random_state=random_state)
        sites, survey, truth = virtual.sites, virtual.survey, virtual.truth
        everyone, recorded = virtual.all_sites, virtual.all_sites["recorded"].to_numpy()
        everyone = everyone[sites.columns]
    _write_vector(sites, paths["sites"], "sites")
    _write_vector(survey, paths["survey"], "survey")
    if n_later:
        missed = np.flatnonzero(~recorded)
        later = everyone.iloc[np.sort(rng.choice(missed, min(n_later, missed.size), replace=False))]
        later = later.reset_index(drop=True)
        later["site_id"] = [f"LF{i:03d}" for i in range(len(later))]
        _write_vector(later, paths["later_sites"], "later_sites")
    truth = np.where(np.isnan(study_dem), np.nan, truth / np.nanmax(truth))
    # Steps of 1/4096 keep the file small; ranks and AUCs do not notice them.
    _write_float(paths["truth"], land.grid, _round_to(truth, 1 / 4096), "true preference surface",
                 dict(tags, layer="true preference surface", units="relative intensity 0-1"))
    return paths


def _shifting_sites(layers, grid, n_sites, strip_width_m, rng, random_state):
    """Sites of every regime of DEMO_REGIMES (all placed, none yet recorded), survey strips, truth."""
    import geopandas as gpd
    import pandas as pd

    from mlsites.synthetic import make_virtual_sites
    from mlsites.synthetic._virtual_sites import _survey_strips

    frames, truth = [], np.zeros(grid.shape)
    for k, (share, phases, spans, preference) in enumerate(DEMO_REGIMES.values()):
        n = max(1, round(share * n_sites))
        placed = make_virtual_sites(layers, grid, n_sites=n, preference=preference, n_survey_strips=1,
                                    detect_inside=1.0, detect_outside=1.0, random_state=random_state + 1 + k)
        truth += n * np.nan_to_num(placed.truth) / np.nansum(placed.truth)
        span = rng.random(n) < _SPAN_SHARE
        names = np.where(span, rng.choice(spans, n), rng.choice(phases, n))
        frame = placed.all_sites[["kind", "certainty", "geometry"]].copy()
        frame.insert(0, "phase", names)
        frames.append(frame)
    sites = gpd.GeoDataFrame(pd.concat(frames, ignore_index=True), geometry="geometry", crs=grid.crs)
    sites.insert(0, "site_id", [f"VS{i:04d}" for i in range(len(sites))])
    sites.insert(2, "start_year", [DEMO_CATEGORIES[p][0] for p in sites["phase"]])
    sites.insert(3, "end_year", [DEMO_CATEGORIES[p][1] for p in sites["phase"]])
    survey = _survey_strips(grid, rng, 6, strip_width_m, (1.0, 2.0, 3.0))
    return sites, survey, truth


def _source_folders():
    """Folders that may hold ``demo_data/`` and ``experiments/``: the source checkout, the cwd."""
    here = Path(__file__).resolve().parent.parent.parent
    return [here] if here == Path.cwd().resolve() else [here, Path.cwd().resolve()]


def prepare_demo_folder(out_dir, *, log=None) -> Path:
    """Lay out a runnable copy of the demo in ``out_dir``; return its experiment file.

    ``out_dir`` gets ``experiments/`` (demo.toml and its variants) and ``demo_data/``
    (copied from the source folder, or built with :data:`DEMO_SETTINGS` when no
    complete copy is found), so the experiments' relative paths (``../demo_data``,
    ``../runs``, ``../models``) resolve inside ``out_dir``. Files already there
    are kept.

    Raises
    ------
    InputError
        ``experiments/demo.toml`` is found neither in the source folder nor in the
        working directory.
    """
    import shutil

    from mlsites.errors import InputError

    log = log or (lambda m: None)
    out_dir = Path(out_dir)
    sources = _source_folders()
    toml = next((f / "experiments" / "demo.toml" for f in sources if (f / "experiments" / "demo.toml").exists()),
                None)
    target = out_dir / "experiments" / "demo.toml"
    if not target.exists() and toml is None:
        raise InputError("experiments/demo.toml not found next to the mlsites sources or in the working "
                         "folder; run `mlsites demo` from the mlsites source folder")
    if toml is not None:
        # the variants too (demo_*.toml extend demo.toml), so they run in OUT as well
        target.parent.mkdir(parents=True, exist_ok=True)
        for path in sorted(toml.parent.glob("*.toml")):
            if not (target.parent / path.name).exists():
                shutil.copy2(path, target.parent / path.name)
    data = out_dir / "demo_data"
    if all((data / f).exists() for f in DEMO_FILES):
        return target
    shipped = next((f / "demo_data" for f in sources if all((f / "demo_data" / n).exists() for n in DEMO_FILES)),
                   None)
    data.mkdir(parents=True, exist_ok=True)
    if shipped is not None and shipped.resolve() != data.resolve():
        for name in DEMO_FILES:
            shutil.copy2(shipped / name, data / name)
        log(f"copied the demo data from {shipped} to {data}")
    else:
        log(f"building the demo data in {data}")
        write_demo_data(data, overwrite=True, **DEMO_SETTINGS)
    return target
