"""The report's figures (matplotlib, Agg backend; seaborn styling).

Each ``*_figure`` function returns a :class:`matplotlib.figure.Figure` built only from the data
passed in. :class:`FigureStore` writes every figure as PNG and PDF and keeps the PNG bytes for
embedding in the HTML page as a ``data:`` URI.
"""

from __future__ import annotations

import base64
import io
import re
from dataclasses import dataclass, field
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import seaborn as sns  # noqa: E402
from matplotlib.colors import TwoSlopeNorm  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from scipy.stats import rankdata  # noqa: E402

from .difference_figures import text_colour  # noqa: E402
from .html import fmt  # noqa: E402
from .words import combination_in_words  # noqa: E402
from .tables import row_labels  # noqa: E402

PNG_DPI = 130
OBSERVED_COLOUR = "#0072B2"
NULL_COLOUR = "#999999"
MAX_RANK_PANELS = 12
MAX_FOREST_POINTS = 160

sns.set_theme(context="notebook", style="whitegrid", font_scale=0.9)


def okabe_ito(n: int) -> list[str]:
    """``n`` colours of the Okabe-Ito palette (distinct under common colour-vision deficiencies)."""
    from .difference_figures import palette

    return palette(n)


def slug(text: str) -> str:
    """A file-name-safe version of ``text`` (letters, digits, underscores)."""
    return re.sub(r"[^A-Za-z0-9]+", "_", str(text)).strip("_").lower() or "x"


@dataclass
class StoredFigure:
    name: str
    title: str
    caption: str
    png: bytes

    @property
    def data_uri(self) -> str:
        return "data:image/png;base64," + base64.b64encode(self.png).decode("ascii")


@dataclass
class FigureStore:
    """Saves figures as ``<folder>/<name>.png`` and ``.pdf`` and keeps them for the HTML page."""

    folder: Path
    figures: list[StoredFigure] = field(default_factory=list)

    def add(self, name: str, fig: Figure, title: str, caption: str) -> StoredFigure:
        self.folder.mkdir(parents=True, exist_ok=True)
        name = base = slug(name)
        taken = {f.name for f in self.figures}
        k = 2
        while name in taken:  # e.g. populations "pop 1" and "pop-1" share a slug
            name, k = f"{base}_{k}", k + 1
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=PNG_DPI, bbox_inches="tight")
        png = buf.getvalue()
        (self.folder / f"{name}.png").write_bytes(png)
        fig.savefig(self.folder / f"{name}.pdf", format="pdf", bbox_inches="tight",
                    metadata={"CreationDate": None})
        plt.close(fig)
        stored = StoredFigure(name=name, title=title, caption=caption, png=png)
        self.figures.append(stored)
        return stored


def trait_label(trait: str, units: dict[str, str]) -> str:
    """``trait (unit)`` when the config gives a unit for the trait."""
    unit = units.get(trait)
    return f"{trait} ({unit})" if unit else trait


def covariance_unit(traits: list[str], units: dict[str, str]) -> str:
    """Unit text for covariances of the traits: ``mm²`` when all share one unit."""
    given = {units.get(t) for t in traits}
    if len(given) == 1 and None not in given:
        return f"{given.pop()}²"
    if given == {None}:
        return "trait units squared"
    return "product of the two traits' units"


# ---------------------------------------------------------------------------------------------
# Estimates
# ---------------------------------------------------------------------------------------------
def heritability_figure(table: pd.DataFrame, populations: list[str], traits: list[str]) -> Figure:
    """Forest plot of h2 per trait and rg per trait pair, each population with its HPD interval.

    The r_G panel is left out when it would hold more than :data:`MAX_FOREST_POINTS` intervals
    (the estimate tables still list every correlation).
    """
    h2 = table[table["quantity"] == "h2"]
    rg = table[table["quantity"] == "rg"]
    pairs = [(a, b) for i, a in enumerate(traits) for b in traits[i + 1:]]
    panels = [("heritability h² (proportion of phenotypic variance)", h2, [(t, "") for t in traits],
               (0.0, 1.0))]
    if pairs and len(pairs) * len(populations) <= MAX_FOREST_POINTS:
        panels.append(("genetic correlation r_G", rg, pairs, (-1.0, 1.0)))
    heights = [max(len(rows), 1) for _, _, rows, _ in panels]
    row_height = 0.16 * len(populations) + 0.2
    fig, axes = plt.subplots(1, len(panels), figsize=(5.2 * len(panels), row_height * max(heights) + 1.6),
                             squeeze=False)
    palette = okabe_ito(len(populations))
    for ax, (xlabel, part, rows, xlim) in zip(axes.flat, panels):
        offsets = np.linspace(-0.3, 0.3, len(populations)) if len(populations) > 1 else np.zeros(1)
        for k, pop in enumerate(populations):
            sub = part[part["population"] == pop].set_index(["trait", "trait2"])
            ys, med, lo, hi = [], [], [], []
            for y, key in enumerate(rows):
                if key in sub.index:
                    r = sub.loc[key]
                    ys.append(y + offsets[k])
                    med.append(r["median"]); lo.append(r["hpd_lower"]); hi.append(r["hpd_upper"])
            med, lo, hi = map(np.asarray, (med, lo, hi))
            ax.errorbar(med, ys, xerr=[med - lo, hi - med], fmt="o", color=palette[k], capsize=2,
                        label=pop, markersize=4)
        ax.set_yticks(range(len(rows)), [a if not b else f"{a} × {b}" for a, b in rows])
        ax.invert_yaxis()
        ax.set_xlim(*xlim)
        if xlim[0] < 0:
            ax.axvline(0.0, color="0.4", lw=0.8)
        ax.set_xlabel(xlabel)
    fig.tight_layout(rect=(0, 0, 1, 0.93))
    handles, names = axes.flat[0].get_legend_handles_labels()
    fig.legend(handles, names, title="population", loc="upper center", ncol=min(len(populations), 6),
               fontsize=8, frameon=False)
    return fig


# ---------------------------------------------------------------------------------------------
# Diagnostics
# ---------------------------------------------------------------------------------------------
def rank_plots_figure(elements: dict[str, np.ndarray], population: str, bins: int = 20) -> Figure:
    """Rank plots (Vehtari et al. 2021): per element, a histogram of each chain's pooled ranks.

    ``elements`` maps a label to draws of shape (chain, draw). With good mixing every chain's
    histogram is flat at ``draws / bins`` (the dashed line).
    """
    names = list(elements)
    n = len(names)
    ncol = min(n, 4)
    nrow = int(np.ceil(n / ncol))
    fig, axes = plt.subplots(nrow, ncol, figsize=(3.1 * ncol, 2.3 * nrow), squeeze=False)
    for ax, name in zip(axes.flat, names):
        x = np.asarray(elements[name], dtype=float)
        chains, draws = x.shape
        ranks = rankdata(x.ravel()).reshape(x.shape)
        edges = np.linspace(0.5, x.size + 0.5, bins + 1)
        palette = okabe_ito(chains)
        styles = ["-", "--", "-.", ":"]
        for c in range(chains):
            counts, _ = np.histogram(ranks[c], bins=edges)
            ax.stairs(counts, edges, color=palette[c], lw=1.3, ls=styles[(c // 8) % 4], label=f"chain {c + 1}")
        ax.axhline(draws / bins, color="0.3", ls="--", lw=0.8)
        ax.set_title(name, fontsize=9)
        ax.set_xlabel("rank (all chains pooled)", fontsize=8)
        ax.set_ylabel("draws per bin", fontsize=8)
        ax.tick_params(labelsize=7)
        ax.set_ylim(bottom=0)
    for ax in list(axes.flat)[n:]:
        ax.set_visible(False)
    axes.flat[0].legend(fontsize=7, loc="lower right")
    fig.suptitle(f"Rank plots of G elements, {population}", y=1.0)
    fig.tight_layout()
    return fig


# ---------------------------------------------------------------------------------------------
# Comparisons
# ---------------------------------------------------------------------------------------------
#: Kinds of calibrated test whose tested value is the statistic's posterior mean, so that the
#: refitting null's range can be drawn on the statistic's own axis (the others test |ln ratio|
#: or a distance from the mean over populations, on another scale).
SAME_SCALE_TESTS = ("greater", "less")


def refit_band(frame: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Per row, the refitting null's 95% range of the posterior mean (``null_refit_lower``,
    ``null_refit_upper``) where it is on the statistic's scale, else NaN."""
    nan = np.full(len(frame), np.nan)
    if not {"null_refit_lower", "null_refit_upper"} <= set(frame.columns):
        return nan, nan
    from ..compare.calibrated import TESTS

    methods = frame["method"] if "method" in frame else pd.Series([""] * len(frame), index=frame.index)
    same = np.array([TESTS.get((str(m), str(s))) in SAME_SCALE_TESTS
                     for m, s in zip(methods, frame["statistic"])], dtype=bool)
    lo = pd.to_numeric(frame["null_refit_lower"], errors="coerce").to_numpy(dtype=float)
    hi = pd.to_numeric(frame["null_refit_upper"], errors="coerce").to_numpy(dtype=float)
    return np.where(same, lo, np.nan), np.where(same, hi, np.nan)


def comparison_figure(frames: dict[str, pd.DataFrame], title: str, scale_note: str) -> Figure:
    """Forest plots of a method's statistics, one panel per statistic: the observed posterior
    median and HPD interval (blue) beside the breeding-value null's (grey points) where it exists,
    over the refitting null's 95% range of the posterior mean (a grey band, :func:`refit_band`)
    where the comparison tables have it."""
    from matplotlib.patches import Rectangle

    from .difference_figures import NULL_BAND
    sizes = [max(len(f), 1) for f in frames.values()]
    fig, axes = plt.subplots(len(frames), 1, figsize=(7.8, 0.34 * sum(sizes) + 1.05 * len(frames) + 0.4),
                             squeeze=False, gridspec_kw={"height_ratios": [n + 2.2 for n in sizes]})
    legend_done: set[str] = set()
    for ax, (statistic, frame) in zip(axes[:, 0], frames.items()):
        labels = row_labels(frame)
        y = np.arange(len(frame))
        has_null = {"null_estimate", "null_lower", "null_upper"} <= set(frame.columns) and \
            frame["null_estimate"].notna().any()
        shift = 0.17 if has_null else 0.0

        def draw(est, lo, hi, offset, colour, label):
            est, lo, hi = (np.asarray(v, dtype=float) for v in (est, lo, hi))
            ok = np.isfinite(lo) & np.isfinite(hi)
            err = np.where(ok, [est - np.where(ok, lo, est), np.where(ok, hi, est) - est], 0.0)
            ax.errorbar(est, y + offset, xerr=np.abs(err), fmt="o", color=colour, capsize=2,
                        markersize=4, label=label)

        band_lo, band_hi = refit_band(frame)
        banded = False
        for yi, lo, hi in zip(y, band_lo, band_hi):
            if np.isfinite(lo) and np.isfinite(hi):
                ax.add_patch(Rectangle((lo, yi - 0.4), hi - lo, 0.8, facecolor=NULL_BAND, edgecolor=NULL_BAND,
                                       lw=1.0, alpha=0.7, zorder=0,
                                       label=None if banded else "shared G (refitting null): 95% of replicates"))
                banded = True
        nan = np.full(len(frame), np.nan)
        draw(frame["estimate"], frame["lower"] if "lower" in frame else nan,
             frame["upper"] if "upper" in frame else nan, -shift, OBSERVED_COLOUR, "observed")
        if has_null:
            draw(frame["null_estimate"], frame["null_lower"], frame["null_upper"], shift, NULL_COLOUR,
                 "randomisation null")
        ax.set_yticks(y, labels, fontsize=8)
        ax.set_ylim(len(frame) - 0.5, -0.5)
        ax.set_xlabel(f"{statistic} (degrees)" if "angle" in str(statistic) else statistic, fontsize=9)
        ax.tick_params(axis="x", labelsize=8)
        ax.grid(axis="y", visible=False)
        handles, names = ax.get_legend_handles_labels()
        if set(names) - legend_done:  # a panel that brings a new mark (the band) gets a legend too
            ax.legend(handles, names, fontsize=8, loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=3,
                      frameon=False)
            legend_done |= set(names)
    fig.suptitle(f"{title} (median and HPD interval; {scale_note})", fontsize=10)
    fig.tight_layout()
    return fig


def pairwise_matrix_figure(frames: dict[str, pd.DataFrame], populations: list[str], title: str) -> Figure:
    """Heatmaps of pairwise statistics (population x population, symmetric), one panel each,
    cells annotated with the posterior median."""
    seen: set[str] = set()
    for f in frames.values():
        seen |= set(f["population"].astype(str)) | set(f["population2"].astype(str))
    pops = [p for p in populations if p in seen] + sorted(seen - set(populations))
    index = {p: i for i, p in enumerate(pops)}
    n = len(frames)
    size = max(3.0, 0.55 * len(pops) + 1.8)
    fig, axes = plt.subplots(1, n, figsize=((size + 0.9) * n, size), squeeze=False)
    for ax, (statistic, frame) in zip(axes[0], frames.items()):
        mat = np.full((len(pops), len(pops)), np.nan)
        for r in frame.itertuples():
            i, j = index[str(r.population)], index[str(r.population2)]
            mat[i, j] = mat[j, i] = r.estimate
        annot = np.vectorize(lambda v: fmt(v) if np.isfinite(v) else "")(mat)
        sns.heatmap(mat, ax=ax, annot=annot, fmt="", cmap="viridis", square=True,
                    xticklabels=pops, yticklabels=pops, cbar_kws={"label": statistic, "shrink": 0.8},
                    mask=~np.isfinite(mat), annot_kws={"fontsize": 8})
        ax.grid(False)
        ax.set_title(statistic, fontsize=10)
    fig.suptitle(title, fontsize=10)
    fig.tight_layout()
    return fig


def loadings_figure(frame: pd.DataFrame, traits: list[str], group: str, title: str,
                    ylabel: str = "loading") -> Figure:
    """Grouped bars of trait loadings (``trait``, ``value``), one colour per ``group`` value
    (a component number or a population)."""
    groups = list(dict.fromkeys(frame[group].tolist()))
    fig, ax = plt.subplots(figsize=(max(4.5, 1.1 * len(traits) + 2.5), 3.2))
    width = 0.8 / max(len(groups), 1)
    palette = okabe_ito(len(groups))
    x = np.arange(len(traits))
    for k, g in enumerate(groups):
        part = frame[frame[group] == g].set_index("trait")["value"]
        values = [part.get(t, np.nan) for t in traits]
        ax.bar(x - 0.4 + width * (k + 0.5), values, width, color=palette[k],
               label=f"{_axis_name(g, group)}: {combination_in_words(values, traits)}")
    ax.axhline(0.0, color="0.3", lw=0.8)
    ax.set_xticks(x, traits, rotation=30 if len(traits) > 5 else 0, ha="right" if len(traits) > 5 else "center")
    ax.set_xlabel("trait")
    ax.set_ylabel(ylabel)
    ax.set_title(title)
    ax.grid(axis="x", visible=False)
    ax.legend(fontsize=8, loc="upper center", bbox_to_anchor=(0.5, -0.18), frameon=False, ncol=1)
    fig.tight_layout()
    return fig


def _axis_name(value, group: str) -> str:
    if group == "axis2":
        try:
            return f"eigenvector {int(float(value))}"
        except (TypeError, ValueError):
            return str(value)
    if group == "axis":
        try:
            return f"#{int(float(value))}"
        except (TypeError, ValueError):
            return str(value)
    return str(value)


def eigentensor_figure(frame: pd.DataFrame, traits: list[str], max_tensors: int = 3) -> Figure:
    """Heatmaps of the leading eigentensors E_k (trait x trait), on one symmetric colour scale."""
    axes_ids = sorted(frame["axis"].dropna().unique(), key=float)[:max_tensors]
    n = len(axes_ids)
    t = len(traits)
    size = max(2.8, 0.6 * t + 1.4)
    fig, axes = plt.subplots(1, n, figsize=(size * n + 1.0, size), squeeze=False)
    index = {tr: i for i, tr in enumerate(traits)}
    mats = []
    for a in axes_ids:
        mat = np.full((t, t), np.nan)
        for r in frame[frame["axis"] == a].itertuples():
            if r.trait in index and r.trait2 in index:
                mat[index[r.trait], index[r.trait2]] = r.value
        mats.append(mat)
    lim = float(np.nanmax(np.abs(mats))) or 1.0
    image = None
    for ax, a, mat in zip(axes.flat, axes_ids, mats):
        image = ax.imshow(mat, cmap="RdBu_r", vmin=-lim, vmax=lim)
        if t <= 6:
            for i in range(t):
                for j in range(t):
                    ax.text(j, i, fmt(mat[i, j], 2), ha="center", va="center", fontsize=7,
                            color=text_colour(plt.get_cmap("RdBu_r")((mat[i, j] + lim) / (2 * lim))))
        ax.set_xticks(range(t), traits, rotation=40, ha="right")
        ax.set_yticks(range(t), traits if ax is axes.flat[0] else [""] * t)
        ax.set_title(f"eigentensor {_axis_name(a, 'axis')[1:]}")
        ax.grid(False)
    cbar = fig.colorbar(image, ax=axes.ravel().tolist(), shrink=0.8)
    cbar.set_label("element of the eigentensor (unitless)")
    return fig


def null_density_figure(observed: dict[str, np.ndarray], null: dict[str, np.ndarray], title: str,
                        xlabel: str) -> Figure:
    """Histograms (as densities) of the observed posterior draws of a statistic (blue) and of
    its null draws (grey), one panel per component."""
    names = list(observed)
    n = len(names)
    ncol = min(n, 4)
    nrow = int(np.ceil(n / ncol))
    fig, axes = plt.subplots(nrow, ncol, figsize=(3.2 * ncol, 2.5 * nrow + 0.4), squeeze=False)
    for ax, name in zip(axes.flat, names):
        obs = np.asarray(observed[name], dtype=float)
        obs = obs[np.isfinite(obs)]
        nul = np.asarray(null.get(name, []), dtype=float)
        nul = nul[np.isfinite(nul)]
        both = np.concatenate([obs, nul]) if len(nul) else obs
        if len(both) == 0:
            ax.set_visible(False)
            continue
        lo, hi = float(both.min()), float(both.max())
        edges = np.linspace(lo, hi if hi > lo else lo + 1.0, 31)
        ax.hist(obs, bins=edges, density=True, histtype="stepfilled", alpha=0.45, color=OBSERVED_COLOUR,
                label="observed")
        if len(nul):
            ax.hist(nul, bins=edges, density=True, histtype="step", lw=1.5, color=NULL_COLOUR,
                    label="randomisation null")
        ax.set_title(name, fontsize=9)
        ax.set_xlabel(xlabel, fontsize=8)
        ax.set_ylabel("density", fontsize=8)
        ax.tick_params(labelsize=7)
    for ax in list(axes.flat)[n:]:
        ax.set_visible(False)
    axes.flat[0].legend(fontsize=7)
    fig.suptitle(title, fontsize=10)
    fig.tight_layout()
    return fig
