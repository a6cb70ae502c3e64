"""The report's pictures, drawn with matplotlib (Agg, no display) as SVG text.

matplotlib is imported here only, on first use: the command line's ``--help`` and every other
command start without it. Labels that come from data (traits, sites, seasons) pass through
:func:`label`, so a dollar sign is never read as mathematics and control characters are shown as
escapes (the SVG stays well-formed XML).
"""

from __future__ import annotations

import io
from dataclasses import dataclass

from fieldslope.tui.number_text import tau2_text
from fieldslope.tui.summary import shown

WIDTH_IN, HEIGHT_IN = 6.4, 3.6


@dataclass(frozen=True)
class Figure:
    name: str          # file stem for --figures (letters, digits, - and _ only)
    title: str         # caption (plain text; escaped by the page)
    svg: str           # the <svg> element, without the XML prolog
    png: bytes = b""   # filled only when asked for


def _plt():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    plt.rcParams.update({"svg.fonttype": "none", "font.size": 9, "axes.titlesize": 10,
                         "svg.hashsalt": "fieldslope", "figure.dpi": 100})
    return plt


def label(text: object) -> str:
    """Text from data as a matplotlib label: controls escaped, ``$`` not mathematics."""
    return shown(text).replace("$", r"\$")


def _svg(fig) -> str:
    buf = io.StringIO()
    # point clouds and filled contours are embedded as images (dpi 150): thousands of vector dots
    # would make the page several megabytes; lines, text and axes stay vector graphics
    fig.savefig(buf, format="svg", bbox_inches="tight", metadata={"Date": None}, dpi=150)
    text = buf.getvalue()
    return text[text.index("<svg"):]


def finish(fig, name: str, title: str, png: bool = False) -> Figure:
    plt = _plt()
    svg = _svg(fig)
    data = b""
    if png:
        out = io.BytesIO()
        fig.savefig(out, format="png", bbox_inches="tight", dpi=150)
        data = out.getvalue()
    plt.close(fig)
    return Figure(name, title, svg, data)


def fitness_function_figure(ff, x, w, trait: str, where: str, name: str, png: bool = False) -> Figure:
    """Relative fitness against the standardized trait: the points, the spline and its band."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(WIDTH_IN, HEIGHT_IN))
    ax.scatter(x, w, s=6, alpha=0.25, color="0.35", linewidths=0, label="individuals", rasterized=True)
    if ff is not None:
        if ff.resamples:
            ax.fill_between(ff.grid, ff.low, ff.high, color="tab:blue", alpha=0.25, linewidth=0,
                            label=f"95 % bootstrap band ({ff.resamples} resamples)")
        ax.plot(ff.grid, ff.curve, color="tab:blue", linewidth=2,
                label=f"cubic spline, GCV (λ = {ff.fit.lam:.3g}, edf {ff.fit.edf:.1f})")
    ax.axhline(1.0, color="0.6", linewidth=0.8, linestyle=":")
    ax.set_xlabel(f"{label(trait)} (standardized, sd)")
    ax.set_ylabel("relative fitness w")
    ax.set_title(f"{label(trait)} · {label(where)}")
    import numpy as np

    reach = float(np.nanmax(ff.high if ff is not None and ff.resamples else ff.curve)) if ff is not None else 1.0
    top = max(2.0, 1.4 * reach)
    if len(w):
        top = min(top, float(np.max(w)) * 1.05)
    ax.set_ylim(-0.1, top)
    ax.legend(loc="upper left", fontsize=7, frameon=False)
    return finish(fig, name, f"Fitness function of {shown(trait)}, {shown(where)}", png)


def surface_figure(beta, gamma, traits: tuple[str, str], x1, x2, where: str, name: str,
                   png: bool = False) -> Figure:
    """w = 1 + β·x + ½xᵀγx over ±2.5 sd as contours, with the individuals (Lande & Arnold 1983, eq. 7)."""
    import numpy as np

    plt = _plt()
    g = np.linspace(-2.5, 2.5, 61)
    A, B = np.meshgrid(g, g)
    Z = 1 + beta[0] * A + beta[1] * B + 0.5 * (gamma[0][0] * A * A + gamma[1][1] * B * B) + gamma[0][1] * A * B
    fig, ax = plt.subplots(figsize=(WIDTH_IN * 0.8, HEIGHT_IN * 1.3))
    filled = ax.contourf(A, B, Z, levels=12, cmap="viridis", alpha=0.85)
    filled.set_rasterized(True)
    lines = ax.contour(A, B, Z, levels=12, colors="k", linewidths=0.4)
    ax.clabel(lines, fontsize=6, fmt="%.2f")
    ax.scatter(x1, x2, s=4, color="white", edgecolors="0.2", linewidths=0.2, alpha=0.6, rasterized=True)
    fig.colorbar(filled, ax=ax, label="predicted relative fitness")
    ax.set_xlim(-2.5, 2.5)
    ax.set_ylim(-2.5, 2.5)
    ax.set_xlabel(f"{label(traits[0])} (sd)")
    ax.set_ylabel(f"{label(traits[1])} (sd)")
    ax.set_title(f"{label(traits[0])} × {label(traits[1])} · {label(where)}")
    return finish(fig, name, f"Fitted quadratic surface of {shown(traits[0])} and {shown(traits[1])}, "
                             f"{shown(where)}", png)


def forest_figure(panels, name: str, title: str, png: bool = False) -> Figure:
    """One panel per trait: β of each season with its interval, and the weighted mean with τ².

    ``panels``: list of (trait, rows, mean) where rows = [(label, est, lo, hi)], mean = (est, lo, hi, tau2) or None.
    """
    plt = _plt()
    fig, axes = plt.subplots(1, len(panels), figsize=(WIDTH_IN * 1.1, 0.45 * max(len(p[1]) for p in panels) + 1.6),
                             sharey=True, squeeze=False)
    for ax, (trait, rows, mean) in zip(axes[0], panels):
        ys = list(range(len(rows), 0, -1))
        for y, (_, est, lo, hi) in zip(ys, rows):
            if lo is not None and hi is not None:
                ax.plot([lo, hi], [y, y], color="tab:blue", linewidth=1.5)
            ax.plot([est], [y], "o", color="tab:blue", markersize=4)
        if mean is not None:
            est, lo, hi, tau2 = mean
            if lo is not None and hi is not None:
                ax.fill([lo, est, hi, est], [0, 0.25, 0, -0.25], color="tab:orange", alpha=0.8)
            else:
                ax.plot([est], [0], "D", color="tab:orange")
            tau = "" if tau2 is None else f", τ² = {tau2_text(tau2)}"
            ax.set_title(f"{label(trait)}{tau}", fontsize=9)
        else:
            ax.set_title(label(trait), fontsize=9)
        ax.axvline(0, color="0.5", linewidth=0.8)
        ax.set_xlabel("β (w per sd)")
        ax.set_yticks([*ys, 0], [label(r[0]) for r in rows] + ["mean"])
        ax.set_ylim(-0.8, len(rows) + 0.8)
    return finish(fig, name, title, png)


def intake_figure(series, name: str, png: bool = False) -> Figure:
    """Individuals on record at each site after each batch. ``series``: {site: [(batch, n)]}."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(WIDTH_IN, HEIGHT_IN * 0.9))
    for site, points in series.items():
        ax.step([b for b, _ in points], [n for _, n in points], where="post", label=label(site), linewidth=1.5)
    ax.set_xlabel("batch number (order taken in)")
    ax.set_ylabel("individuals on record")
    ax.set_ylim(bottom=0)
    ax.legend(fontsize=7, frameon=False, loc="upper left")
    return finish(fig, name, "Intake: individuals on record at each site after each batch", png)
