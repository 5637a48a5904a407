"""Small matplotlib figures (Agg backend) turned into inline SVG for the report.

Every figure is drawn here and returned as an ``<svg>`` element ready to paste into the page: no
files, no network, no scripts. Ids inside each SVG get a per-figure prefix so several figures can
share one HTML document, and XML namespaces and metadata are dropped (HTML5 does not need them)
so the page carries no web address at all.
"""
from __future__ import annotations

import io
import itertools
import re
import warnings

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ..palette import (CLASS_COLOURS, EQUATION, FOREST, GRID, INK, LOSS, MODEL_COLOURS,  # noqa: E402,F401
                       TREE)

_RC = {
    "svg.fonttype": "none", "svg.hashsalt": "pocketforest", "font.size": 8.5,
    "font.family": "sans-serif", "axes.edgecolor": "#6f6a58", "axes.labelcolor": INK,
    "xtick.color": INK, "ytick.color": INK, "axes.spines.top": False, "axes.spines.right": False,
    "axes.grid": True, "grid.color": GRID, "grid.linewidth": 0.6, "axes.axisbelow": True,
    "figure.facecolor": "none", "axes.facecolor": "none", "savefig.facecolor": "none",
}
_counter = itertools.count(1)


def figure(w: float, h: float, left: float = 0.55, bottom: float = 0.45, right: float = 0.12, top: float = 0.1):
    """A figure with fixed margins in inches: one draw when saving (a 'tight' box costs two)."""
    with plt.rc_context(_RC):
        fig, ax = plt.subplots(figsize=(w, h))
    fig.subplots_adjust(left=left / w, right=1 - right / w, bottom=bottom / h, top=1 - top / h)
    return fig, ax


def to_svg(fig, label: str) -> str:
    """The figure as an inline ``<svg>`` with a title for screen readers; closes the figure."""
    buf = io.StringIO()
    with plt.rc_context(_RC), warnings.catch_warnings():
        # text stays text in the SVG (svg.fonttype "none") and the browser draws it with its own
        # fonts, so a letter DejaVu Sans lacks (a CJK column name) is no reason to warn the user
        warnings.filterwarnings("ignore", message=r"Glyph \d+ .* missing from font", category=UserWarning)
        fig.savefig(buf, format="svg",
                    metadata={"Date": None, "Creator": None, "Format": None, "Type": None})
    plt.close(fig)
    text = buf.getvalue()
    text = text[text.index("<svg"):]
    text = re.sub(r"<metadata>.*?</metadata>", "", text, flags=re.S)
    text = re.sub(r'\s+xmlns(:\w+)?="[^"]*"', "", text)
    text = re.sub(r"font-family:\s*'?DejaVu Sans'?", "font-family: 'DejaVu Sans', 'Helvetica Neue', Arial, sans-serif", text)
    n = next(_counter)
    text = re.sub(r'id="([^"]+)"', lambda m: f'id="g{n}-{m.group(1)}"', text)
    text = re.sub(r"url\(#([^)]+)\)", lambda m: f"url(#g{n}-{m.group(1)})", text)
    text = re.sub(r'href="#([^"]+)"', lambda m: f'href="#g{n}-{m.group(1)}"', text)
    title = label.replace("&", "&amp;").replace("<", "&lt;")
    return text.replace(">", f' role="img" aria-label="{title}"><title>{title}</title>', 1)


def _setup(ax) -> None:
    ax.tick_params(length=2.5, width=0.6)
    for s in ax.spines.values():
        s.set_linewidth(0.7)


# ---------------------------------------------------------------- scoreboard and importance

def loss_plot(loss: dict) -> str:
    """Loss of each surrogate as a point with its 95% interval; zero means 'as good as the forest'."""
    fig, ax = figure(5.2, 1.35, left=0.7, bottom=0.42)
    _setup(ax)
    names = [m for m in ("tree", "equation") if m in loss]
    for i, m in enumerate(names):
        lo = loss[m]
        ax.plot([lo["ci_low"], lo["ci_high"]], [i, i], color=MODEL_COLOURS[m], lw=2.2, solid_capstyle="round")
        ax.plot([lo["value"]], [i], "o", color=MODEL_COLOURS[m], ms=6, mec="white", mew=0.8)
    ax.axvline(0, color=INK, lw=0.8, ls=(0, (3, 2)))
    ax.set_yticks(range(len(names)), names)
    ax.set_ylim(-0.6, len(names) - 0.4)
    metric = loss[names[0]]["metric"] if names else ""
    ax.set_xlabel(f"loss in {metric} against the forest (positive: the surrogate does worse)")
    ax.grid(axis="y", visible=False)
    return to_svg(fig, "accuracy loss of tree and equation with 95% intervals")


def importance_plot(importance: list[dict], metric: str, top: int = 20) -> str:
    rows = importance[:top][::-1]
    longest = max((len(_short(r["feature"], 28)) for r in rows), default=4)
    fig, ax = figure(5.6, 0.6 + 0.24 * len(rows), left=0.25 + 0.062 * longest, bottom=0.42)
    _setup(ax)
    y = np.arange(len(rows))
    mean = np.array([r["mean"] for r in rows], dtype=float)
    se = np.array([r["se"] if r["se"] is not None else 0.0 for r in rows], dtype=float)
    ax.barh(y, mean, height=0.62, color=FOREST, alpha=0.85)
    ax.errorbar(mean, y, xerr=1.96 * se, fmt="none", ecolor=INK, elinewidth=0.9, capsize=2.2)
    ax.set_yticks(y, [_short(r["feature"], 28) for r in rows])
    ax.axvline(0, color=INK, lw=0.7)
    what = metric.removesuffix("_increase").replace("_", " ")
    ax.set_xlabel(f"increase in out-of-bag {what} when the column is shuffled (±1.96 se)")
    ax.grid(axis="y", visible=False)
    return to_svg(fig, "permutation importance with error bars")


def frontier_plot(frontier: list[dict], key: str, chosen: int, cap: int | None, margin: float | None,
                  held_out_on: str | None) -> str:
    """Fidelity against leaves (log scale) on the confirmation rows, which chose the size, and
    on the held-out rows; the band is the margin below the best tree under the cap."""
    fig, ax = figure(5.6, 2.6, left=0.62, bottom=0.45)
    _setup(ax)
    leaves = [row["leaves"] for row in frontier]
    conf = [row["confirmation"][key] for row in frontier]
    ax.plot(leaves, conf, color=FOREST, lw=1.3, ls=(0, (4, 2)), label="confirmation rows (chose the size)")
    held = [(row["leaves"], row["held_out"][key]) for row in frontier if row.get("held_out")]
    if held:
        label = "test rows" if held_out_on == "test" else f"held out ({held_out_on})"
        ax.plot([h[0] for h in held], [h[1] for h in held], color=TREE, lw=1.8, label=label)
    if cap is not None and margin is not None:
        best = max((c for k, c in zip(leaves, conf) if k <= cap), default=None)
        if best is not None:
            ax.fill_between([min(leaves), cap], best - margin, best, color=GRID, alpha=0.7, lw=0, zorder=0,
                            label=f"within {margin:g} of the best up to {cap} leaves")
        ax.axvline(cap, color=INK, lw=0.7, ls=":")
    ax.axvline(chosen, color=INK, lw=0.9, ls=(0, (2, 2)))
    at = dict(zip(leaves, conf))
    if chosen in at:
        ax.plot([chosen], [at[chosen]], "o", color=FOREST, ms=5.5, mec="white", mew=0.8, zorder=5)
    ax.annotate(f"chosen: {chosen} leaves", (chosen, 0.04), xycoords=("data", "axes fraction"),
                xytext=(4, 0), textcoords="offset points", fontsize=7.5, color=INK)
    ax.set_xscale("log", base=2)
    ticks = [k for k in (2, 4, 8, 16, 32, 64, 128, 256) if min(leaves) <= k <= max(leaves)]
    ax.set_xticks(ticks, [str(k) for k in ticks])
    ax.minorticks_off()
    ax.set_xlabel("leaves in the tree")
    ax.set_ylabel("fidelity: " + ("R²" if key == "r2" else "R² of class probabilities"))
    ax.legend(frameon=False, fontsize=7, loc="upper left")
    return to_svg(fig, "fidelity of the surrogate tree against its number of leaves")


# ---------------------------------------------------------------- shapes and interactions

def shape_plot(shape: dict) -> str:
    """Forest partial dependence (solid) and the equation's (dashed) for one variable."""
    cat = shape["kind"] != "numeric"
    fig, ax = figure(3.3, 2.35, left=0.62, bottom=0.62 if cat and len(shape["grid"]) > 4 else 0.42)
    _setup(ax)
    outcomes = shape["outcomes"]
    single = len(outcomes) == 1
    if shape["kind"] == "numeric":
        x = np.asarray(shape["grid"], dtype=float)
        for k, name in enumerate(outcomes):
            c_f = FOREST if single else CLASS_COLOURS[k % len(CLASS_COLOURS)]
            c_e = EQUATION if single else c_f
            ax.plot(x, shape["forest"][k], color=c_f, lw=1.8, label="forest" if single else str(name))
            if shape.get("equation") is not None:
                ax.plot(x, shape["equation"][k], color=c_e, lw=1.4, ls=(0, (4, 2)),
                        label="equation" if single else None)
        lo, hi = ax.get_ylim()
        deciles = shape.get("deciles") or []
        ax.plot(deciles, [lo] * len(deciles), "|", color=INK, ms=6, mew=0.8, clip_on=False)
        ax.set_ylim(lo, hi)
        ax.set_xlabel(_short(shape["variable"], 40))
    else:
        levels = [lv if lv else "(missing)" for lv in shape["grid"]]
        x = np.arange(len(levels))
        width = 0.38 if shape.get("equation") is not None else 0.6
        for k, name in enumerate(outcomes):
            c = FOREST if single else CLASS_COLOURS[k % len(CLASS_COLOURS)]
            off = (k - (len(outcomes) - 1) / 2) * 0.12
            ax.plot(x + off - (width / 2 if shape.get("equation") is not None else 0), shape["forest"][k], "o",
                    color=c, ms=5, label="forest" if single else str(name))
            if shape.get("equation") is not None:
                ax.plot(x + off + width / 2, shape["equation"][k], "D", color=EQUATION if single else c,
                        mfc="white", ms=4.5, mew=1.2, label="equation" if single else None)
        ax.set_xticks(x, [_short(lv, 12) for lv in levels], rotation=30 if len(levels) > 4 else 0,
                      ha="right" if len(levels) > 4 else "center")
        ax.set_xlabel(_short(shape["variable"], 40))
        ax.grid(axis="x", visible=False)
    ax.set_ylabel(shape["scale"])
    ax.legend(frameon=False, fontsize=7, loc="best")
    return to_svg(fig, f"partial dependence of the prediction on {shape['variable']}")


def interaction_plot(interactions: list[dict]) -> str:
    """H² of each measured pair as a symmetric matrix; pairs not measured stay blank."""
    names: list[str] = []
    for it in interactions:
        for v in it["variables"]:
            if v not in names:
                names.append(v)
    k = len(names)
    mat = np.full((k, k), np.nan)
    for it in interactions:
        a, b = (names.index(v) for v in it["variables"])
        if it.get("h2") is not None:
            mat[a, b] = mat[b, a] = float(it["h2"])
    longest = max((len(_short(n, 18)) for n in names), default=4)
    cell = 0.42 if k <= 8 else 0.3
    left, bottom = 0.2 + 0.062 * longest, 0.2 + 0.045 * longest
    fig, ax = figure(left + k * cell + 1.2, bottom + k * cell + 0.15, left=left, bottom=bottom, right=1.2, top=0.15)
    ax.grid(False)
    cmap = matplotlib.colors.LinearSegmentedColormap.from_list("parchment_green", ["#f6f2e2", "#b9c98f", FOREST, "#1f3b1a"])
    cmap = cmap.with_extremes(bad="#ffffff00")
    top = max(0.05, float(np.nanmax(mat)) if np.isfinite(mat).any() else 0.05)
    im = ax.imshow(np.ma.masked_invalid(mat), cmap=cmap, vmin=0, vmax=top, aspect="auto")
    for i in range(k):
        for j in range(k):
            if np.isfinite(mat[i, j]) and i != j:
                ax.text(j, i, f"{mat[i, j]:.2f}", ha="center", va="center", fontsize=7,
                        color="white" if mat[i, j] > 0.55 * top else INK)
    ax.set_xticks(range(k), [_short(n, 14) for n in names], rotation=40, ha="right")
    ax.set_yticks(range(k), [_short(n, 18) for n in names])
    for s in ax.spines.values():
        s.set_visible(False)
    cax = fig.add_axes([1 - 1.0 / fig.get_figwidth(), ax.get_position().y0, 0.12 / fig.get_figwidth(),
                        ax.get_position().height])
    cb = fig.colorbar(im, cax=cax)
    cb.set_label("H²")
    cb.outline.set_linewidth(0.5)
    return to_svg(fig, "interaction strength between pairs of variables")


def _short(text: str, n: int) -> str:
    text = str(text)
    return text if len(text) <= n else text[: n - 1] + "…"
