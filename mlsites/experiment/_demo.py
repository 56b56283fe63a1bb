"""The fictional demo study: a landscape, virtual site records and survey strips.

Everything is invented and deterministic from a seed: the landscape comes from
:func:`mlsites.synthetic.make_landscape`, the sites from
:func:`mlsites.synthetic._virtual_sites.make_virtual_sites` with a preference for
gentle slopes near streams, and the survey strips are the areas that were walked.
``demo_data/make_demo.py`` and ``mlsites demo`` call :func:`write_demo_data`.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from mlsites._files import replacing
from mlsites.errors import OutputExistsError

__all__ = ["DEMO_FILES", "DEMO_SETTINGS", "write_demo_data", "prepare_demo_folder"]

#: Files written by :func:`write_demo_data`.
DEMO_FILES = ("dem.tif", "soil.tif", "streams.gpkg", "sites.gpkg", "survey.gpkg")
#: Settings of the files shipped in ``demo_data/`` (``experiments/demo.toml`` expects them).
DEMO_SETTINGS = dict(shape=(600, 600), cellsize=10.0, n_sites=360, random_state=7)


def _write_vector(frame, path: Path, layer: str):
    with replacing(path) as tmp:
        frame.to_file(tmp, layer=layer, driver="GPKG")


def write_demo_data(directory, *, shape=(600, 600), cellsize: float = 10.0, n_sites: int = 260,
                    random_state: int = 7, overwrite: bool = False) -> dict:
    """Write the fictional demo study into ``directory``.

    Parameters
    ----------
    directory : path-like
        Created if missing.
    shape : (int, int), default (600, 600)
        Rows and columns of the landscape.
    cellsize : float, default 10.0
        Cell size in metres.
    n_sites : int, default 260
        Virtual sites placed before survey bias (roughly a third get recorded).
    random_state : int, default 7
        Seed of the landscape and the sites; the same seed gives the same files.
    overwrite : bool, default False
        Replace existing files; otherwise :class:`OutputExistsError`.

    Returns
    -------
    dict of str to Path
        ``dem``, ``soil``, ``streams``, ``sites``, ``survey``.

    Notes
    -----
    The sites' preference surface uses slope, northness, TPI (100 m disc) and the
    distance to the carved channels, computed here with the array functions of
    :mod:`mlsites.terrain`; the models never see that surface, only the files.
    """
    from mlsites.synthetic import make_landscape
    from mlsites.synthetic import make_virtual_sites
    from mlsites.terrain import distance_to_cells, northness, slope, tpi

    directory = Path(directory)
    paths = {Path(f).stem: directory / f for f in DEMO_FILES}
    existing = [str(p) for p in paths.values() if p.exists()]
    if existing and not overwrite:
        raise OutputExistsError(f"{', '.join(existing)} already exist(s); use another folder or overwrite")
    width_m = min(shape) * cellsize
    land = make_landscape(shape, cellsize=cellsize, random_state=random_state,
                          valley_width_m=min(1000.0, 0.3 * width_m), relief_m=min(300.0, 0.05 * width_m))
    land.write(directory, overwrite=overwrite)
    dem = land.dem.astype(np.float64)
    layers = {
        "slope": slope(dem, cellsize),
        "northness": northness(dem, cellsize),
        "tpi": tpi(dem, cellsize, radius=100.0),
        "stream_distance": distance_to_cells(land.streams > 0, cellsize),
    }
    strip = max(10 * cellsize, 0.12 * width_m)
    virtual = make_virtual_sites(layers, land.grid, n_sites=n_sites, strip_width_m=strip,
                                 random_state=random_state)
    _write_vector(virtual.sites, paths["sites"], "sites")
    _write_vector(virtual.survey, paths["survey"], "survey")
    return paths


def _source_folders():
    """Folders that may hold ``demo_data/`` and ``experiments/``: the source checkout, the cwd."""
    here = Path(__file__).resolve().parent.parent.parent
    return [here] if here == Path.cwd().resolve() else [here, Path.cwd().resolve()]


def prepare_demo_folder(out_dir, *, log=None) -> Path:
    """Lay out a runnable copy of the demo in ``out_dir``; return its experiment file.

    ``out_dir`` gets ``experiments/demo.toml`` and ``demo_data/`` (copied from the
    source folder, or built with :data:`DEMO_SETTINGS` when no copy is found), so
    the experiment's relative paths (``../demo_data``, ``../runs``, ``../models``)
    resolve inside ``out_dir``. Files already there are kept.

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
    if not target.exists():
        if toml is None:
            raise InputError("experiments/demo.toml not found next to the mlsites sources or in the working "
                             "folder; run `mlsites demo` from the mlsites source folder")
        target.parent.mkdir(parents=True, exist_ok=True)
        shutil.copy2(toml, target)
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
