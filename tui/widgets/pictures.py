"""Text pictures for the dashboard: drawn with plain dot and block characters.

Fonts over SSH often lack braille, so everything here uses ``·:%`` for points,
``─`` for a fitted line, ``█`` for a binned mean, ``░▒▓█`` for shades and
``▁…█`` for a small histogram. Colours are theme variables (``$primary`` …), so
the pictures follow the theme and still read with ``NO_COLOR`` (the characters
carry the meaning, colour only helps).

The functions only lay out numbers they are given; the numbers themselves come
from the estimates table (``analysis``).
"""

from __future__ import annotations

import math
from typing import Iterable, Sequence

from textual.content import Content

from fieldslope.tui.safe_text import escape_controls

SHADES = " ░▒▓█"
BARS = "▁▂▃▄▅▆▇█"


class Canvas:
    """A grid of characters, each with a style; rendered as Textual Content."""

    def __init__(self, width: int, height: int):
        self.width, self.height = max(1, width), max(1, height)
        self.cells = [[(" ", "")] * self.width for _ in range(self.height)]

    def put(self, col: int, row: int, char: str, style: str = "") -> None:
        if 0 <= col < self.width and 0 <= row < self.height:
            self.cells[row][col] = (char, style)

    def text(self, col: int, row: int, text: str, style: str = "") -> None:
        for i, ch in enumerate(escape_controls(text)):   # labels carry sites and seasons from data
            self.put(col + i, row, ch, style)

    def get(self, col: int, row: int) -> str:
        return self.cells[row][col][0]

    def lines(self) -> list[Content]:
        out = []
        for row in self.cells:
            parts: list[tuple[str, str]] = []
            for ch, style in row:
                if parts and parts[-1][1] == style:
                    parts[-1] = (parts[-1][0] + ch, style)
                else:
                    parts.append((ch, style))
            out.append(Content.assemble(*parts))
        return out

    def content(self) -> Content:
        return Content("\n").join(self.lines())


def fmt(value: float | None, digits: int = 3) -> str:
    """A number for a narrow column: blank-safe, at most ``digits`` significant places."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "–"
    if value == 0:
        return "0"
    mag = abs(value)
    if mag >= 1000 or mag < 0.001:
        return f"{value:.{max(digits - 1, 1)}e}"
    if mag >= 1:
        return f"{value:#.{digits}g}".rstrip(".")
    return f"{value:.{digits}f}"


def _axis_label(value: float) -> str:
    return f"{value:5.2f}" if abs(value) < 10 else f"{value:5.0f}"


def scatter_picture(
    x: Sequence[float],
    w: Sequence[float],
    beta: float | None,
    bins: Iterable[tuple[float, float]],
    *,
    width: int,
    height: int,
    xlabel: str,
) -> Content:
    """Relative fitness ``w`` against a standardized trait ``x``.

    Points are counted per character cell (``·`` one, ``:`` up to four, ``%``
    more); the gradient is drawn as the line ``w = 1 + β·x`` (the mean of ``w``
    is 1 and ``x`` is centred); ``bins`` are (bin centre, mean w) pairs drawn as
    ``█``.
    """
    pairs = [(float(a), float(b)) for a, b in zip(x, w) if math.isfinite(a) and math.isfinite(b)]
    bins = [(float(a), float(b)) for a, b in bins if math.isfinite(a) and math.isfinite(b)]
    left = 6  # y-axis labels
    plot_w, plot_h = max(10, width - left), max(4, height - 2)
    canvas = Canvas(left + plot_w, plot_h + 2)
    if not pairs:
        canvas.text(left, plot_h // 2, "no individuals with this trait and fitness", "$text-muted")
        return canvas.content()
    xs = sorted(p[0] for p in pairs)
    lo_x = min(-2.5, xs[0]) if xs[0] > -3.5 else -3.5
    hi_x = max(2.5, xs[-1]) if xs[-1] < 3.5 else 3.5
    ws = sorted(p[1] for p in pairs)
    top = ws[min(len(ws) - 1, int(0.98 * len(ws)))]
    candidates = [top, 1.5] + [b for _, b in bins]
    if beta is not None and math.isfinite(beta):
        candidates += [1 + beta * lo_x, 1 + beta * hi_x]
    hi_y = max(candidates) * 1.05
    lo_y = min(0.0, min(candidates))

    def col(v: float) -> int:
        return left + int(round((min(max(v, lo_x), hi_x) - lo_x) / (hi_x - lo_x) * (plot_w - 1)))

    def row(v: float) -> int:
        return int(round((hi_y - min(max(v, lo_y), hi_y)) / (hi_y - lo_y) * (plot_h - 1)))

    counts: dict[tuple[int, int], int] = {}
    for a, b in pairs:
        key = (col(a), row(b))
        counts[key] = counts.get(key, 0) + 1
    for (c, r), k in counts.items():
        canvas.put(c, r, "·" if k == 1 else ":" if k <= 4 else "%", "$text-muted" if k == 1 else "$foreground")
    if beta is not None and math.isfinite(beta):
        for c in range(left, left + plot_w):
            xv = lo_x + (c - left) / (plot_w - 1) * (hi_x - lo_x)
            canvas.put(c, row(1 + beta * xv), "─", "bold $primary")
    for a, b in bins:
        canvas.put(col(a), row(b), "█", "$accent")
    # axes
    for r, v in ((0, hi_y), (row(1.0), 1.0), (plot_h - 1, lo_y)):
        canvas.text(0, r, _axis_label(v), "$text-muted")
    canvas.put(col(0.0), plot_h, "┴", "$text-muted")
    canvas.text(left, plot_h, f"{lo_x:+.1f}", "$text-muted")
    canvas.text(left + plot_w - 4, plot_h, f"{hi_x:+.1f}", "$text-muted")
    canvas.text(col(0.0) + 2, plot_h, f"{xlabel} (sd)"[: max(0, plot_w // 2 - 6)], "$text-muted")
    legend = f"· individual  ─ w = 1 + β·x (β={fmt(beta)})  █ bin mean"
    canvas.text(0, plot_h + 1, legend[: left + plot_w])
    return canvas.content()


def quadratic_surface(beta: Sequence[float], gamma: Sequence[Sequence[float]], x1: float, x2: float) -> float:
    """Predicted change in relative fitness at (x1, x2): β·x + ½·xᵀγx (Lande & Arnold 1983, eq. 7)."""
    return (beta[0] * x1 + beta[1] * x2
            + 0.5 * (gamma[0][0] * x1 * x1 + gamma[1][1] * x2 * x2) + gamma[0][1] * x1 * x2)


def surface_picture(
    beta: Sequence[float],
    gamma: Sequence[Sequence[float]],
    names: tuple[str, str],
    *,
    width: int,
    height: int,
    limit: float = 2.0,
) -> Content:
    """The two-trait fitness surface as shaded cells over ±``limit`` sd, with a legend.

    Each cell shows the predicted change in relative fitness from the mean
    phenotype, Δw = β·x + ½·xᵀγx; five shades split the range seen in the
    picture into equal steps (legend on the right).
    """
    legend_w = 20
    plot_w, plot_h = max(10, width - legend_w - 6), max(4, height - 2)
    canvas = Canvas(width, plot_h + 2)
    grid = []
    for r in range(plot_h):
        x2 = limit - 2 * limit * r / (plot_h - 1)
        grid.append([quadratic_surface(beta, gamma, -limit + 2 * limit * c / (plot_w - 1), x2) for c in range(plot_w)])
    flat = [v for line in grid for v in line]
    lo, hi = min(flat), max(flat)
    span = hi - lo if hi > lo else 1.0
    styles = ["$error", "$warning", "$foreground", "$success", "$primary"]

    def level(v: float) -> int:
        return min(len(SHADES) - 1, int((v - lo) / span * len(SHADES)))

    for r, line in enumerate(grid):
        for c, v in enumerate(line):
            k = level(v)
            canvas.put(6 + c, r, SHADES[k] if k else "·", styles[k])
    origin_c, origin_r = 6 + (plot_w - 1) // 2, (plot_h - 1) // 2
    canvas.put(origin_c, origin_r, "+", "bold $text")
    canvas.text(0, 0, f"{limit:+.0f}sd", "$text-muted")
    canvas.text(0, plot_h - 1, f"{-limit:+.0f}sd", "$text-muted")
    canvas.text(0, origin_r, names[1][:5], "$text-muted")
    canvas.text(6, plot_h, f"{-limit:+.0f}sd", "$text-muted")
    canvas.text(6 + plot_w - 4, plot_h, f"{limit:+.0f}sd", "$text-muted")
    canvas.text(origin_c - len(names[0]) // 2, plot_h, names[0][: plot_w - 10], "$text-muted")
    lx = 6 + plot_w + 2
    canvas.text(lx, 0, "Δw from mean", "bold")
    for k in range(len(SHADES) - 1, -1, -1):
        a, b = lo + span * k / len(SHADES), lo + span * (k + 1) / len(SHADES)
        canvas.text(lx, len(SHADES) - k, (SHADES[k] if k else "·") * 2, styles[k])
        canvas.text(lx + 3, len(SHADES) - k, f"{a:+.2f}..{b:+.2f}")
    canvas.text(lx, len(SHADES) + 2, "+ mean phenotype", "$text-muted")
    canvas.text(0, plot_h + 1, "Δw = β·x + ½xᵀγx; β linear model, γ quadratic model"[:width], "$text-muted")
    return canvas.content()


def interval_rows(
    rows: Sequence[tuple[str, float | None, float | None, float | None]],
    *,
    width: int,
    label_width: int = 18,
    marks: Sequence[str] = (),
) -> Content:
    """Estimates with intervals on one shared axis: ``label  ──[──●──]──  est``.

    ``rows`` are (label, estimate, low, high); a missing interval draws the
    point alone. A ``│`` marks zero when it is in range. ``marks`` (same length
    as rows, optional) puts a short note after each number.
    """
    num_w = 8
    plot_w = max(10, width - label_width - num_w - 2)
    vals = [v for _, e, a, b in rows for v in (e, a, b) if v is not None and math.isfinite(v)]
    if not vals:
        return Content("no estimates yet")
    lo, hi = min(vals + [0.0]), max(vals + [0.0])
    pad = (hi - lo) * 0.05 or 0.1
    lo, hi = lo - pad, hi + pad

    def col(v: float) -> int:
        return int(round((v - lo) / (hi - lo) * (plot_w - 1)))

    lines = []
    zero = col(0.0)
    for i, (label, est, a, b) in enumerate(rows):
        canvas = Canvas(label_width + plot_w + num_w + 2, 1)
        canvas.text(0, 0, label[: label_width - 1])
        base = label_width
        canvas.put(base + zero, 0, "│", "$text-muted")
        ok = lambda v: v is not None and math.isfinite(v)  # noqa: E731
        if ok(a) and ok(b):
            ca, cb = col(a), col(b)
            for c in range(ca, cb + 1):
                canvas.put(base + c, 0, "─", "$primary")
            canvas.put(base + ca, 0, "[", "$primary")
            canvas.put(base + cb, 0, "]", "$primary")
            style = "bold $success" if (a > 0 or b < 0) else "bold $primary"
        else:
            style = "bold $primary"
        if ok(est):
            canvas.put(base + col(est), 0, "●" if ok(a) else "o", style)
        note = fmt(est) + (f" {marks[i]}" if i < len(marks) and marks[i] else "")
        canvas.text(base + plot_w + 1, 0, note[: num_w + 1])
        lines.append(canvas.lines()[0])
    axis = Canvas(label_width + plot_w + num_w + 2, 1)
    left, right = fmt(lo, 2), fmt(hi, 2)
    axis.text(label_width, 0, left, "$text-muted")
    axis.text(label_width + plot_w - len(right), 0, right, "$text-muted")
    if len(left) + 1 < zero < plot_w - len(right) - 1:
        axis.put(label_width + zero, 0, "0", "$text-muted")
    lines.append(axis.lines()[0])
    return Content("\n").join(lines)


def histogram_strip(values: Sequence[float], marked: float | None, *, width: int) -> Content:
    """Where one value sits in its cell: a one-line histogram and a ``▲`` under the value."""
    vals = sorted(float(v) for v in values if v is not None and math.isfinite(float(v)))
    if not vals:
        return Content("no other values in this cell")
    lo, hi = vals[0], vals[-1]
    if marked is not None and math.isfinite(marked):
        lo, hi = min(lo, marked), max(hi, marked)
    span = hi - lo or 1.0
    width = max(10, width - 2)
    counts = [0] * width
    for v in vals:
        counts[min(width - 1, int((v - lo) / span * width))] += 1
    top = max(counts)
    bars = "".join(" " if k == 0 else BARS[min(len(BARS) - 1, int(k / top * (len(BARS) - 1) + 0.5))] for k in counts)
    lines = [Content.assemble((bars, "$primary"))]
    pointer = Canvas(width, 1)
    if marked is not None and math.isfinite(marked):
        pointer.put(min(width - 1, int((marked - lo) / span * width)), 0, "▲", "bold $error")
    lines.append(pointer.lines()[0])
    ends = Canvas(width, 1)
    ends.text(0, 0, fmt(lo), "$text-muted")
    ends.text(width - len(fmt(hi)), 0, fmt(hi), "$text-muted")
    lines.append(ends.lines()[0])
    return Content("\n").join(lines)
