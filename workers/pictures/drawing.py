"""Pictures of persistence diagrams, barcodes, persistence images and distance matrices, as
SVG or PNG bytes.

Drawn with matplotlib's object-oriented API (``Figure`` and its own canvas: no pyplot, no
global backend or state), so that drawing is safe in any thread. Import this module only where
pictures are drawn: matplotlib takes about half a second to load.

Conventions:

- ``diagrams`` are lists of ``(dim, pairs)``: ``pairs`` (k, 2) float64 (birth, death), with
  ``np.inf`` for a class that never dies; ``rows``, when given, are the pairs' row numbers in
  the result (a filtered picture keeps the result's numbering), else 0..k-1.
- Each homology dimension has a colour of ``COLOURS`` and a marker shape of ``MARKERS``
  (H0 circle, H1 triangle, H2 square, H3 diamond): dimensions differ by shape as well as by
  colour. The colours stay apart for protanopia, deuteranopia and tritanopia (a test
  simulates each and measures CIEDE2000 differences).
- Classes that never die have no death to plot: they are drawn in a narrow strip of their own,
  labelled "never dies", above the diagram (beside the barcode, on the right).
- The half-plane death < birth, where no pair can lie, is shaded; its edge is the diagonal.
- The legend stands outside the axes, on the right (below them in narrow pictures), one entry
  per dimension with its count of pairs; a caption above the picture says what was left out
  when a filter chose the pairs.
- Every axis and colour bar formats its ticks with one formatter (``TickFormatter``): the
  same number of decimals along an axis, and all ticks of an axis in ``m×10ⁿ`` form once it
  reaches 10⁴ (or stays below 10⁻³), never a mix.
- SVG text stays text (``svg.fonttype`` none) and the output is deterministic (no date, fixed
  hash salt): the same arrays give the same bytes. Up to ``MAX_MARKED`` points (or bars) each
  gets its own group, ``id="point-<dim>-<k>"`` (``bar-<dim>-<k>``), ``k`` the row of the pair;
  beyond, one group per dimension (``point-<dim>s``, and ``point-<dim>s-never`` in the strip;
  ``bar-<dim>s``).
- PNG pictures are exactly ``width`` x ``height`` pixels.
"""

import io
import math
import textwrap
from collections.abc import Sequence
from typing import Any

import matplotlib
import numpy as np
from matplotlib.artist import Artist
from matplotlib.axes import Axes
from matplotlib.axis import Axis
from matplotlib.colors import to_rgb
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.markers import MarkerStyle
from matplotlib.patches import Patch, Polygon, Rectangle
from matplotlib.path import Path
from matplotlib.ticker import Formatter, MaxNLocator
from matplotlib.transforms import Affine2D

from workers.core.errors import ParameterError

__all__ = [
    "COLOURS",
    "MARKERS",
    "MAX_MARKED",
    "MAX_PIXELS",
    "MIN_PIXELS",
    "TickFormatter",
    "barcode_plot",
    "diagram_plot",
    "matrix_plot",
    "persistence_image_plot",
]

COLOURS = ("#4d2886", "#157c66", "#d0a915", "#a596f5")
"""H0, H1, H2, H3: plum, pine, mustard, lavender (lacuna's own; chosen for distinct CIEDE2000
colours under simulated protanopia, deuteranopia and tritanopia)."""

MARKERS = ("o", "^", "s", "D")
"""H0, H1, H2, H3 marker shapes (matplotlib names): circle, triangle, square, diamond."""

MAX_MARKED = 20_000
"""Most points (or bars) drawn as one SVG group each; beyond, one group per dimension keeps
the SVG of a huge diagram from growing by a group per point."""

MIN_PIXELS, MAX_PIXELS = 160, 4096
"""Picture sizes drawn (width and height); below 160 px the axis labels leave no room."""

_DPI = 100
_INK = "#2b2f36"  # text and axes
_MUTED = "#6b7480"  # secondary text: captions, strip labels
_BAND = "#eceef3"  # the half-plane death < birth
_STRIP = "#f5f6f9"  # the strip of classes that never die
_NULL_HATCH = "////"
_HEATMAP = "cividis"  # sequential, designed for colour-vision deficiency
_NARROW = 420  # below this width (px), the legend goes above the axes
_RC: dict[Any, Any] = {
    "svg.hashsalt": "lacuna",
    "svg.fonttype": "none",
    "font.size": 9.0,
    "text.color": _INK,
    "axes.edgecolor": _MUTED,
    "axes.labelcolor": _INK,
    "xtick.color": _MUTED,
    "ytick.color": _MUTED,
    "xtick.labelcolor": _INK,
    "ytick.labelcolor": _INK,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "legend.frameon": False,
    "hatch.color": "#9aa1ab",
    "hatch.linewidth": 0.6,
}

Diagrams = Sequence[tuple[int, np.ndarray]]


def _rc(width: int, height: int) -> dict[Any, Any]:
    """The style, its text a little smaller in small pictures (below 320 px a side)."""
    small = min(width, height) < 320
    return {
        **_RC,
        "font.size": 7.0 if small else 9.0,
        "xtick.labelsize": 6.5 if small else 8.5,
        "ytick.labelsize": 6.5 if small else 8.5,
    }


_SUPERSCRIPTS = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")


class TickFormatter(Formatter):
    """Ticks of one axis in one style: plain decimals, as many places as the ticks need
    (at most 6), or, when the largest tick is at least 10⁴ or below 10⁻³, every tick as
    ``m×10ⁿ`` with the exponent of the largest. Negative numbers take a true minus sign."""

    def __init__(self) -> None:
        self._exponent: int | None = None
        self._places = 0

    def set_locs(self, locs: Any) -> None:
        values = np.asarray(locs, dtype=np.float64)
        values = values[np.isfinite(values)]
        largest = float(np.abs(values).max()) if len(values) else 0.0
        self._exponent = None
        if largest >= 1e4 or 0 < largest < 1e-3:
            self._exponent = math.floor(math.log10(largest))
            values = values / 10.0**self._exponent
        scale = max(float(np.abs(values).max()) if len(values) else 1.0, 1.0)
        self._places = next(
            (
                places
                for places in range(7)
                if np.all(np.abs(np.round(values, places) - values) <= 1e-9 * scale)
            ),
            6,
        )

    def __call__(self, x: float, pos: int | None = None) -> str:
        if self._exponent is None:
            text = f"{x:.{self._places}f}"
        else:
            mantissa = x / 10.0**self._exponent
            text = f"{mantissa:.{self._places}f}"
            if float(text) != 0:
                text += "×10" + str(self._exponent).translate(_SUPERSCRIPTS)
        if float(text.split("×")[0]) == 0:
            return "0"
        return text.replace("-", "−")


def _colour(dim: int) -> str:
    return COLOURS[dim % len(COLOURS)]


def _marker(dim: int) -> str:
    return MARKERS[dim % len(MARKERS)]


def _count(count: int, noun: str) -> str:
    return f"{count:,} {noun}{'' if count == 1 else 's'}"


def _figure(width: int, height: int, format: str) -> Figure:
    if format not in ("svg", "png"):
        raise ParameterError(f'format must be "svg" or "png", not {format!r}', field="/format")
    for name, size in (("width", width), ("height", height)):
        if not MIN_PIXELS <= size <= MAX_PIXELS:
            raise ParameterError(
                f"{name} must be {MIN_PIXELS} to {MAX_PIXELS} pixels, not {size}", field=f"/{name}"
            )
    figure = Figure(figsize=(width / _DPI, height / _DPI), dpi=_DPI, layout="constrained")
    figure.get_layout_engine().set(w_pad=0.06, h_pad=0.06)  # type: ignore[union-attr, call-arg]
    return figure


def _saved(figure: Figure, format: str) -> bytes:
    buffer = io.BytesIO()
    metadata = {"Date": None} if format == "svg" else {"Software": None}
    figure.savefig(buffer, format=format, dpi=_DPI, metadata=metadata)
    return buffer.getvalue()


def _ticks(*axes: Axis) -> None:
    """The one tick style on each of ``axes``."""
    for axis in axes:
        axis.set_major_formatter(TickFormatter())
        axis.set_major_locator(MaxNLocator(nbins=6, steps=[1, 2, 2.5, 5, 10]))


def _caption(figure: Figure, caption: str | None) -> None:
    if caption:
        figure.suptitle(caption, x=0.01, ha="left", fontsize="small", color=_MUTED)


def _colour_bar(figure: Figure, shown: Any, axes: Axes, label: str, height: int) -> None:
    """A colour bar beside ``axes``, its label wrapped to the picture's height."""
    bar = figure.colorbar(shown, ax=axes, label=textwrap.fill(label, max(height // 7, 12)))
    bar.outline.set_visible(False)
    _ticks(bar.ax.yaxis)


def _value_label(name: str, units: str | None) -> str:
    return f"{name} ({units})" if units else name


def _pairs(diagrams: Diagrams) -> list[tuple[int, np.ndarray]]:
    return [(dim, np.asarray(pairs, dtype=np.float64).reshape(-1, 2)) for dim, pairs in diagrams]


def _rows(found: list[tuple[int, np.ndarray]], rows: Sequence[np.ndarray] | None) -> list[Any]:
    if rows is None:
        return [np.arange(len(pairs)) for _, pairs in found]
    if len(rows) != len(found) or any(
        len(r) != len(p) for r, (_, p) in zip(rows, found, strict=True)
    ):
        raise ParameterError("rows must number the pairs of each diagram", field="/rows")
    return [np.asarray(r, dtype=np.int64) for r in rows]


def _value_range(diagrams: list[tuple[int, np.ndarray]]) -> tuple[float, float]:
    """Smallest and largest finite value (births and deaths), or (0, 1) when there is none."""
    values = np.concatenate([pairs[np.isfinite(pairs)] for _, pairs in diagrams] or [[]])
    if not len(values):
        return 0.0, 1.0
    low, high = float(min(values.min(), 0.0)), float(values.max())
    return (low, high) if high > low else (low, low + 1.0)


def _legend(figure: Figure, width: int, found: list[tuple[int, np.ndarray]], bars: bool) -> None:
    """One entry per dimension with its count of pairs, outside the axes: on the right, or
    below them in a narrow picture."""
    handles = [
        Line2D(
            [],
            [],
            color=_colour(dim),
            marker=None if bars else _marker(dim),
            markeredgecolor="white",
            markeredgewidth=0.5,
            markersize=7,
            linestyle="-" if bars else "",
            linewidth=3,
            label=f"H{dim} · {_count(len(pairs), 'pair')}",
        )
        for dim, pairs in found
    ]
    if not handles:
        return
    if width < _NARROW:
        figure.legend(
            handles=handles, loc="outside lower center", ncols=len(handles), fontsize="small"
        )
    else:
        figure.legend(handles=handles, loc="outside right upper", handletextpad=0.4)


class _Shapes(Artist):
    """Markers at ``points`` (or horizontal bars between ``points`` and ``ends``) in data
    coordinates, each shape drawn inside an SVG group of its own, ``<prefix>-<id>``, or all
    in one group ``<prefix>s<suffix>`` when ``one_group``. One artist draws them all: a
    matplotlib artist per shape costs about a millisecond, this a few microseconds."""

    def __init__(
        self,
        points: np.ndarray,
        ids: np.ndarray,
        dim: int,
        prefix: str,
        one_group: bool,
        *,
        ends: np.ndarray | None = None,
        linewidth: float = 2.0,
        suffix: str = "",
    ) -> None:
        super().__init__()
        self._points, self._ids, self._ends = points, ids, ends
        self._dim, self._prefix, self._one_group = dim, prefix, one_group
        self._linewidth, self._suffix = linewidth, suffix
        self.set_zorder(2)

    def draw(self, renderer: Any) -> None:
        if not len(self._points):
            return
        colour = _colour(self._dim)
        context = renderer.new_gc()
        context.set_clip_rectangle(self.axes.bbox)  # type: ignore[union-attr]
        data = self.axes.transData  # type: ignore[union-attr]
        if self._ends is None:
            # White edges keep overlapping markers apart.
            context.set_foreground("white")
            context.set_linewidth(0.5)
            context.set_alpha(0.9)
            marker = MarkerStyle(_marker(self._dim))
            scale = marker.get_transform() + Affine2D().scale(renderer.points_to_pixels(6.0))
            shape, rgb = marker.get_path(), to_rgb(colour)

            def one(rows: np.ndarray) -> None:
                renderer.draw_markers(context, shape, scale, Path(self._points[rows]), data, rgb)
        else:
            context.set_foreground(colour)
            context.set_linewidth(self._linewidth)
            context.set_capstyle("butt")
            ends = self._ends

            def one(rows: np.ndarray) -> None:
                for row in rows:
                    start, (end, _) = self._points[row], ends[row]
                    renderer.draw_path(context, Path([start, (end, start[1])]), data)

        if self._one_group:
            name = f"{self._prefix}s{self._suffix}"
            renderer.open_group(name, gid=name)
            one(np.arange(len(self._points)))
            renderer.close_group(name)
        else:
            for row, number in enumerate(self._ids.tolist()):
                gid = f"{self._prefix}-{number}"
                renderer.open_group(gid, gid=gid)
                one(np.array([row]))
                renderer.close_group(gid)
        context.restore()


def _axes(figure: Figure, endless: bool, *, above: bool) -> tuple[Axes, Axes | None]:
    """The plot's axes, and when some class never dies (``endless``) the strip for those:
    above the axes, sharing the birth axis, or beside them on the right, sharing the rows."""
    if not endless:
        return figure.add_subplot(), None
    if above:
        strip, axes = figure.subplots(
            2, 1, sharex=True, height_ratios=[1, 9], gridspec_kw={"hspace": 0.0}
        )
    else:
        axes, strip = figure.subplots(
            1, 2, sharey=True, width_ratios=[12, 1], gridspec_kw={"wspace": 0.0}
        )
    _strip(strip, "never\ndies", horizontal=above)
    return axes, strip


def _strip(axes: Axes, label: str, *, horizontal: bool) -> None:
    """Style ``axes`` as the strip of classes that never die, labelled ``label``."""
    axes.set_facecolor(_STRIP)
    for side in ("top", "right", "left", "bottom"):
        axes.spines[side].set_visible(False)
    if horizontal:  # above a diagram: shares its birth axis
        axes.set_ylim(0.0, 1.0)
        axes.set_yticks([])
        axes.tick_params(axis="x", length=0, labelbottom=False)
        axes.set_ylabel(label, rotation=0, ha="right", va="center", fontsize="small", color=_MUTED)
    else:  # beside a barcode: shares its rows
        axes.set_xlim(0.0, 1.0)
        axes.set_xticks([])
        axes.tick_params(axis="y", length=0, labelleft=False)
        axes.set_xlabel(label, fontsize="small", color=_MUTED)


def diagram_plot(
    diagrams: Diagrams,
    *,
    rows: Sequence[np.ndarray] | None = None,
    units: str | None = None,
    value_name: str = "value",
    caption: str | None = None,
    format: str = "svg",
    width: int = 640,
    height: int = 480,
) -> bytes:
    """A persistence diagram: each (birth, death) pair a point, death against birth; classes
    that never die in the strip above, at their birth."""
    figure = _figure(width, height, format)
    found = _pairs(diagrams)
    numbers = _rows(found, rows)
    low, high = _value_range(found)
    span = high - low
    lower, upper = low - 0.05 * span, high + 0.05 * span
    endless = any(np.isinf(pairs[:, 1]).any() for _, pairs in found)
    with matplotlib.rc_context(_rc(width, height)):
        axes, strip = _axes(figure, endless, above=True)
        axes.add_patch(
            Polygon(
                [(lower, lower), (upper, upper), (upper, lower)],
                closed=True,
                facecolor=_BAND,
                edgecolor="none",
                zorder=0,
            )
        )
        one_group = sum(len(pairs) for _, pairs in found) > MAX_MARKED
        for (dim, pairs), number in zip(found, numbers, strict=True):
            never = np.isinf(pairs[:, 1])
            axes.add_artist(_Shapes(pairs[~never], number[~never], dim, f"point-{dim}", one_group))
            if never.any() and strip is not None:
                # Spread the dimensions over the strip's height, so that H0 and H1 classes
                # born at one value do not hide one another.
                height_in_strip = 0.5 + 0.22 * ((dim % 3) - 1)
                at = np.column_stack([pairs[never, 0], np.full(never.sum(), height_in_strip)])
                strip.add_artist(
                    _Shapes(at, number[never], dim, f"point-{dim}", one_group, suffix="-never")
                )
        axes.set_xlim(lower, upper)
        axes.set_ylim(lower, upper)
        axes.set_xlabel(_value_label("birth", units))
        axes.set_ylabel(_value_label("death", units))
        _ticks(axes.xaxis, axes.yaxis)
        if strip is not None:
            figure.align_ylabels([strip, axes])
        _legend(figure, width, found, bars=False)
        _caption(figure, caption)
        return _saved(figure, format)


def barcode_plot(
    diagrams: Diagrams,
    *,
    rows: Sequence[np.ndarray] | None = None,
    units: str | None = None,
    value_name: str = "value",
    caption: str | None = None,
    format: str = "svg",
    width: int = 640,
    height: int = 480,
) -> bytes:
    """A barcode: each pair a horizontal bar from birth to death, grouped by dimension (lowest
    at the top, its name and count of bars at the side), longest first within a dimension;
    bars of classes that never die run on into the strip at the right."""
    figure = _figure(width, height, format)
    found = _pairs(diagrams)
    numbers = _rows(found, rows)
    low, high = _value_range(found)
    span = high - low
    left, right = low - 0.03 * span, high + 0.03 * span
    endless = any(np.isinf(pairs[:, 1]).any() for _, pairs in found)
    total_rows = max(sum(len(pairs) + 1 for _, pairs in found) - 1, 1)
    # A bar about two thirds of its row's height, between a hairline and 4 pt.
    row_points = 0.75 * height / total_rows * 72 / _DPI
    linewidth = min(max(0.66 * row_points, 0.3), 4.0)
    with matplotlib.rc_context(_rc(width, height)):
        axes, strip = _axes(figure, endless, above=False)
        one_group = sum(len(pairs) for _, pairs in found) > MAX_MARKED
        row, centres, names = 0, [], []
        for (dim, pairs), number in zip(found, numbers, strict=True):
            never = np.isinf(pairs[:, 1])
            ends = np.where(never, right + span, pairs[:, 1])  # past the edge: clipped there
            order = np.lexsort((pairs[:, 0], -(ends - pairs[:, 0])))
            placed = row + np.arange(len(pairs), dtype=np.float64)
            starts = np.column_stack([pairs[order, 0], placed])
            stops = np.column_stack([ends[order], placed])
            axes.add_artist(
                _Shapes(
                    starts,
                    number[order],
                    dim,
                    f"bar-{dim}",
                    one_group,
                    ends=stops,
                    linewidth=linewidth,
                )
            )
            if never.any() and strip is not None:
                ongoing = placed[never[order]]
                strip.hlines(ongoing, 0.0, 0.72, colors=_colour(dim), linewidth=linewidth)
                strip.plot(
                    np.full(len(ongoing), 0.72),
                    ongoing,
                    marker=">",
                    markersize=min(max(1.6 * linewidth, 2.5), 6.0),
                    linestyle="",
                    color=_colour(dim),
                )
            if len(pairs):
                centres.append(row + (len(pairs) - 1) / 2)
                names.append(f"H{dim}\n{_count(len(pairs), 'bar')}")
            row += len(pairs) + 1  # a gap between dimensions
        axes.set_xlim(left, right)
        axes.set_ylim(total_rows - 0.5, -0.5)  # first bar at the top
        axes.set_yticks(centres, names, fontsize="small")
        for label, (dim, _) in zip(
            axes.get_yticklabels(), [item for item in found if len(item[1])], strict=True
        ):
            label.set_color(_colour(dim))
        axes.tick_params(axis="y", length=0)
        axes.spines["left"].set_visible(False)
        axes.set_xlabel(_value_label(value_name, units))
        axes.set_ylabel("bars, by dimension")
        _ticks(axes.xaxis)
        _caption(figure, caption)
        return _saved(figure, format)


def persistence_image_plot(
    image: np.ndarray,
    *,
    birth_range: tuple[float, float],
    persistence_range: tuple[float, float],
    dim: int,
    units: str | None = None,
    format: str = "svg",
    width: int = 480,
    height: int = 480,
) -> bytes:
    """A persistence image (rows: birth intervals, columns: persistence intervals, as the
    feature computes it) over its birth and persistence ranges, with a colour bar of its
    intensity: the weighted Gaussian mass of the pairs that falls in each pixel."""
    figure = _figure(width, height, format)
    values = np.asarray(image, dtype=np.float64)
    if values.ndim != 2 or not values.size:
        raise ParameterError("a persistence image is a non-empty 2D array", field="/image")
    if not (
        math.isfinite(birth_range[1] - birth_range[0])
        and birth_range[1] > birth_range[0]
        and persistence_range[1] > persistence_range[0]
    ):
        raise ParameterError("the ranges must be increasing", field="/birth_range")
    with matplotlib.rc_context(_rc(width, height)):
        axes = figure.add_subplot()
        shown = axes.imshow(
            values.T,
            origin="lower",
            extent=(*birth_range, *persistence_range),
            aspect="auto",
            cmap=_HEATMAP,
            interpolation="nearest",
        )
        _colour_bar(figure, shown, axes, "intensity (weighted pairs per pixel)", height)
        _ticks(axes.xaxis, axes.yaxis)
        axes.set_xlabel(_value_label("birth", units))
        axes.set_ylabel(_value_label("persistence", units))
        axes.set_title(f"H{dim} persistence image", loc="left", color=_colour(dim))
        return _saved(figure, format)


def _thinned(count: int, room_px: float) -> np.ndarray:
    """Which of ``count`` rows get a label: every one while they are 14 px apart or more,
    else every k-th, k a 1-2-5 step."""
    most = max(int(room_px / 14), 2)
    step = next(
        s * 10**e for e in range(8) for s in (1, 2, 5) if math.ceil(count / (s * 10**e)) <= most
    )
    return np.arange(0, count, step)


def matrix_plot(
    matrix: np.ndarray,
    *,
    value_name: str,
    units: str | None = None,
    labels: Sequence[str] | None = None,
    null_meaning: str | None = None,
    caption: str | None = None,
    format: str = "svg",
    width: int = 560,
    height: int = 480,
) -> bytes:
    """A distance matrix as a heatmap, rows and columns in the order of the request,
    labelled by ``labels`` (or their index), thinned when there are many; the colour bar is
    labelled ``value_name`` with its ``units``. Entries that are inf or NaN (null in the
    result) are hatched and explained by ``null_meaning`` in a legend below."""
    figure = _figure(width, height, format)
    values = np.asarray(matrix, dtype=np.float64)
    if values.ndim != 2 or values.shape[0] != values.shape[1] or not values.size:
        raise ParameterError("a distance matrix is a non-empty square array", field="/matrix")
    count = values.shape[0]
    names = list(labels) if labels is not None else [str(i) for i in range(count)]
    if len(names) != count:
        raise ParameterError("one label per row of the matrix", field="/labels")
    if min(width, height) < 320:  # no room for job ids: the index alone
        names = [str(i) for i in range(count)]
    missing = ~np.isfinite(values)
    with matplotlib.rc_context(_rc(width, height)):
        axes = figure.add_subplot()
        for side in ("top", "right", "left", "bottom"):
            axes.spines[side].set_visible(False)
        # Null entries let through the hatched rectangle behind the image.
        axes.add_patch(
            Rectangle(
                (-0.5, -0.5),
                count,
                count,
                facecolor="white",
                edgecolor="#9aa1ab",
                hatch=_NULL_HATCH,
                linewidth=0,
                zorder=0,
            )
        )
        colours = matplotlib.colormaps[_HEATMAP].with_extremes(bad=(0.0, 0.0, 0.0, 0.0))
        finite = values[~missing]
        shown = axes.imshow(
            np.ma.masked_array(values, mask=missing),
            cmap=colours,
            vmin=0.0,
            vmax=float(finite.max()) if len(finite) and finite.max() > 0 else 1.0,
            interpolation="nearest",
            zorder=1,
        )
        _colour_bar(figure, shown, axes, _value_label(value_name, units), height)
        room = min(width, height) * 0.7
        chosen = _thinned(count, room)
        long_names = max(len(name) for name in names) > 3
        axes.set_xticks(chosen, [names[i] for i in chosen], rotation=90 if long_names else 0)
        axes.set_yticks(chosen, [names[i] for i in chosen])
        axes.tick_params(labelsize="x-small" if long_names else "small", length=2)
        item = "item · job" if long_names else "item"
        axes.set_xlabel(item)
        axes.set_ylabel(item)
        if missing.any():
            figure.legend(
                handles=[
                    Patch(
                        facecolor="white",
                        edgecolor="#9aa1ab",
                        hatch=_NULL_HATCH,
                        label=textwrap.fill(
                            f"null: {null_meaning or 'no finite value'}", max(width // 7, 20)
                        ),
                    )
                ],
                loc="outside lower left",
                fontsize="small",
            )
        _caption(figure, caption)
        return _saved(figure, format)
