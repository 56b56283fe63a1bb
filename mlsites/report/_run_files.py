"""A finished run folder as the report reads it: files, settings, grid, hillshade, sites.

:class:`RunFiles` opens what exists and records why something is missing, so
every section can be left out with one line instead of failing the report.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from mlsites.errors import InputError

__all__ = ["RunFiles", "open_run"]

#: Default side (metres) of the squares sites are generalised to on shared maps.
DEFAULT_SITE_CELL_M = 1000.0


@dataclass
class RunFiles:
    """What the report knows about one run folder.

    Attributes
    ----------
    folder : Path
        The run folder (``runs/NAME`` or its staging folder during a run).
    manifest : dict
        ``manifest.json`` (or the equivalent handed over during a run).
    settings : dict
        The resolved experiment settings (``manifest["settings"]``).
    models_dir : Path or None
        Where the model cards are (None when missing).
    show_sites : bool
        Draw exact site positions (otherwise squares of ``site_cell_m``).
    grid, display : GridSpec or None
        The study grid and the coarser grid maps are drawn on.
    shade : ndarray or None
        Hillshade of the DEM on the display grid.
    notes : list of str
        What could not be drawn and why (shown in the report).
    """

    folder: Path
    manifest: dict
    settings: dict
    models_dir: Path | None
    show_sites: bool = False
    grid: object = None
    display: object = None
    shade: np.ndarray | None = None
    notes: list = field(default_factory=list)
    _sites: tuple | None = None

    # ------------------------------------------------------------ files
    def path(self, rel) -> Path:
        return self.folder / rel

    def has(self, rel) -> bool:
        return (self.folder / rel).is_file()

    def csv(self, rel):
        """A CSV table of the run, or None when the file is missing."""
        import pandas as pd

        p = self.folder / rel
        if not p.is_file():
            return None
        try:
            return pd.read_csv(p, keep_default_na=True)
        except pd.errors.EmptyDataError:
            return pd.DataFrame()

    def json(self, rel):
        """A JSON file of the run, or None when the file is missing."""
        p = self.folder / rel
        if not p.is_file():
            return None
        return json.loads(p.read_text())

    @property
    def section(self) -> dict:
        """The ``[report]`` settings (defaults filled in)."""
        given = dict(self.settings.get("report") or {})
        given.setdefault("site_cell_m", DEFAULT_SITE_CELL_M)
        given.setdefault("reference_surface", None)
        given.setdefault("reference_label", "reference surface")
        given.setdefault("title", None)
        return given

    # ------------------------------------------------------------ grid and maps
    @property
    def extent(self):
        left, bottom, right, top = self.grid.bounds
        return (left, right, bottom, top)

    @property
    def unit_m(self) -> float:
        return self.grid._linear_unit_m() if self.grid is not None else 1.0

    def read_display(self, path, kind="continuous"):
        """A raster read onto the display grid (aligned on the fly), NaN for nodata."""
        from mlsites.grid import read_array

        return read_array(path, self.display, kind=kind, dtype=np.float32)

    # ------------------------------------------------------------ sites
    def site_positions(self):
        """(x, y) of each site used (mean of its cell centres, grid CRS), or None.

        Read from the run's sample table; only ever drawn (as squares unless
        ``show_sites``), never written as numbers.
        """
        if self._sites is None:
            import pandas as pd

            p = self.folder / "samples" / "samples.parquet"
            if not p.is_file():
                self._sites = (None,)
            else:
                table = pd.read_parquet(p, columns=["label", "site_id", "x", "y"])
                sites = table[table["label"] == 1].groupby("site_id", sort=True)[["x", "y"]].mean()
                self._sites = (sites["x"].to_numpy(), sites["y"].to_numpy())
        return None if self._sites[0] is None else self._sites

    def site_layers(self):
        """Keyword arguments of a :class:`~mlsites.report._figures.Panel` that draw the sites."""
        from mlsites.sampling import site_squares

        pos = self.site_positions()
        if pos is None or self.grid is None:
            return {}
        if self.show_sites:
            return {"points": pos}
        side = float(self.section["site_cell_m"]) / self.unit_m
        sx, sy, n = site_squares(pos[0], pos[1], self.grid, side)
        return {"squares": (sx, sy, n, side)}

    def site_note(self) -> str:
        if self.show_sites:
            return "Dots: exact site positions. This report must not be shared beyond those entitled to see them."
        return (f"Sites are shown generalised to squares of {self.section['site_cell_m']:g} m with the number of "
                "sites in each; exact positions are left out because site locations attract looting.")


def _grid_of(run: RunFiles):
    from mlsites.grid import GridSpec, read_grid

    dem = run.settings.get("study", {}).get("dem")
    if dem and Path(dem).is_file():
        return read_grid(dem), dem
    for card in sorted((run.folder / "maps").glob("*/map.json")):
        grid = json.loads(card.read_text()).get("grid")
        if grid:
            return GridSpec.from_dict(grid), None
    return None, None


def open_run(folder, *, manifest=None, models_dir=None, show_sites=False, max_display_cells=None) -> RunFiles:
    """Open a run folder for the report.

    Parameters
    ----------
    folder : path-like
        A finished run folder (``runs/NAME``), or the staging folder of a run.
    manifest : dict, optional
        The run's manifest when it is not (yet) written as ``manifest.json``.
    models_dir : path-like, optional
        Folder of the model cards (default ``manifest["models_dir"]``).
    show_sites : bool, default False
    max_display_cells : int, optional
        Cells per side of the display grid (default
        :data:`mlsites.report._figures.DISPLAY_CELLS`).

    Raises
    ------
    InputError
        The folder does not exist, or holds no ``manifest.json`` (not a run
        folder) and no manifest was given.
    """
    from mlsites.report._figures import DISPLAY_CELLS
    from mlsites.terrain import hillshade

    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"{folder}: run folder not found; give the folder `mlsites run` wrote (runs/NAME)")
    if manifest is None:
        p = folder / "manifest.json"
        if not p.is_file():
            raise InputError(f"{folder}: no manifest.json, so this is not a finished run folder; give the folder "
                             "`mlsites run` wrote (runs/NAME), or run the experiment first")
        try:
            manifest = json.loads(p.read_text())
        except json.JSONDecodeError as exc:
            raise InputError(f"{p}: not valid JSON ({exc}); the run folder is damaged, run the experiment "
                             "again with --fresh") from None
    settings = manifest.get("settings") or {}
    if models_dir is None and manifest.get("models_dir"):
        models_dir = Path(manifest["models_dir"])
    run = RunFiles(folder=folder, manifest=manifest, settings=settings,
                   models_dir=Path(models_dir) if models_dir is not None and Path(models_dir).is_dir() else None,
                   show_sites=show_sites)
    run.grid, dem = _grid_of(run)
    if run.grid is None:
        run.notes.append("No DEM and no map of the run were found, so no map can be drawn.")
        return run
    run.display = run.grid.coarsened(max_display_cells or DISPLAY_CELLS)
    if dem is not None and not run.grid.is_geographic:
        elevation = run.read_display(dem).astype(np.float64)
        run.shade = hillshade(elevation, run.display.cellsize())
    else:
        run.notes.append("The DEM was not found (or is in degrees), so maps are drawn without a hillshade.")
    if run.display is not run.grid:
        f = math.ceil(max(run.grid.shape) / max(run.display.shape))
        run.notes.append(f"Maps are drawn from the rasters read at about 1/{f} of their resolution "
                         f"({run.display.width} x {run.display.height} display cells for "
                         f"{run.grid.width} x {run.grid.height} grid cells); the GeoTIFFs of the run hold "
                         "the full resolution.")
    return run
