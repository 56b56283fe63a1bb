"""The best learner's map against a reference surface (e.g. the demo's true preferences).

:func:`compare_with_reference` reads both rasters at the same cells of the study
grid (all of them up to :data:`MAX_COMPARE_CELLS`, else a regular lattice, so
memory stays bounded), gives their Spearman rank correlation over the cells
where both have a value and, when later-found sites are named, the AUC of each
surface on those sites against the same cells.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from mlsites.errors import InputError

__all__ = ["ReferenceComparison", "compare_with_reference", "MAX_COMPARE_CELLS"]

#: Most cells read from each surface for the rank correlation and the AUC landscape.
MAX_COMPARE_CELLS = 1_000_000


@dataclass(frozen=True)
class ReferenceComparison:
    """Rank agreement of a map with a reference surface.

    Attributes
    ----------
    spearman : float
        Spearman rank correlation over the compared cells.
    n_cells : int
        Cells where both surfaces have a value.
    step : int
        Lattice spacing in cells (1 = every cell of the grid).
    auc : dict or None
        ``{"map": AUC, "reference": AUC, "n_sites": n, "n_dropped": m}`` on the
        later-found sites, or None without them.
    notes : list of str
    """

    spearman: float
    n_cells: int
    step: int
    auc: dict | None = None
    notes: list = field(default_factory=list)


def _site_cells(check, grid, buffer_m):
    """Cells (rows, cols, site ids) of the later-found sites named in ``[check]``."""
    from mlsites.sampling import presence_cells, read_sites

    records = read_sites(check["sites"], grid, id_field=check.get("id_field") or "site_id",
                         x_field=check.get("x_field"), y_field=check.get("y_field"), crs=check.get("crs"),
                         layer=check.get("layer"))
    import warnings

    with warnings.catch_warnings():
        # cells off the map are counted below, where both surfaces are read
        warnings.simplefilter("ignore")
        cells = presence_cells(records, grid, buffer_m=buffer_m)
    return cells, len(records.dropped)


def compare_with_reference(potential, reference, grid, *, check=None, buffer_m=0.0,
                           max_cells=MAX_COMPARE_CELLS) -> ReferenceComparison:
    """Spearman correlation of a potential map with a reference surface, and AUCs on new sites.

    Parameters
    ----------
    potential : path-like
        The learner's ``potential.tif`` (on ``grid``).
    reference : path-like
        The reference surface (any grid; aligned bilinearly onto ``grid``).
    grid : GridSpec
        The study grid.
    check : dict, optional
        The ``[check]`` settings: ``sites`` (path) and optionally ``layer``,
        ``id_field``, ``x_field``, ``y_field``, ``crs``.
    buffer_m : float, default 0
        Site buffer for point sites (the run's ``[sampling] site_buffer_m``).
    max_cells : int, default 1 000 000
        Most cells read per surface (a regular lattice above that).

    Returns
    -------
    ReferenceComparison

    Raises
    ------
    InputError
        The reference file is missing, or the surfaces share fewer than 3 cells.

    Notes
    -----
    Spearman's rho is :func:`scipy.stats.spearmanr` of the two surfaces' values
    at every compared cell. Each new site counts once: its cells (with values in
    both surfaces) share one unit of weight, and the landscape is the compared
    cells (:func:`mlsites.evaluation.roc_auc`), so both AUCs use the same sites
    and cells.
    """
    from scipy.stats import spearmanr

    from mlsites.evaluation import roc_auc
    from mlsites.sampling import extract_values, lattice_cells

    if not Path(reference).is_file():
        raise InputError(f"{reference}: reference surface not found; fix [report] reference_surface or remove it")
    rows, cols, step = lattice_cells(grid, max_cells)
    values = extract_values({"map": str(potential), "reference": str(reference)}, rows, cols, grid)
    both = values.notna().all(axis=1).to_numpy()
    if both.sum() < 3:
        raise InputError(f"{reference}: the reference surface and the map share {int(both.sum())} cells with a "
                         "value; give a reference surface on the study area")
    land = values[both]
    rho = float(spearmanr(land["map"], land["reference"]).statistic)
    notes = []
    auc = None
    if check and check.get("sites"):
        cells, n_read_dropped = _site_cells(check, grid, buffer_m)
        at = extract_values({"map": str(potential), "reference": str(reference)}, cells["row"], cells["col"], grid)
        ok = at.notna().all(axis=1).to_numpy()
        ids = cells["site_id"].to_numpy()
        kept = ids[ok]
        n_cells = {s: n for s, n in zip(*np.unique(kept, return_counts=True))}
        w = np.array([1.0 / n_cells[s] for s in kept])
        n_sites = len(n_cells)
        n_dropped = len(set(ids)) - n_sites + n_read_dropped
        if n_sites:
            auc = {"map": roc_auc(at["map"].to_numpy()[ok], land["map"].to_numpy(), site_weight=w),
                   "reference": roc_auc(at["reference"].to_numpy()[ok], land["reference"].to_numpy(),
                                        site_weight=w),
                   "n_sites": n_sites, "n_dropped": n_dropped}
        if n_dropped:
            notes.append(f"{n_dropped} later-found site(s) left out of the AUCs: off the grid or without a value "
                         "in both surfaces.")
    return ReferenceComparison(spearman=rho, n_cells=int(both.sum()), step=int(step), auc=auc, notes=notes)


def reference_section(run):
    """The section "Map against the reference surface" (absent without ``[report] reference_surface``)."""
    from mlsites.errors import MlsitesError
    from mlsites.report._blocks import absent, figure, items, num, para, section
    from mlsites.report._figures import Panel
    from mlsites.report._sections import _map_png, _percentile, mapped_best
    from mlsites.report._style import POTENTIAL_RAMP

    title = "Map against the reference surface"
    rep = run.section
    path = rep.get("reference_surface")
    if not path:
        return absent("reference", title, "no [report] reference_surface in the experiment.")
    label = rep.get("reference_label") or "reference surface"
    name, folder = mapped_best(run)
    if name is None or run.grid is None:
        return absent("reference", title, "no map of the run to compare with.")
    try:
        result = compare_with_reference(folder / "potential.tif", path, run.grid, check=run.settings.get("check"),
                                        buffer_m=float(run.settings.get("sampling", {}).get("site_buffer_m", 0.0)))
    except MlsitesError as exc:
        return absent("reference", title, f"the comparison failed: {exc}")
    ref = _percentile(run.read_display(path))
    pot = _percentile(run.read_display(folder / "potential.tif"))
    ref[~np.isfinite(pot)] = np.nan
    panels = [Panel(title=f"{label} (percentile)", image=ref, ramp=POTENTIAL_RAMP, vmin=0, vmax=100,
                    label="percentile of the mapped area"),
              Panel(title=f"{name} (percentile)", image=pot, ramp=POTENTIAL_RAMP, vmin=0, vmax=100,
                    label="percentile of the mapped area")]
    where = (f"all {result.n_cells} mapped cells" if result.step == 1 else
             f"{result.n_cells} mapped cells on a lattice (one cell in {result.step} along rows and columns)")
    lines = [f"Spearman rank correlation of the two surfaces over {where}: ρ = {num(result.spearman)} "
             "(1 = the same order of cells)."]
    if result.auc:
        a = result.auc
        lines.append(f"AUC on {a['n_sites']} later-found sites against the same cells: {name} {num(a['map'])}, "
                     f"{label} {num(a['reference'])} (the reference's AUC is what a perfect model of the "
                     "preferences would reach on these sites, given that sites also depend on chance).")
    lines += result.notes
    return section("reference", title, [
        para(f"Both surfaces drawn as percentiles of the mapped area, so only their order of cells is compared "
             f"(the reference is {Path(path).name})."),
        figure(_map_png(run, panels), alt=f"{name} beside the {label}", wide=True),
        items(lines)])
