"""Charts of the periods stage: site counts through time, and density small multiples.

Colours are our own. The density ramp runs from a pale sand to a dark plum with
lightness falling steadily, so it reads the same with any common colour-vision
deficiency and in greyscale; low densities are transparent over the hillshade.
"""

from __future__ import annotations

import math

import numpy as np

from mlsites._files import replacing

__all__ = ["DENSITY_RAMP", "density_colormap", "plot_block_counts", "plot_density_maps", "year_label"]

#: Sequential ramp of the density maps, light to dark (relative luminance falls monotonically).
DENSITY_RAMP = ("#fbf3d5", "#f3d48f", "#e6a85a", "#cc7440", "#9c4a45", "#6a2d4f", "#3b1a3f")
#: Colours of the count chart (dated counts, aoristic sum, null envelope, flagged changes).
_COUNT_COLOUR, _AORISTIC_COLOUR, _NULL_COLOUR, _FLAG_COLOUR = "#2b5f8a", "#a8641c", "#7a7a7a", "#b8412e"


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def year_label(v, _pos=None) -> str:
    """An axis year: ``-3450`` -> "3450 BCE", ``200`` -> "200 CE" (continuous axis)."""
    return f"{-v:g} BCE" if v < 0 else f"{v:g} CE"


def density_colormap():
    """The density ramp as a matplotlib colormap, transparent at zero."""
    from matplotlib.colors import LinearSegmentedColormap, to_rgba

    colours = [to_rgba(c) for c in DENSITY_RAMP]
    alphas = np.linspace(0.0, 0.9, len(colours)) ** 0.5
    return LinearSegmentedColormap.from_list("mlsites_density", [(r, g, b, a) for (r, g, b, _), a
                                                                 in zip(colours, alphas)])


def _save(fig, path):
    with replacing(path) as tmp:
        fig.savefig(tmp, format="png", metadata={"Software": None})


def plot_block_counts(table, path, *, title="Sites through time"):
    """Two panels: counts per block (aoristic sum, Monte Carlo mean and envelopes) and changes.

    ``table`` is :func:`mlsites.periods.block_table`'s output.
    """
    from matplotlib.ticker import FuncFormatter

    plt = _pyplot()
    edges = np.append(table["block_start"].to_numpy(), table["block_end"].to_numpy()[-1])
    mid = 0.5 * (edges[:-1] + edges[1:])
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(8.0, 6.0), dpi=100, sharex=True,
                                      gridspec_kw={"height_ratios": [3, 2]})
    try:
        top.stairs(table["mc_high"], edges, baseline=table["mc_low"], fill=True, color=_COUNT_COLOUR, alpha=0.25,
                   label="95 % envelope of dates drawn in ranges")
        top.stairs(table["mc_mean"], edges, color=_COUNT_COLOUR, linewidth=1.5, baseline=None,
                   label="mean of the draws")
        top.plot(mid, table["aoristic_sum"], linestyle="none", marker="o", markersize=3.5,
                 color=_AORISTIC_COLOUR, label="aoristic sum")
        top.stairs(table["null_low"], edges, color=_NULL_COLOUR, linestyle="--", linewidth=1, baseline=None,
                   label="95 % envelope, constant numbers")
        top.stairs(table["null_high"], edges, color=_NULL_COLOUR, linestyle="--", linewidth=1, baseline=None)
        top.set_ylabel("sites per block")
        top.set_title(title)
        top.legend(loc="upper left", frameon=False, fontsize=8)
        rest = table.iloc[1:]
        edge = rest["block_start"].to_numpy()
        bottom.axhline(0.0, color="0.3", linewidth=0.8)
        bottom.fill_between(edge, rest["change_low"], rest["change_high"], color=_COUNT_COLOUR, alpha=0.25,
                            label="95 % envelope of the change")
        bottom.plot(edge, rest["change_mean"], color=_COUNT_COLOUR, linewidth=1.5, marker=".",
                    label="mean change from the block before")
        bottom.plot(edge, rest["null_change_low"], color=_NULL_COLOUR, linestyle="--", linewidth=1,
                    label="95 % envelope, constant numbers")
        bottom.plot(edge, rest["null_change_high"], color=_NULL_COLOUR, linestyle="--", linewidth=1)
        flag = rest["change_beyond_null"].to_numpy() != ""
        if flag.any():
            bottom.scatter(edge[flag], rest["change_mean"].to_numpy()[flag], s=40, facecolors="none",
                           edgecolors=_FLAG_COLOUR, linewidths=1.5, zorder=3, label="beyond constant numbers")
        bottom.set_ylabel("change, sites")
        bottom.set_xlabel("year (block limits)")
        bottom.legend(loc="lower left", frameon=False, fontsize=8)
        bottom.xaxis.set_major_formatter(FuncFormatter(year_label))
        fig.tight_layout()
        _save(fig, path)
    finally:
        plt.close(fig)


def plot_density_maps(shade, densities, titles, extent, path, *, sites=None, squares=None, vmax=None,
                      note=""):
    """Small multiples of density over a hillshade, one panel per block.

    Parameters
    ----------
    shade : ndarray (rows, cols)
        Hillshade in [0, 1] (NaN off the study area), drawn in greys.
    densities : sequence of ndarray (rows, cols)
        Density per panel, sites per km2, on the hillshade's grid.
    titles : sequence of str
    extent : (left, right, bottom, top)
        Map extent in CRS units.
    path : path-like
    sites : sequence of (x, y, weight) arrays, optional
        Exact site points per panel (only when asked for).
    squares : sequence of (x, y, weight) arrays, optional
        Generalised sites per panel: square centres and the weight of the
        sites inside each square.
    vmax : float, optional
        Top of the common colour scale (default: the largest density).
    note : str
        Line printed under the panels (for example how sites are generalised).

    Returns
    -------
    list of (left, right, bottom, top)
        The axis limits of each panel as drawn: the map extent, whatever the
        sites (a generalised square's centre may lie beyond the grid's edge and
        used to widen its panel).
    """
    plt = _pyplot()
    n = len(densities)
    ncols = min(n, max(1, math.ceil(math.sqrt(n * 1.3))))
    nrows = math.ceil(n / ncols)
    aspect = (extent[3] - extent[2]) / max(extent[1] - extent[0], 1e-9)
    panel = 2.4
    fig, axes = plt.subplots(nrows, ncols, figsize=(panel * ncols + 1.2, panel * aspect * nrows + 0.6),
                             dpi=100, squeeze=False, layout="constrained")
    cmap = density_colormap()
    top = vmax if vmax is not None else max(float(np.nanmax(d)) if np.isfinite(d).any() else 0.0
                                            for d in densities)
    top = top if top > 0 else 1.0
    try:
        image = None
        for k, ax in enumerate(axes.ravel()):
            ax.set_axis_off()
            if k >= n:
                continue
            # Greys start above black so the relief stays a quiet background.
            ax.imshow(np.ma.masked_invalid(shade), cmap="gray", vmin=-0.6, vmax=1, extent=extent,
                      interpolation="nearest")
            image = ax.imshow(np.ma.masked_invalid(densities[k]), cmap=cmap, vmin=0, vmax=top, extent=extent,
                              interpolation="nearest")
            if squares is not None and len(squares[k][0]):
                sx, sy, sw = squares[k]
                ax.scatter(sx, sy, s=25.0 * sw, facecolors="none", edgecolors="#1d3b57",
                           linewidths=0.8)
            if sites is not None and len(sites[k][0]):
                px, py, pw = sites[k]
                ax.scatter(px, py, s=6, c="#1d3b57", alpha=np.clip(pw, 0.15, 1.0), linewidths=0)
            ax.set_title(titles[k], fontsize=8)
            # scatter autoscales; markers beyond the edge must not widen one panel's map
            ax.set_xlim(extent[0], extent[1])
            ax.set_ylim(extent[2], extent[3])
        if image is not None:
            bar = fig.colorbar(image, ax=axes, shrink=0.6)
            bar.set_label("expected sites per km²")
        if note:
            fig.supxlabel(note, fontsize=7)
        _save(fig, path)
        return [(*ax.get_xlim(), *ax.get_ylim()) for ax in axes.ravel()[:n]]
    finally:
        plt.close(fig)
