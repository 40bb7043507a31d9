"""Figures that show how the populations' G matrices differ, and the numbers behind them.

Everything is computed on the compare stage's scale (``compare.scale``; :mod:`ped2g.compare.scale`)
from the fits' posterior draws, the compare stage's fixed axes (``loadings.csv`` and
``draws.nc``) and, when present, the refitting null's replicates (``null/refits/``):

* genetic variance of each population along fixed axes (``v' G v`` per draw): the leading
  eigenvectors of the mean over populations of the posterior-mean G, and the eigenvectors of the
  leading eigentensor; beside it the band that estimation noise alone gives for the posterior
  mean (2.5% and 97.5% quantiles over the refitting null's replicates, where every population
  shares one G);
* the eigenvalue spectrum of each G;
* G as ellipses in the planes of trait pairs, with g_max and the divergence of the means;
* a genetic-correlation heatmap on the fixed scale -1..1;
* pairwise statistics as population x population matrices read cell by cell from ``draws.nc``
  (both directions: the magnitude ratio of row over column is not the column over row);
* posterior densities of the pairwise statistics against the refitting null's range.

Colours come from the Okabe-Ito palette (distinguishable with the common colour-vision
deficiencies); colour scales are anchored at meaningful values, never at the data range alone.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.colors import LogNorm, Normalize, TwoSlopeNorm
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle

from ..intervals import hpd
from .html import fmt
from .words import combination_in_words

#: Okabe & Ito (2008) colour-blind-safe palette, most distinct colours first.
OKABE_ITO = ["#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#000000", "#F0E442"]
NULL_BAND = "#BBBBBB"
TRUTH_COLOUR = "#D55E00"
MAX_AXES_PANELS = 6
MAX_PAIR_PLANES = 6
ELLIPSE_DRAWS = 25


def palette(n: int) -> list[str]:
    """``n`` colour-blind-safe colours (Okabe-Ito, then repeated with another marker downstream)."""
    return [OKABE_ITO[k % len(OKABE_ITO)] for k in range(n)]


def text_colour(rgba) -> str:
    """Black or white, whichever reads better on a cell of colour ``rgba`` (WCAG relative luminance)."""
    r, g, b = (c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4 for c in rgba[:3])
    luminance = 0.2126 * r + 0.7152 * g + 0.0722 * b
    return "black" if luminance > 0.179 else "white"


# ---------------------------------------------------------------------------------------------
# The numbers
# ---------------------------------------------------------------------------------------------
@dataclass
class Axis:
    """A fixed direction in trait space: its label, unit vector and name in words."""

    key: str
    label: str
    vector: np.ndarray
    words: str


def scaled_draws(G: np.ndarray, P: np.ndarray, mean: np.ndarray, scale: str, population: str,
                 traits: list[str]) -> np.ndarray:
    """G draws (S, t, t) of one population on the comparison scale (its own P or means per draw)."""
    from ..compare.scale import scale_factors, standardise

    factors = scale_factors(P[:, None], mean[:, None], scale, [population], traits)[:, 0]
    return standardise(G, factors)


def fixed_axes(mean_G: np.ndarray, tensor_vectors: np.ndarray | None, traits: list[str],
               n_mean: int = 2, n_tensor: int = 2) -> list[Axis]:
    """The leading eigenvectors of the mean G, then those of the leading eigentensor.

    ``tensor_vectors`` is (t, k) from draws.nc ``reference_tensor_vectors`` of eigentensor 1
    (columns by decreasing |eigenvalue|). Signs are set so the largest loading is positive.
    """
    out = []
    values, vectors = np.linalg.eigh(mean_G)
    for k in range(min(n_mean, len(traits))):
        v = vectors[:, -(k + 1)]
        v = v * np.sign(v[np.argmax(np.abs(v))])
        out.append(Axis(f"mean_g_{k + 1}", f"eigenvector {k + 1} of the mean G", v,
                        combination_in_words(v, traits)))
    if tensor_vectors is not None:
        for j in range(min(n_tensor, tensor_vectors.shape[1])):
            v = np.asarray(tensor_vectors[:, j], dtype=float)
            v = v / np.linalg.norm(v)
            v = v * np.sign(v[np.argmax(np.abs(v))])
            out.append(Axis(f"tensor_1_{j + 1}", f"eigenvector {j + 1} of eigentensor 1", v,
                            combination_in_words(v, traits)))
    return out


def variance_along(G: np.ndarray, axes: list[Axis]) -> np.ndarray:
    """``v' G v`` for every axis: G (..., t, t) -> (..., n_axes)."""
    V = np.stack([a.vector for a in axes], axis=1)  # (t, n)
    return np.einsum("ik,...ij,jk->...k", V, G, V)


def axes_table(obs: dict[str, np.ndarray], null: dict[str, np.ndarray] | None,
               truth: dict[str, np.ndarray] | None, axes: list[Axis], mass: float) -> pd.DataFrame:
    """One row per population and axis: posterior mean, HPD interval, the null's band, truth."""
    rows = []
    for pop, draws in obs.items():
        for k, axis in enumerate(axes):
            x = draws[:, k]
            lo, hi = hpd(x[np.isfinite(x)], mass)
            row = {"population": pop, "axis": axis.label, "in_words": axis.words,
                   "loadings": ", ".join(f"{v:+.2f}" for v in axis.vector),
                   "mean": float(np.nanmean(x)), "hpd_lower": float(lo), "hpd_upper": float(hi)}
            if null is not None and pop in null:
                reps = null[pop][:, k]
                reps = reps[np.isfinite(reps)]
                row.update(null_refit_median=float(np.median(reps)),
                           null_refit_lower=float(np.quantile(reps, 0.025)),
                           null_refit_upper=float(np.quantile(reps, 0.975)))
            if truth is not None and pop in truth:
                row["true_value"] = float(truth[pop][k])
            rows.append(row)
    return pd.DataFrame(rows)


def pairwise_matrix(draws, name: str, populations: list[str]) -> pd.DataFrame | None:
    """Posterior median of a pairwise statistic for every ordered pair, read from ``draws.nc``.

    Row ``i``, column ``j`` is the median over draws of ``draws[name][:, i, j]``: for the
    magnitude ratio, population i's response over population j's (not symmetric).
    """
    if draws is None or name not in draws:
        return None
    arr = draws[name]
    if set(arr.dims) != {"draw", "population", "population2"}:
        return None
    arr = arr.transpose("draw", "population", "population2")
    rows = [str(p) for p in arr["population"].values]
    cols = [str(p) for p in arr["population2"].values]
    with np.errstate(all="ignore"):
        med = np.nanmedian(arr.values, axis=0) if np.isfinite(arr.values).any() else None
    if med is None:
        return None
    frame = pd.DataFrame(med, index=rows, columns=cols)
    order = [p for p in populations if p in rows]
    frame = frame.loc[order, [p for p in populations if p in cols]]
    frame.index.name = "population"
    frame.columns.name = "population2"
    return frame


# ---------------------------------------------------------------------------------------------
# Figures
# ---------------------------------------------------------------------------------------------
def axes_variance_figure(table: pd.DataFrame, axes: list[Axis], populations: list[str],
                         traits: list[str], scale_note: str) -> Figure:
    """One panel per fixed axis: each population's genetic variance along it (posterior mean and
    HPD interval), the refitting null's band (grey box) and the true value (red cross)."""
    shown = axes[:MAX_AXES_PANELS]
    ncol = min(len(shown), 2)
    nrow = int(np.ceil(len(shown) / ncol))
    fig, grid = plt.subplots(nrow, ncol, figsize=(6.2 * ncol, 3.3 * nrow + 0.6), squeeze=False)
    colours = palette(len(populations))
    for ax, axis in zip(grid.flat, shown):
        part = table[table["axis"] == axis.label].set_index("population")
        for x, pop in enumerate(populations):
            if pop not in part.index:
                continue
            r = part.loc[pop]
            if "null_refit_lower" in part and np.isfinite(r.get("null_refit_lower", np.nan)):
                ax.add_patch(Rectangle((x - 0.32, r["null_refit_lower"]), 0.64,
                                       r["null_refit_upper"] - r["null_refit_lower"], color=NULL_BAND,
                                       alpha=0.6, lw=0, label="shared G: 95% of replicates" if x == 0 else None))
            ax.errorbar([x], [r["mean"]], yerr=[[r["mean"] - r["hpd_lower"]], [r["hpd_upper"] - r["mean"]]],
                        fmt="o", color=colours[x], capsize=3, markersize=6, lw=1.6)
            if "true_value" in part and np.isfinite(r.get("true_value", np.nan)):
                ax.plot([x], [r["true_value"]], marker="x", color=TRUTH_COLOUR, markersize=9, mew=2,
                        ls="none", label="true value" if x == 0 else None)
        ax.set_xticks(range(len(populations)), populations)
        ax.set_xlim(-0.6, len(populations) - 0.4)
        ax.set_ylim(bottom=0)
        ax.set_ylabel(f"genetic variance along the axis\n({scale_note})", fontsize=8)
        loads = ", ".join(f"{t} {v:+.2f}" for t, v in zip(traits, axis.vector))
        ax.set_title(f"{axis.label}: {axis.words}\n[{loads}]", fontsize=8.5)
        ax.grid(axis="x", visible=False)
    for ax in list(grid.flat)[len(shown):]:
        ax.set_visible(False)
    handles, names = [], []
    for ax in grid.flat:
        for h, n in zip(*ax.get_legend_handles_labels()):
            if n not in names:
                handles.append(h)
                names.append(n)
    if handles:
        fig.legend(handles, names, loc="upper center", ncol=len(handles), frameon=False, fontsize=8)
    fig.tight_layout(rect=(0, 0, 1, 0.95))
    return fig


def spectrum_figure(eigen: dict[str, np.ndarray], truth: dict[str, np.ndarray] | None, mass: float,
                    scale_note: str) -> Figure:
    """Eigenvalues of each population's G (sorted per draw): posterior mean and HPD interval."""
    pops = list(eigen)
    t = next(iter(eigen.values())).shape[1]
    fig, ax = plt.subplots(figsize=(6.4, 3.6))
    colours = palette(len(pops))
    offsets = np.linspace(-0.2, 0.2, len(pops)) if len(pops) > 1 else np.zeros(1)
    for k, pop in enumerate(pops):
        d = eigen[pop]
        mean = np.nanmean(d, axis=0)
        lo, hi = np.array([hpd(d[:, i], mass) for i in range(t)]).T
        x = np.arange(1, t + 1) + offsets[k]
        ax.errorbar(x, mean, yerr=[mean - lo, hi - mean], fmt="o-", color=colours[k], capsize=3,
                    markersize=5, lw=1.2, label=pop)
        if truth is not None and pop in truth:
            ax.plot(x, truth[pop], ls="none", marker="x", color=TRUTH_COLOUR, markersize=8, mew=2,
                    label="true value" if k == 0 else None)
    ax.set_xticks(range(1, t + 1), [f"λ{i}" for i in range(1, t + 1)])
    ax.set_xlabel("eigenvalue of G, largest first")
    ax.set_ylabel(f"genetic variance ({scale_note})", fontsize=9)
    ax.set_ylim(bottom=0)
    ax.legend(fontsize=8, frameon=False)
    ax.set_title(f"Eigenvalue spectrum of each G (mean and {mass:.0%} HPD interval)", fontsize=10)
    fig.tight_layout()
    return fig


def _ellipse(S: np.ndarray, n: int = 120) -> np.ndarray:
    """Points of the contour x' S^-1 x = 1 (one genetic SD) of a 2 x 2 covariance S."""
    values, vectors = np.linalg.eigh(S)
    values = np.clip(values, 0.0, None)
    angle = np.linspace(0, 2 * np.pi, n)
    circle = np.stack([np.cos(angle), np.sin(angle)])
    return vectors @ (np.sqrt(values)[:, None] * circle)


def ellipses_figure(mean_G: dict[str, np.ndarray], draws: dict[str, np.ndarray], traits: list[str],
                    divergence: np.ndarray | None, truth: dict[str, np.ndarray] | None,
                    scale_note: str, seed: int = 0) -> Figure:
    """G in the plane of each trait pair: the posterior-mean G's one-SD ellipse (thick), a band of
    draws (thin), g_max of the posterior-mean G (projected, length sqrt(lambda_max)), the true
    G (dashed) and the divergence of the population means (black arrow, when given)."""
    pairs = [(i, j) for i in range(len(traits)) for j in range(i + 1, len(traits))][:MAX_PAIR_PLANES]
    ncol = min(len(pairs), 3)
    nrow = int(np.ceil(len(pairs) / ncol))
    fig, grid = plt.subplots(nrow, ncol, figsize=(4.0 * ncol, 3.9 * nrow + 0.5), squeeze=False)
    pops = list(mean_G)
    colours = palette(len(pops))
    rng = np.random.default_rng(seed)
    for ax, (i, j) in zip(grid.flat, pairs):
        idx = np.ix_([i, j], [i, j])
        extent = 0.0
        for k, pop in enumerate(pops):
            d = draws[pop]
            pick = rng.choice(len(d), size=min(ELLIPSE_DRAWS, len(d)), replace=False)
            for s in pick:
                pts = _ellipse(d[s][idx])
                ax.plot(pts[0], pts[1], color=colours[k], lw=0.5, alpha=0.18)
            pts = _ellipse(mean_G[pop][idx])
            ax.plot(pts[0], pts[1], color=colours[k], lw=2.2, label=pop)
            extent = max(extent, float(np.abs(pts).max()))
            values, vectors = np.linalg.eigh(mean_G[pop])
            g = vectors[:, -1] * np.sqrt(max(values[-1], 0.0))
            ax.plot([-g[i], g[i]], [-g[j], g[j]], color=colours[k], lw=1.4, ls=(0, (4, 1.5)))
            if truth is not None and pop in truth:
                tp = _ellipse(np.asarray(truth[pop])[idx])
                ax.plot(tp[0], tp[1], color=colours[k], lw=1.2, ls=":")
        if divergence is not None:
            dv = np.asarray(divergence, dtype=float)[[i, j]] * extent
            ax.annotate("", xy=(dv[0], dv[1]), xytext=(0, 0),
                        arrowprops={"arrowstyle": "->", "color": "black", "lw": 1.3})
        ax.set_xlim(-1.15 * extent, 1.15 * extent)
        ax.set_ylim(-1.15 * extent, 1.15 * extent)
        ax.set_aspect("equal")
        ax.axhline(0, color="0.7", lw=0.6)
        ax.axvline(0, color="0.7", lw=0.6)
        ax.set_xlabel(f"{traits[i]} (genetic SD, {scale_note})", fontsize=8)  # scale_note: SD units
        ax.set_ylabel(f"{traits[j]} (genetic SD)", fontsize=8)
        ax.tick_params(labelsize=7)
    for ax in list(grid.flat)[len(pairs):]:
        ax.set_visible(False)
    handles, names = grid.flat[0].get_legend_handles_labels()
    from matplotlib.lines import Line2D
    handles += [Line2D([], [], color="0.3", lw=1.4, ls=(0, (4, 1.5))),
                Line2D([], [], color="0.3", lw=1.2, ls=":")]
    names += ["g_max (dashed)", "true G (dotted)"]
    if not truth:
        handles, names = handles[:-1], names[:-1]
    if divergence is not None:
        handles.append(Line2D([], [], color="black", lw=1.3, marker=">", markersize=5))
        names.append("divergence of the means")
    fig.legend(handles, names, loc="upper center", ncol=min(len(names), 6), frameon=False, fontsize=8)
    fig.tight_layout(rect=(0, 0, 1, 0.93))
    return fig


def correlation_heatmap_figure(rg: dict[str, np.ndarray], h2: dict[str, np.ndarray],
                               traits: list[str]) -> Figure:
    """Posterior-mean genetic correlations on the fixed scale -1..1 (diverging, white at 0); the
    diagonal shows the heritability as text on grey."""
    pops = list(rg)
    t = len(traits)
    ncol = min(len(pops), 3)
    nrow = int(np.ceil(len(pops) / ncol))
    size = max(3.0, 0.85 * t + 1.3)
    fig, grid = plt.subplots(nrow, ncol, figsize=(size * ncol + 1.2, size * nrow + 0.4), squeeze=False)
    norm = Normalize(vmin=-1.0, vmax=1.0)
    cmap = plt.get_cmap("RdBu_r")
    image = None
    for k, ax in enumerate(grid.flat):
        if k >= len(pops):
            ax.set_visible(False)
            continue
        pop = pops[k]
        mat = np.array(rg[pop], dtype=float)
        shown = mat.copy()
        np.fill_diagonal(shown, np.nan)
        image = ax.imshow(shown, cmap=cmap, norm=norm)
        for i in range(t):
            for j in range(t):
                if i == j:
                    ax.add_patch(Rectangle((j - 0.5, i - 0.5), 1, 1, color="0.88"))
                    ax.text(j, i, f"h²\n{fmt(h2[pop][i], 2)}", ha="center", va="center", fontsize=7)
                else:
                    ax.text(j, i, fmt(mat[i, j], 2), ha="center", va="center", fontsize=8,
                            color=text_colour(cmap(norm(mat[i, j]))))
        ax.set_xticks(range(t), traits, rotation=35, ha="right", fontsize=8)
        ax.set_yticks(range(t), traits if k % ncol == 0 else [""] * t, fontsize=8)
        ax.set_title(pop, fontsize=10)
        ax.grid(False)
    cbar = fig.colorbar(image, ax=grid.ravel().tolist(), shrink=0.8)
    cbar.set_label("genetic correlation r_G (posterior mean)")
    return fig


#: How each pairwise statistic's colour scale is anchored: (low, centre, high, colour map).
MATRIX_SCALES = {
    "skewers_correlation": (0.0, None, 1.0, "cividis"),
    "skewers_angle": (0.0, None, 90.0, "cividis_r"),
    "gmax_angle_between": (0.0, None, 90.0, "cividis_r"),
    "skewers_magnitude_ratio": ("log", 1.0, None, "PuOr_r"),
    "distance_riemannian": (0.0, None, None, "cividis_r"),
}
MATRIX_LABELS = {
    "skewers_correlation": "mean response correlation (0 to 1)",
    "skewers_angle": "angle between responses (degrees)",
    "gmax_angle_between": "angle between g_max (degrees)",
    "skewers_magnitude_ratio": "response of row / response of column",
    "distance_riemannian": "Riemannian distance",
}


def pairwise_matrix_figure(matrices: dict[str, pd.DataFrame]) -> Figure:
    """Heatmaps of pairwise statistics, row population against column population, each cell the
    posterior median of that ordered pair in draws.nc."""
    n = len(matrices)
    first = next(iter(matrices.values()))
    size = max(3.2, 0.7 * len(first) + 2.0)
    ncol = min(n, 3)
    nrow = int(np.ceil(n / ncol))
    fig, grid = plt.subplots(nrow, ncol, figsize=((size + 1.0) * ncol, size * nrow), squeeze=False)
    for ax, (name, frame) in zip(grid.flat, matrices.items()):
        mat = frame.to_numpy(dtype=float).copy()
        if mat.shape[0] == mat.shape[1] and list(frame.index) == list(frame.columns):
            np.fill_diagonal(mat, np.nan)  # a population against itself says nothing
        low, centre, high, cmap_name = MATRIX_SCALES.get(name, (None, None, None, "cividis"))
        finite = mat[np.isfinite(mat)]
        if low == "log":
            span = float(np.nanmax(np.abs(np.log(finite[finite > 0])))) if finite.size else 1.0
            span = max(span, np.log(1.25))
            norm = LogNorm(vmin=np.exp(-span), vmax=np.exp(span))
        else:
            lo = low if low is not None else float(finite.min()) if finite.size else 0.0
            hi = high if high is not None else max(float(finite.max()) if finite.size else 1.0, lo + 1e-9)
            norm = Normalize(vmin=lo, vmax=hi) if centre is None else TwoSlopeNorm(centre, lo, hi)
        cmap = plt.get_cmap(cmap_name)
        masked = np.ma.masked_invalid(mat)
        image = ax.imshow(masked, cmap=cmap, norm=norm)
        for i in range(mat.shape[0]):
            for j in range(mat.shape[1]):
                if np.isfinite(mat[i, j]):
                    ax.text(j, i, fmt(mat[i, j]), ha="center", va="center", fontsize=8,
                            color=text_colour(cmap(norm(mat[i, j]))))
        ax.set_xticks(range(mat.shape[1]), list(frame.columns), rotation=30, ha="right", fontsize=8)
        ax.set_yticks(range(mat.shape[0]), list(frame.index), fontsize=8)
        ax.set_xlabel("column population", fontsize=8)
        ax.set_ylabel("row population", fontsize=8)
        ax.set_title(MATRIX_LABELS.get(name, name), fontsize=9)
        ax.grid(False)
        cbar = fig.colorbar(image, ax=ax, shrink=0.75)
        if low == "log":
            ticks = [norm.vmin, np.sqrt(norm.vmin), 1.0, np.sqrt(norm.vmax), norm.vmax]
            cbar.set_ticks(ticks)
            cbar.set_ticklabels([fmt(v, 2) for v in ticks])
            cbar.ax.minorticks_off()
        cbar.ax.tick_params(labelsize=7)
    for ax in list(grid.flat)[n:]:
        ax.set_visible(False)
    fig.tight_layout()
    return fig


def pairwise_density_figure(panels: list[dict[str, Any]]) -> Figure:
    """Posterior density of each pairwise tested value (blue) against the range a shared G gives
    (grey band: the refitting null's 95% interval, line: its median). Each panel dict has
    ``title``, ``draws``, ``xlabel`` and optionally ``null`` = (median, lower, upper)."""
    n = len(panels)
    ncol = min(n, 3)
    nrow = int(np.ceil(n / ncol))
    fig, grid = plt.subplots(nrow, ncol, figsize=(4.1 * ncol, 2.6 * nrow + 0.5), squeeze=False)
    for ax, panel in zip(grid.flat, panels):
        x = np.asarray(panel["draws"], dtype=float)
        x = x[np.isfinite(x)]
        if panel.get("null") is not None:
            med, lo, hi = panel["null"]
            ax.axvspan(lo, hi, color=NULL_BAND, alpha=0.6, lw=0, label="shared G: 95% of replicates")
            ax.axvline(med, color="0.35", lw=1.2)
        if len(x):
            ax.hist(x, bins=30, density=True, histtype="stepfilled", alpha=0.55, color=OKABE_ITO[0],
                    label="posterior draws")
            ax.axvline(float(np.mean(x)), color=OKABE_ITO[0], lw=1.5, ls="--", label="posterior mean")
        ax.set_title(panel["title"], fontsize=8.5)
        ax.set_xlabel(panel["xlabel"], fontsize=8)
        ax.set_ylabel("density", fontsize=8)
        ax.tick_params(labelsize=7)
    for ax in list(grid.flat)[n:]:
        ax.set_visible(False)
    handles, names = grid.flat[0].get_legend_handles_labels()
    fig.legend(handles, names, loc="upper center", ncol=len(names), frameon=False, fontsize=8)
    fig.tight_layout(rect=(0, 0, 1, 0.93))
    return fig


__all__ = ["Axis", "OKABE_ITO", "axes_table", "axes_variance_figure", "correlation_heatmap_figure",
           "ellipses_figure", "fixed_axes", "pairwise_density_figure", "pairwise_matrix",
           "pairwise_matrix_figure", "palette", "scaled_draws", "spectrum_figure", "text_colour",
           "variance_along"]
