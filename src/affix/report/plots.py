"""The report's plots, drawn with matplotlib's Agg backend (no display needed) and kept as SVG.

Each function takes plain numbers and returns an :class:`Image`: the SVG
as a data URI (text with a few characters percent-encoded, not base64, so
the rasterised layers inside are not encoded twice), its size in CSS pixels and its alt
text.  Vector text and axes stay sharp in print; only dense scatter layers
are rasterised.  The SVG carries no date and its element ids come from a
per-figure salt, so the same build gives the same page byte for byte.
"""
from __future__ import annotations

import io
import math
from dataclasses import dataclass

import matplotlib

matplotlib.use("Agg")  # before any drawing: never look for a display

import numpy as np  # noqa: E402
from matplotlib.collections import LineCollection  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.patches import Patch  # noqa: E402
from matplotlib.ticker import FuncFormatter, MaxNLocator  # noqa: E402

from affix.report.palette import PALETTE  # noqa: E402

RASTER_DPI = 110  # the scatter layers only: 10**4 tiny dots look the same at higher resolution
# Characters the data URI percent-encodes: those with a meaning in a URL ('%', '#'), the white space
# a URL parser drops, and those the HTML attribute would otherwise escape as longer entities.
_URI_ESCAPES = str.maketrans({c: f"%{ord(c):02X}" for c in "%#\n\r\t\"'<>&"})
_STYLE = {
    "font.family": "DejaVu Sans",
    "font.size": 8.5,
    "axes.titlesize": 9,
    "axes.titleweight": "bold",
    "axes.titlelocation": "left",
    "axes.labelsize": 8.5,
    "axes.edgecolor": PALETTE["rule"],
    "axes.labelcolor": PALETTE["ink"],
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.color": PALETTE["grid"],
    "grid.linewidth": 0.6,
    "xtick.color": PALETTE["muted"],
    "ytick.color": PALETTE["muted"],
    "text.color": PALETTE["ink"],
    "text.parse_math": False,  # names and labels are shown as written, '$' included
    "figure.facecolor": "white",
    "axes.facecolor": "white",
    "svg.fonttype": "none",  # text stays text: small, selectable, searchable
    "legend.frameon": False,
    "legend.fontsize": 8,
}
BUDGET_PARTS = (  # (key, label, colour key)
    ("float_rms", "estimator RMS", "estimator"),
    ("coefficients", "coefficient rounding RMS", "coefficients"),
    ("output_rounding", "output rounding RMS", "rounding"),
    ("input_quantization", "input quantization RMS", "inputs"),
    ("total", "total RMS, predicted", "ink"),
    ("worst_case", "worst-case |integer - float|, proven", "bound"),
)


@dataclass(frozen=True)
class Image:
    uri: str
    width: int  # CSS pixels
    height: int
    alt: str


def _figure(width_in: float, height_in: float) -> Figure:
    # Margins are set by hand (_grid): matplotlib's automatic layouts cost more than the drawing itself.
    return Figure(figsize=(width_in, height_in))


def _image(figure: Figure, salt: str, alt: str) -> Image:
    buffer = io.StringIO()
    with matplotlib.rc_context({"svg.hashsalt": salt}):
        figure.savefig(buffer, format="svg", dpi=RASTER_DPI, metadata={"Date": None, "Creator": None})
    text = buffer.getvalue()
    text = text[text.index("<svg"):]  # drop the XML prolog and doctype: an <img> needs neither
    width, height = (round(v * 96) for v in figure.get_size_inches())
    return Image("data:image/svg+xml;charset=utf-8," + text.translate(_URI_ESCAPES), width, height, alt)


def styled(draw):
    """Run a drawing function under the report's matplotlib style."""

    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(_STYLE):
            return draw(*args, **kwargs)

    wrapper.__name__, wrapper.__doc__ = draw.__name__, draw.__doc__
    return wrapper


@dataclass(frozen=True)
class Margins:
    """Space around and between panels, in inches: room for tick labels, axis labels and titles."""

    left: float = 0.75
    right: float = 0.2
    top: float = 0.75  # the figure's title line
    bottom: float = 0.55
    between_x: float = 0.6
    between_y: float = 0.8


def _grid(count: int, columns: int, panel_w: float, panel_h: float, margins: Margins = Margins(), **share):
    """A figure of ``count`` panels, ``columns`` to a row, each panel_w x panel_h inches of plot area."""
    columns = max(1, min(columns, count))
    rows = math.ceil(count / columns)
    width = margins.left + margins.right + columns * panel_w + (columns - 1) * margins.between_x
    height = margins.top + margins.bottom + rows * panel_h + (rows - 1) * margins.between_y
    figure = _figure(width, height)
    figure.subplots_adjust(
        left=margins.left / width, right=1 - margins.right / width,
        bottom=margins.bottom / height, top=1 - margins.top / height,
        wspace=margins.between_x / panel_w, hspace=margins.between_y / panel_h,
    )
    axes = figure.subplots(rows, columns, squeeze=False, **share)
    for extra in axes.ravel()[count:]:
        extra.set_visible(False)
    return figure, axes


def _title(figure: Figure, text: str) -> None:
    """The figure's title, top left: what to read from it."""
    width, height = figure.get_size_inches()
    figure.suptitle(text, x=0.1 / width, y=1 - 0.12 / height, ha="left", va="top", fontsize=9.5, fontweight="bold")


@styled
def budget(outputs, parts: dict, limits, limited: str | None, units) -> Image:
    """Per output, the RMS parts, the total and the worst case on a log axis.

    ``limited`` names the part the budget limits ("worst_case" or "total"): that bar is outlined and
    the budget drawn as a dashed line across it.
    """
    series = [(key, label, colour) for key, label, colour in BUDGET_PARTS if parts.get(key) is not None]
    margins = Margins(left=2.45, right=0.3, between_x=0.45, between_y=0.75, top=0.6, bottom=0.6)
    figure, axes = _grid(len(outputs), 2, 3.5, 0.24 * len(series) + 0.2, margins, sharey=True)
    positions = np.arange(len(series))[::-1]
    for i, (name, ax) in enumerate(zip(outputs, axes.ravel())):
        values = [float(parts[key][i]) for key, _, _ in series]
        bars = ax.barh(positions, [v if v > 0 else np.nan for v in values], height=0.62,
                       color=[PALETTE[colour] for _, _, colour in series])
        ax.set_xscale("log")
        ax.minorticks_off()
        ax.xaxis.set_major_formatter(FuncFormatter(lambda value, _: f"{value:g}"))
        ax.set_yticks(positions, [label for _, label, _ in series])
        ax.grid(axis="y", visible=False)
        limit = None if limits is None else limits[i]
        ends = [v for v in values if v > 0] + ([limit] if limit else [])
        if ends:
            ax.set_xlim(min(ends) / 4, max(ends) * 60)
        for y, v in zip(positions, values):  # a column of values at the panel's right edge, clear of the bars
            ax.text(0.99, y, f"{v:.3g}", transform=ax.get_yaxis_transform(), ha="right", va="center", fontsize=7.5)
        title = name
        if limit and limited in parts:
            k = [key for key, _, _ in series].index(limited)
            bars[k].set(edgecolor=PALETTE["limit"], linewidth=1.5)
            ax.plot([limit, limit], [positions[k] - 0.45, positions[k] + 0.45], color=PALETTE["limit"], linewidth=2.2,
                    linestyle=(0, (2, 1)))
            title = f"{name}: budget {limit:.3g} on the outlined bar"
        ax.set_title(title, fontsize=8.5)
        ax.set_xlabel(f"{units[i]}, log scale")
    _title(figure, "Accuracy budget: what the error is made of, per output; the outlined bar must end left of "
                   "its dashed budget mark")
    alt = "Accuracy budget per output, log scale. " + " ".join(
        f"{name}: " + ", ".join(f"{label} {float(parts[key][i]):.3g}" for key, label, _ in series)
        + (f"; budget {limits[i]:.3g}." if limits and limits[i] else ".")
        for i, name in enumerate(outputs)
    )
    return _image(figure, "budget", alt)


@styled
def deviation(outputs, edges, calibration, random, predicted, random_predicted, bounds, lsb, units) -> Image:
    """Per output, the share of rows in each (integer - float) bin, calibration rows and random box points."""
    margins = Margins(left=0.7, between_x=0.55, between_y=0.85, top=0.55, bottom=1.0)
    figure, axes = _grid(len(outputs), 3, 2.9, 1.75, margins)
    for i, (name, ax) in enumerate(zip(outputs, axes.ravel())):
        e = edges[:, i]
        for counts, label, colour in ((calibration, "calibration rows", "estimator"),
                                      (random, "random points of the box", "inputs")):
            if counts is not None and counts[:, i].sum():
                ax.stairs(counts[:, i] / counts[:, i].sum() * 100, e, color=PALETTE[colour], linewidth=1.4,
                          label=label)
        for value, style, colour, label in (
            (None if predicted is None else predicted[i], (0, (3, 2)), "estimator", "± predicted RMS, calibration"),
            (None if random_predicted is None else random_predicted[i], (0, (1, 1.5)), "inputs",
             "± predicted RMS, box"),
            (bounds[i], "-", "bound", "± proven worst-case bound"),
        ):
            if value is not None:
                ax.axvline(value, color=PALETTE[colour], linestyle=style, linewidth=1.3, label=label)
                ax.axvline(-value, color=PALETTE[colour], linestyle=style, linewidth=1.3)
        ax.set_title(name)
        ax.xaxis.set_major_locator(MaxNLocator(nbins=5, symmetric=True))
        ax.set_xlabel(f"integer - float, {units[i]}\n(1 output lsb = {lsb[i]:g})", fontsize=7.5)
        ax.set_ylabel("rows, % per bin")
    handles, labels = axes.ravel()[0].get_legend_handles_labels()
    figure.legend(handles, labels, loc="lower left", ncol=3, fontsize=7.5, bbox_to_anchor=(0.01, 0.0))
    _title(figure, "Integer deviation: every bin must lie inside the solid bound lines; the spread should match "
                   "the dashed predicted RMS")
    alt = "Histograms of integer minus float estimate per output. " + " ".join(
        f"{name}: proven bound {bounds[i]:.3g}" + (f", predicted RMS {predicted[i]:.3g}." if predicted is not None else ".")
        for i, name in enumerate(outputs)
    )
    return _image(figure, "deviation", alt)


@styled
def residuals(outputs, output_units, inputs, input_units, x, residual, trends, note) -> Image:
    """The residual matrix: a row per output, a column per input, the sampled rows (rasterised) and
    each pair's trend over every row.  ``trends[i][j]`` = (x, mean residual, share of mean square in %).

    With dozens of panels, one matplotlib Axes each would cost more than everything else on the page, so
    the matrix is one Axes: each panel is a cell of a grid in which its data are scaled to fit, and the
    tick marks and labels of each column and row are placed by hand.
    """
    n, m = len(outputs), len(inputs)
    cell_w, cell_h = max(1.25, min(2.2, 10.5 / m)), 1.15  # inches
    margins = Margins(left=1.2, right=0.15, top=0.75, bottom=0.75)
    figure, axes = _grid(1, 1, cell_w * m, cell_h * n, margins)
    ax = axes[0, 0]
    ax.set_axis_off()
    ax.set_xlim(0, m)
    ax.set_ylim(n, 0)  # row 0 at the top
    gap = 0.06  # of a cell, between neighbouring panels
    x_scales = [_Scale(x[:, j], trends_x=[trends[i][j][0] for i in range(n)], nbins=3) for j in range(m)]
    y_scales = [_Scale.symmetric(residual[:, i], nbins=4) for i in range(n)]
    points_x, points_y, lines, zeros, frames = [], [], [], [], []
    for i in range(n):
        top, bottom = i + gap, i + 1 - gap
        ys = y_scales[i]
        for j in range(m):
            left, right = j + gap, j + 1 - gap
            xs = x_scales[j]
            points_x.append(xs.place(x[:, j], left, right))
            points_y.append(ys.place(residual[:, i], bottom, top))
            tx, ty, share = trends[i][j]
            lines.append(np.column_stack([xs.place(tx, left, right), ys.place(ty, bottom, top)]))
            zeros.append([(left, ys.place(0.0, bottom, top)), (right, ys.place(0.0, bottom, top))])
            frames.append([(left, top), (left, bottom), (right, bottom)])
            ax.text(left + 0.03, top + 0.03, f"trend {share:.1f} %", fontsize=6.5, va="top",
                    color=PALETTE["bound"] if share >= 1 else PALETTE["muted"])
    ax.scatter(np.concatenate(points_x), np.concatenate(points_y), s=1.6, linewidths=0, color=PALETTE["estimator"],
               alpha=0.3, rasterized=True)
    ax.add_collection(LineCollection(frames, colors=PALETTE["rule"], linewidths=0.8))
    ax.add_collection(LineCollection(zeros, colors=PALETTE["muted"], linewidths=0.7))
    ax.add_collection(LineCollection(lines, colors=PALETTE["bound"], linewidths=1.6))
    for j, xs in enumerate(x_scales):  # column: input name on top, ticks and unit below the last row
        ax.text(j + 0.5, -0.04, inputs[j], ha="center", va="bottom", fontsize=8, fontweight="bold")
        for value in xs.ticks:
            at = xs.place(value, j + gap, j + 1 - gap)
            ax.plot([at, at], [n - gap, n - gap + 0.04], color=PALETTE["muted"], linewidth=0.8)
            ax.text(at, n - gap + 0.07, f"{value:g}", ha="center", va="top", fontsize=6.5, color=PALETTE["muted"])
        ax.text(j + 0.5, n + 0.2, input_units[j], ha="center", va="top", fontsize=7.5)
    for i, ys in enumerate(y_scales):  # row: ticks left of the first column, output name and unit beyond
        for value in ys.ticks:
            at = ys.place(value, i + 1 - gap, i + gap)
            ax.plot([gap - 0.03, gap], [at, at], color=PALETTE["muted"], linewidth=0.8)
            ax.text(gap - 0.05, at, f"{value:g}", ha="right", va="center", fontsize=6.5, color=PALETTE["muted"])
        ax.text(-0.32, i + 0.5, f"{outputs[i]}\n{output_units[i]}", ha="center", va="center", rotation=90,
                fontsize=7.5)
    _title(figure, "Residuals, measured - estimated (rows: outputs; columns: inputs). A bent trend line means a "
                   "missing term; 'trend' is its share of the residual mean square.\n" + note)
    alt = "Residual of each output against each input, with trend lines. " + " ".join(
        f"{outputs[i]}: " + ", ".join(f"{inputs[j]} trend {trends[i][j][2]:.1f} %" for j in range(m)) + "."
        for i in range(n)) + " " + note
    return _image(figure, "residuals", alt)


class _Scale:
    """A panel axis of the residual matrix: data range, round tick values, and placement in a grid cell."""

    def __init__(self, values, *, trends_x=(), nbins=3, low=None, high=None):
        finite = values[np.isfinite(values)]
        extra = [t for t in trends_x if len(t)]
        if low is None:
            low = min([finite.min(initial=np.inf)] + [t.min() for t in extra])
            high = max([finite.max(initial=-np.inf)] + [t.max() for t in extra])
        if not np.isfinite(low) or not np.isfinite(high):
            low, high = -1.0, 1.0
        if high <= low:
            low, high = low - 1.0, high + 1.0
        self.low, self.high = float(low), float(high)
        inner = (self.high - self.low) * 0.12  # ticks off the panel's edges, clear of the neighbour's labels
        self.ticks = [t for t in MaxNLocator(nbins=nbins).tick_values(self.low, self.high)
                      if self.low + inner <= t <= self.high - inner]

    @classmethod
    def symmetric(cls, values, nbins):
        """Around zero, out to 1.25 times the 99.5th percentile of |value|: a few outliers don't flatten the rest."""
        finite = np.abs(values[np.isfinite(values)])
        reach = float(np.percentile(finite, 99.5)) * 1.25 if finite.size else 1.0
        reach = reach if reach > 0 else 1.0
        return cls(values, nbins=nbins, low=-reach, high=reach)

    def place(self, values, start, end):
        """Values mapped linearly from [low, high] to [start, end]; beyond it they are clipped to the edge."""
        share = (np.clip(values, self.low, self.high) - self.low) / (self.high - self.low)
        return start + share * (end - start)


@styled
def coverage(panels) -> Image:
    """Per input, the calibration rows across the declared box; the part with no data is shaded.

    ``panels``: objects with name, unit, edges, counts, lo, hi and span (the covered part, or None).
    """
    margins = Margins(left=0.7, between_x=0.5, between_y=0.85, top=0.55, bottom=0.85)
    figure, axes = _grid(len(panels), 4, 2.1, 1.3, margins)
    for j, (panel, ax) in enumerate(zip(panels, axes.ravel())):
        lo, hi, span = panel.lo, panel.hi, panel.span
        ax.stairs(panel.counts, panel.edges, fill=True, color=PALETTE["estimator"], alpha=0.85)
        pad = (hi - lo) * 0.02 if hi > lo else 1.0
        ax.set_xlim(lo - pad, hi + pad)
        gaps = [(lo, hi)] if span is None else [(lo, span[0]), (span[1], hi)]
        for a, b in gaps:
            if b > a:
                ax.axvspan(a, b, facecolor=PALETTE["uncovered"], alpha=0.6, hatch="////",
                           edgecolor=PALETTE["limit"], linewidth=0)
        ax.axvline(lo, color=PALETTE["ink"], linewidth=1)
        ax.axvline(hi, color=PALETTE["ink"], linewidth=1)
        ax.locator_params(axis="x", nbins=4)
        ax.set_title(f"{panel.name}: {_covered_text(lo, hi, span)} covered", fontsize=8)
        ax.set_xlabel(f"{panel.name}, {panel.unit}", fontsize=7.5)
        if j % 4 == 0:
            ax.set_ylabel("rows per bin")
    figure.legend(handles=[Patch(color=PALETTE["estimator"], label="calibration rows"),
                           Patch(facecolor=PALETTE["uncovered"], edgecolor=PALETTE["limit"], hatch="////",
                                 label="declared range without data: outputs there are extrapolations")],
                  loc="lower left", ncol=2, fontsize=7.5, bbox_to_anchor=(0.01, 0.0))
    _title(figure, "Coverage: how much of each input's declared range (black lines) the calibration data reach")
    alt = "Coverage of each input's declared range by the calibration data. " + " ".join(
        f"{p.name}: {_covered_text(p.lo, p.hi, p.span)} covered." for p in panels
    )
    return _image(figure, "coverage", alt)


def _covered_text(lo, hi, span) -> str:
    if span is None:
        return "none"
    return "100 %" if hi == lo else f"{(span[1] - span[0]) / (hi - lo) * 100:.1f} %"


@styled
def matrix(values, share, rows, columns, title: str, colour_label: str, salt: str, diverging=False) -> Image:
    """A heat map with each cell's value written in it; ``share`` (same shape, within +-1) sets the colours."""
    n, m = values.shape
    cell_w, cell_h = max(0.62, min(1.0, 9.0 / m)), 0.34
    margins = Margins(left=0.9, right=1.6, top=0.6, bottom=0.85)
    figure, axes = _grid(1, 1, cell_w * m, cell_h * n, margins)
    ax = axes[0, 0]
    ax.grid(False)
    cmap = "RdBu_r" if diverging else _sequential()
    shown = ax.imshow(share, cmap=cmap, vmin=-1 if diverging else 0, vmax=1, aspect="auto")
    for i in range(n):
        for j in range(m):
            ax.text(j, i, f"{values[i, j]:.3g}", ha="center", va="center", fontsize=7,
                    color="white" if abs(share[i, j]) > 0.6 else PALETTE["ink"])
    ax.set_xticks(range(m), columns, rotation=30 if m > 6 else 0, ha="right" if m > 6 else "center")
    ax.set_yticks(range(n), rows)
    ax.set_xlabel("input")
    ax.set_ylabel("output")
    bar = figure.colorbar(shown, ax=ax, fraction=0.35 / (cell_w * m + 0.35), pad=0.02)
    bar.set_label(colour_label, fontsize=7.5)
    _title(figure, title)
    alt = f"{title}. " + " ".join(
        f"{r}: " + ", ".join(f"{c} {values[i, j]:.3g}" for j, c in enumerate(columns)) + "." for i, r in enumerate(rows)
    )
    return _image(figure, salt, alt)


def _sequential():
    from matplotlib.colors import LinearSegmentedColormap

    return LinearSegmentedColormap.from_list("affix", [PALETTE["panel"], PALETTE["coefficients"], PALETTE["estimator"],
                                                       PALETTE["ink"]])


@styled
def headroom(outputs, used_bits, headroom_bits, acc_bits: int) -> Image:
    """Per output, the accumulator bits the worst-case sum needs and the headroom left."""
    margins = Margins(left=0.9, right=0.3, top=0.55, bottom=0.95)
    figure, axes = _grid(1, 1, 6.0, 0.3 * len(outputs) + 0.1, margins)
    ax = axes[0, 0]
    positions = np.arange(len(outputs))[::-1]
    ax.barh(positions, used_bits, color=PALETTE["estimator"], height=0.6, label="bits the worst-case sum needs")
    ax.barh(positions, headroom_bits, left=used_bits, color=PALETTE["headroom"], height=0.6,
            label="headroom: bits left before overflow")
    for y, u, h in zip(positions, used_bits, headroom_bits):
        ax.text(u + h, y, f"{h:.1f} bits left ", ha="right", va="center", fontsize=7.5)
    ax.axvline(acc_bits - 1, color=PALETTE["limit"], linewidth=1.4)
    ax.set_yticks(positions, outputs)
    ax.set_xlim(0, acc_bits)
    ax.set_xlabel(f"bits of the signed {acc_bits}-bit accumulator ({acc_bits - 1} value bits, red line)")
    ax.grid(axis="y", visible=False)
    figure.legend(loc="lower left", ncol=2, fontsize=7.5, bbox_to_anchor=(0.01, 0.0))
    _title(figure, "Accumulator headroom at the worst corner of the input box: a short light bar is little room")
    alt = "Accumulator headroom per output: " + ", ".join(
        f"{name} {h:.1f} bits" for name, h in zip(outputs, headroom_bits)) + f" of a {acc_bits}-bit accumulator."
    return _image(figure, "headroom", alt)


@styled
def fleet(outputs, margins_per_output, passed, units) -> Image:
    """Per output, every unit's margin (a strip over a histogram); failing units in the warning colour."""
    margins = Margins(left=0.7, between_x=0.55, between_y=0.85, top=0.55, bottom=0.55)
    figure, axes = _grid(len(outputs), 3, 2.9, 1.5, margins)
    rng = np.random.default_rng(0)  # the strip's vertical jitter only; fixed so the page is reproducible
    for i, (name, ax) in enumerate(zip(outputs, axes.ravel())):
        values, ok = np.asarray(margins_per_output[i], dtype=float), np.asarray(passed[i], dtype=bool)
        counts, edges = np.histogram(values, bins=max(5, min(30, int(np.sqrt(len(values))) + 1)))
        ax.stairs(counts, edges, fill=True, color=PALETTE["grid"])
        height = rng.uniform(0.1, 0.9, size=len(values)) * max(int(counts.max(initial=1)), 1)
        ax.scatter(values[ok], height[ok], s=9, color=PALETTE["estimator"], label="passed")
        ax.scatter(values[~ok], height[~ok], s=16, color=PALETTE["fail"], marker="x", label="failed")
        ax.axvline(0, color=PALETTE["limit"], linewidth=1.4)
        ax.set_title(f"{name}: {int((~ok).sum())} of {len(values)} failed")
        ax.set_xlabel(f"margin, {units[i]}")
        ax.set_ylabel("units")
    _title(figure, "Fleet: each unit's margin against the budget, per output; left of the red line fails")
    alt = "Per-unit margins per output. " + " ".join(
        f"{name}: {int((~np.asarray(passed[i], dtype=bool)).sum())} of {len(margins_per_output[i])} units failed, "
        f"smallest margin {min(margins_per_output[i]):.3g}." for i, name in enumerate(outputs)
        if len(margins_per_output[i]))
    return _image(figure, "fleet", alt)
