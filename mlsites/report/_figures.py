"""Figures of the report: maps over a hillshade, with legend, scale bar and north arrow.

Maps are drawn from rasters read onto a coarser display grid (at most
:data:`DISPLAY_CELLS` cells per side, see :meth:`mlsites.grid.GridSpec.coarsened`),
so a report stays small and quick to build whatever the study size; the GeoTIFFs
of the run keep the full resolution. Axes carry no coordinates: a scale bar and a
north arrow give distance and direction, and site positions are never written as
numbers. Every PNG is re-encoded without metadata before it is embedded.
"""

from __future__ import annotations

import base64
import io
import math
from dataclasses import dataclass, field

import numpy as np

from mlsites.report._style import SITE_COLOUR, ramp_colormap

__all__ = ["DISPLAY_CELLS", "Panel", "draw_maps", "draw_curves", "png_data_uri", "nice_length"]

#: Largest number of display cells per side of a map (rasters are read coarsened).
DISPLAY_CELLS = 600
#: Largest width in pixels of an embedded image (wider PNGs are scaled down).
MAX_IMAGE_WIDTH = 1400
#: Colours of the palette embedded images are reduced to.
PALETTE_COLOURS = 256
#: Figure resolution (dots per inch) of the maps.
DPI = 110
#: Squares smaller than this many pixels get no count written in them.
_MIN_LABEL_PX = 16


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def png_data_uri(source, *, max_width: int = MAX_IMAGE_WIDTH) -> str:
    """A PNG as a ``data:`` URI, re-encoded without any metadata.

    Parameters
    ----------
    source : bytes or path-like
        PNG (or any image Pillow reads) as bytes or a file.
    max_width : int, default 1400
        Wider images are scaled down (Lanczos) to this width.

    Returns
    -------
    str
        ``data:image/png;base64,...``.

    Notes
    -----
    Images are reduced to a palette of 256 colours (octree, dithered), which
    keeps maps over a hillshade about a third of their size. Re-encoding
    through Pillow without ``pnginfo`` drops every text chunk
    (``tEXt``, ``zTXt``, ``iTXt``), EXIF and time stamps, so nothing but pixels
    reaches the report: no file path, software string or coordinate.
    """
    from PIL import Image

    raw = source if isinstance(source, (bytes, bytearray)) else open(source, "rb").read()
    with Image.open(io.BytesIO(raw)) as im:
        im.load()
        if im.mode not in ("RGB", "RGBA", "L", "LA"):
            im = im.convert("RGBA")
        if im.width > max_width:
            im = im.resize((max_width, max(1, round(im.height * max_width / im.width))), Image.LANCZOS)
        # a 256-colour palette (dithered) keeps figures about a third of their size
        im = im.convert("RGBA").quantize(PALETTE_COLOURS, method=Image.Quantize.FASTOCTREE)
        out = io.BytesIO()
        im.save(out, format="PNG")
    return "data:image/png;base64," + base64.b64encode(out.getvalue()).decode("ascii")


def nice_length(span: float) -> float:
    """A round scale-bar length near a quarter of ``span``: 1, 2 or 5 times a power of ten.

    Examples
    --------
    >>> nice_length(6000.0), nice_length(250.0), nice_length(43000.0)
    (1000.0, 50.0, 10000.0)
    """
    if not (math.isfinite(span) and span > 0):
        return 1.0
    target = span / 4.0
    power = 10.0 ** math.floor(math.log10(target))
    return max(m * power for m in (1.0, 2.0, 5.0) if m * power <= target)


def _length_label(metres: float) -> str:
    return f"{metres / 1000:g} km" if metres >= 1000 else f"{metres:g} m"


@dataclass
class Panel:
    """One map: a layer over the hillshade, and its legend.

    Attributes
    ----------
    title : str
    image : ndarray (rows, cols) or None
        Values on the display grid (NaN = not drawn). None draws the hillshade only.
    ramp : sequence of str, optional
        Colours of a continuous layer (light to dark); with ``vmin``/``vmax`` and
        ``label`` (the colour bar's title).
    classes : list of (code, label, rgba), optional
        Categorical layer: each code drawn in its colour, listed in the legend.
    shapes : list of (geometry, rgba, text), optional
        Polygons drawn instead of an image (fold blocks); ``text`` written at
        their centre when they are large enough.
    squares : (x, y, count, side), optional
        Sites generalised to squares (outlined, count written inside).
    points : (x, y), optional
        Exact site points (only with ``show_sites``).
    outline : ndarray of bool, optional
        Cells whose edge is drawn as a contour (e.g. the area of applicability).
    """

    title: str
    image: np.ndarray | None = None
    ramp: tuple | None = None
    vmin: float | None = None
    vmax: float | None = None
    label: str = ""
    classes: list | None = None
    shapes: list | None = None
    squares: tuple | None = None
    points: tuple | None = None
    outline: np.ndarray | None = None
    outline_label: str = ""
    legend_extra: list = field(default_factory=list)


def _scale_bar(ax, extent, unit_m):
    left, right, bottom, top = extent
    width_m = (right - left) * unit_m
    length = nice_length(width_m) / unit_m
    x0 = left + 0.05 * (right - left)
    y0 = bottom + 0.05 * (top - bottom)
    h = 0.012 * (top - bottom)
    ax.add_patch(_rect(x0 - 0.02 * (right - left), y0 - 0.025 * (top - bottom), length + 0.04 * (right - left),
                       0.085 * (top - bottom), facecolor=(1, 1, 1, 0.75), edgecolor="none"))
    for k in range(2):
        ax.add_patch(_rect(x0 + k * length / 2, y0, length / 2, h, facecolor="black" if k == 0 else "white",
                           edgecolor="black", linewidth=0.6))
    ax.text(x0, y0 + 1.8 * h, "0", fontsize=7, ha="center", va="bottom")
    ax.text(x0 + length, y0 + 1.8 * h, _length_label(length * unit_m), fontsize=7, ha="center", va="bottom")


def _rect(x, y, w, h, **kw):
    from matplotlib.patches import Rectangle

    return Rectangle((x, y), w, h, **kw)


def _north_arrow(ax, extent):
    from matplotlib.patches import Polygon

    left, right, bottom, top = extent
    size = 0.07 * min(right - left, top - bottom)
    cx, cy = right - 0.07 * (right - left), top - 0.17 * (top - bottom)
    ax.add_patch(_rect(cx - 0.6 * size, cy - 0.55 * size, 1.2 * size, 2.05 * size, facecolor=(1, 1, 1, 0.75),
                       edgecolor="none"))
    ax.add_patch(Polygon([(cx, cy + size), (cx - 0.35 * size, cy - 0.35 * size), (cx, cy - 0.1 * size)],
                         closed=True, facecolor="black", edgecolor="black", linewidth=0.6))
    ax.add_patch(Polygon([(cx, cy + size), (cx + 0.35 * size, cy - 0.35 * size), (cx, cy - 0.1 * size)],
                         closed=True, facecolor="white", edgecolor="black", linewidth=0.6))
    ax.text(cx, cy + 1.12 * size, "N", fontsize=9, fontweight="bold", ha="center", va="bottom")


def _draw_panel(fig, ax, panel, shade, extent, unit_m, px_per_unit):
    from matplotlib.colors import ListedColormap
    from matplotlib.patches import Patch

    ax.set_axis_off()
    ax.set_title(panel.title, fontsize=9)
    if shade is not None:
        # greys start above black, so the relief stays a quiet background
        ax.imshow(np.ma.masked_invalid(shade), cmap="gray", vmin=-0.6, vmax=1.0, extent=extent,
                  interpolation="nearest")
    handles = []
    if panel.image is not None and panel.ramp is not None:
        cmap = ramp_colormap(panel.ramp)
        im = ax.imshow(np.ma.masked_invalid(panel.image), cmap=cmap, vmin=panel.vmin, vmax=panel.vmax,
                       extent=extent, interpolation="nearest", alpha=0.85)
        bar = fig.colorbar(im, ax=ax, shrink=0.7, pad=0.02)
        bar.set_label(panel.label, fontsize=8)
        bar.ax.tick_params(labelsize=7)
    elif panel.image is not None and panel.classes:
        codes = [c for c, _, _ in panel.classes]
        lut = {c: i for i, c in enumerate(codes)}
        index = np.full(panel.image.shape, np.nan)
        for c, i in lut.items():
            index[panel.image == c] = i
        cmap = ListedColormap([rgba for _, _, rgba in panel.classes]).with_extremes(bad=(0, 0, 0, 0))
        ax.imshow(np.ma.masked_invalid(index), cmap=cmap, vmin=-0.5, vmax=len(codes) - 0.5, extent=extent,
                  interpolation="nearest", alpha=0.85)
        handles += [Patch(facecolor=rgba, edgecolor="0.3", linewidth=0.4, label=label)
                    for _, label, rgba in panel.classes]
    if panel.shapes:
        _draw_shapes(ax, panel.shapes, px_per_unit)
    if panel.outline is not None and panel.outline.any():
        rows, cols = panel.outline.shape
        xs = np.linspace(extent[0], extent[1], cols)
        ys = np.linspace(extent[3], extent[2], rows)
        ax.contour(xs, ys, panel.outline.astype(float), levels=[0.5], colors=["#1a1a1a"], linewidths=0.7)
        from matplotlib.lines import Line2D

        handles.append(Line2D([], [], color="#1a1a1a", linewidth=0.7, label=panel.outline_label))
    if panel.squares is not None and len(panel.squares[0]):
        _draw_squares(ax, panel.squares, px_per_unit)
        handles.append(Patch(facecolor="none", edgecolor=SITE_COLOUR, linewidth=1.0,
                             label=f"sites per {_length_label(panel.squares[3] * unit_m)} square"))
    if panel.points is not None and len(panel.points[0]):
        ax.scatter(panel.points[0], panel.points[1], s=5, c=SITE_COLOUR, linewidths=0)
        from matplotlib.lines import Line2D

        handles.append(Line2D([], [], marker="o", linestyle="none", markersize=3, color=SITE_COLOUR,
                              label="sites (exact positions)"))
    handles += panel.legend_extra
    if handles:
        ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.01), ncol=min(len(handles), 3),
                  fontsize=7, frameon=False)
    ax.set_xlim(extent[0], extent[1])
    ax.set_ylim(extent[2], extent[3])
    _scale_bar(ax, extent, unit_m)
    _north_arrow(ax, extent)


def _draw_shapes(ax, shapes, px_per_unit):
    from matplotlib.patches import Polygon

    for geom, rgba, text in shapes:
        parts = getattr(geom, "geoms", [geom])
        for part in parts:
            ax.add_patch(Polygon(np.asarray(part.exterior.coords), closed=True, facecolor=rgba,
                                 edgecolor="white", linewidth=0.8, alpha=0.6))
        if text:
            minx, miny, maxx, maxy = geom.bounds
            if min(maxx - minx, maxy - miny) * px_per_unit >= _MIN_LABEL_PX:
                c = geom.representative_point()
                ax.text(c.x, c.y, text, fontsize=7, ha="center", va="center", color="black",
                        bbox={"boxstyle": "round,pad=0.15", "facecolor": (1, 1, 1, 0.7), "edgecolor": "none"})


def _draw_squares(ax, squares, px_per_unit):
    x, y, count, side = squares
    label = side * px_per_unit >= _MIN_LABEL_PX
    for cx, cy, n in zip(x, y, count):
        ax.add_patch(_rect(cx - side / 2, cy - side / 2, side, side, facecolor=(1, 1, 1, 0.25),
                           edgecolor=SITE_COLOUR, linewidth=1.0))
        if label:
            ax.text(cx, cy, f"{n:.0f}", fontsize=7, ha="center", va="center", color=SITE_COLOUR)


def draw_maps(panels, shade, extent, *, unit_m: float = 1.0, note: str = "") -> bytes:
    """Draw one or more map panels side by side; return PNG bytes.

    Parameters
    ----------
    panels : sequence of Panel
    shade : ndarray or None
        Hillshade in [0, 1] on the display grid (NaN off the study area).
    extent : (left, right, bottom, top)
        Map extent in CRS units.
    unit_m : float, default 1
        Metres per CRS unit (for the scale bar).
    note : str
        Line printed under the panels.
    """
    plt = _pyplot()
    n = len(panels)
    width_units, height_units = extent[1] - extent[0], extent[3] - extent[2]
    aspect = height_units / max(width_units, 1e-12)
    panel_in = 5.2 if n == 1 else 4.4
    fig, axes = plt.subplots(1, n, figsize=(panel_in * n + 0.4, panel_in * min(max(aspect, 0.4), 2.0) + 0.9),
                             dpi=DPI, squeeze=False, layout="constrained")
    try:
        px_per_unit = 0.8 * panel_in * DPI / max(width_units, 1e-12)
        for ax, panel in zip(axes.ravel(), panels):
            _draw_panel(fig, ax, panel, shade, extent, unit_m, px_per_unit)
        if note:
            fig.supxlabel(note, fontsize=7)
        return _png(fig)
    finally:
        plt.close(fig)


def _png(fig) -> bytes:
    out = io.BytesIO()
    fig.savefig(out, format="png", metadata={"Software": None}, bbox_inches="tight", pad_inches=0.08)
    return out.getvalue()


def draw_curves(curves, learners) -> bytes:
    """Capture (sites against area) and ROC curves of every learner, side by side; PNG bytes.

    ``curves`` is ``curves.csv`` (learner, curve, x, y). Learners keep the colour
    and marker they have in the explanation figures
    (:func:`mlsites.explain._plots.learner_style`).
    """
    from mlsites.explain._plots import learner_style

    plt = _pyplot()
    fig, axes = plt.subplots(1, 2, figsize=(9.6, 4.6), dpi=DPI, layout="constrained")
    titles = {"capture": ("Sites captured against area", "share of the study area, highest scores first",
                          "share of held-out sites"),
              "roc": ("ROC", "false positive rate (share of held-out landscape)", "true positive rate (share of "
                      "held-out sites)")}
    try:
        for ax, kind in zip(axes, ("capture", "roc")):
            title, xlabel, ylabel = titles[kind]
            ax.plot([0, 1], [0, 1], color="0.55", linestyle="--", linewidth=1, label="chance")
            part = curves[curves["curve"] == kind]
            for i, name in enumerate(learners):
                group = part[part["learner"] == name]
                if group.empty:
                    continue
                colour, marker = learner_style(i)
                x, y = group["x"].to_numpy(), group["y"].to_numpy()
                ax.plot(x, y, color=colour, linewidth=1.5, marker=marker, markersize=4,
                        markevery=max(1, len(x) // 8), label=name)
            ax.set_xlim(0, 1)
            ax.set_ylim(0, 1)
            ax.set_aspect("equal")
            ax.set_title(title, fontsize=10)
            ax.set_xlabel(xlabel, fontsize=8)
            ax.set_ylabel(ylabel, fontsize=8)
            ax.tick_params(labelsize=7)
            ax.legend(loc="lower right", frameon=False, fontsize=7)
        return _png(fig)
    finally:
        plt.close(fig)
