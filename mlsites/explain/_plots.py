"""Figures of the explanation stage: the importance dot chart and response curves.

Learners keep one colour and one marker in every figure. The colours are our own,
chosen so that every pair stays apart (CIELAB distance of 28 or more) also under
simulated protanopia, deuteranopia and tritanopia, and the markers differ too, so a
figure reads in grey print.
"""

from __future__ import annotations

import numpy as np

from mlsites._style import LEARNER_COLOURS, LEARNER_MARKERS, learner_style

__all__ = ["LEARNER_COLOURS", "LEARNER_MARKERS", "learner_style", "plot_importance", "plot_response"]

# data panels in greys, so they are never mistaken for a learner
_SITE_COLOUR = "#303030"
_LANDSCAPE_COLOUR = "#c4c4c4"


def _pyplot():
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    return plt


def plot_importance(table, path, learners):
    """Dot chart: per layer, each learner's SHAP share and held-out permutation importance.

    Layers run down the page by their mean rank over learners (most important on
    top); the left panel shows mean |SHAP| as a share of each learner's total, the
    right panel the mean drop in held-out AUC with +- 1 sd bars (left empty when
    there were no fold models).
    """
    plt = _pyplot()
    order = (table.assign(_r=table[["shap_rank", "permutation_rank"]].mean(axis=1, skipna=True))
             .groupby("layer")["_r"].mean().sort_values(ascending=True).index.tolist())
    y = {layer: k for k, layer in enumerate(order)}
    n = len(learners)
    offsets = (np.arange(n) - (n - 1) / 2) * (0.7 / max(n, 1))
    fig, axes = plt.subplots(1, 2, figsize=(10, 0.35 * len(order) + 1.8), sharey=True)
    for i, name in enumerate(learners):
        colour, marker = learner_style(i)
        rows = table[table["learner"] == name]
        ys = np.array([y[layer] for layer in rows["layer"]]) + offsets[i]
        axes[0].plot(rows["shap_share"], ys, marker, color=colour, label=name, ms=6, ls="none")
        if rows["permutation_mean"].notna().any():
            axes[1].errorbar(rows["permutation_mean"], ys, xerr=rows["permutation_sd"].fillna(0.0), fmt=marker,
                             color=colour, ms=6, elinewidth=1, capsize=2)
    axes[0].set_yticks(range(len(order)), order)
    axes[0].invert_yaxis()
    axes[0].set_xlabel("mean |SHAP| as a share of the learner's total")
    axes[1].set_xlabel("drop in held-out AUC, layer permuted (mean, sd bars)")
    axes[1].axvline(0.0, color="#4d4d4d", lw=0.8)
    for ax in axes:
        ax.grid(axis="x", color="#dddddd", lw=0.6)
    axes[0].legend(loc="lower right", fontsize=8, frameon=False)
    fig.suptitle("Layer importance by learner")
    fig.tight_layout()
    fig.savefig(path, dpi=120)
    plt.close(fig)


def plot_response(curves, layer, path, learners, *, categorical, site_values, site_weight, landscape_values):
    """One response figure for ``layer``: every learner's centred curves and the data below.

    Each learner's curves are drawn relative to its own mean partial dependence over
    the grid, so learners with different score ranges share one axis; thin lines are
    individual (ICE) curves, thick lines or large markers the average. The lower
    panel shows where the site cells (weighted, each site counts once) and landscape
    cells lie on the layer, so a user sees where a curve rests on few samples.
    """
    plt = _pyplot()
    fig, (top, bottom) = plt.subplots(2, 1, figsize=(7, 5.2), sharex=not categorical,
                                      gridspec_kw={"height_ratios": [3, 1.2]})
    data = curves[curves["layer"] == layer]
    n = len(learners)
    for i, name in enumerate(learners):
        colour, marker = learner_style(i)
        own = data[data["learner"] == name]
        avg = own[own["curve"] == "average"]
        centre = float(avg["score"].mean())
        ice = own[own["curve"] == "individual"]
        if categorical:
            classes = avg["x"].to_numpy()
            pos = np.arange(classes.size) + (i - (n - 1) / 2) * (0.6 / max(n, 1))
            top.plot(pos, avg["score"] - centre, marker, color=colour, label=name, ms=7, ls="none")
        else:
            for _, one in ice.groupby("row"):
                top.plot(one["x"], one["score"] - centre, color=colour, lw=0.4, alpha=0.25)
            top.plot(avg["x"], avg["score"] - centre, color=colour, lw=2.2, label=name, marker=marker,
                     ms=4, markevery=max(1, len(avg) // 6))
    top.axhline(0.0, color="#4d4d4d", lw=0.8)
    top.set_ylabel("score minus the learner's mean")
    top.set_title(f"Response to {layer} (partial dependence; thin lines: individual cells)")
    top.legend(fontsize=8, frameon=False)
    site_values = np.asarray(site_values, dtype=np.float64)
    landscape_values = np.asarray(landscape_values, dtype=np.float64)
    if categorical:
        classes = np.unique(data["x"].to_numpy())
        share_s = np.array([site_weight[site_values == c].sum() for c in classes]) / max(site_weight.sum(), 1e-300)
        share_l = np.array([(landscape_values == c).mean() for c in classes]) if landscape_values.size else 0 * classes
        pos = np.arange(classes.size)
        bottom.bar(pos - 0.2, share_s, 0.4, color=_SITE_COLOUR, label="sites")
        bottom.bar(pos + 0.2, share_l, 0.4, color=_LANDSCAPE_COLOUR, label="landscape", hatch="//",
                   edgecolor="white")
        for ax in (top, bottom):
            ax.set_xticks(pos, [f"{c:g}" for c in classes])
        bottom.set_ylabel("share")
        bottom.set_xlabel(f"{layer} (class)")
    else:
        lo, hi = data["x"].min(), data["x"].max()
        bins = np.linspace(lo, hi, 31) if hi > lo else 10
        bottom.hist(np.clip(landscape_values, lo, hi), bins=bins, density=True, histtype="stepfilled",
                    color=_LANDSCAPE_COLOUR, alpha=0.7, label="landscape")
        bottom.hist(np.clip(site_values, lo, hi), bins=bins, weights=site_weight, density=True, histtype="step",
                    color=_SITE_COLOUR, lw=2, label="sites")
        bottom.set_ylabel("density")
        bottom.set_xlabel(f"{layer} (layer units; values beyond the grid drawn at its ends)")
    bottom.legend(fontsize=8, frameon=False)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
