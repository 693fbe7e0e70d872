"""Pictures of persistence diagrams, barcodes and persistence images, as SVG or PNG bytes.

Drawn with matplotlib's object-oriented API (``Figure`` and its own canvas: no pyplot, no
global backend or state), so that drawing is safe in any thread. Import this module only where
pictures are drawn: matplotlib takes about half a second to load.

Conventions:

- ``diagrams`` are lists of ``(dim, pairs)``: ``pairs`` (k, 2) float64 (birth, death), with
  ``np.inf`` for a class that never dies.
- One colour per homology dimension, from the Okabe-Ito colour-blind-safe palette (Okabe and
  Ito 2008), with a legend "H0", "H1", ...
- Classes that never die sit on a dashed line a little above the largest finite value, whose
  tick reads "∞"; the diagonal birth = death is drawn for reference.
- SVG text stays text (``svg.fonttype`` none) and the output is deterministic (no date, fixed
  hash salt): the same arrays give the same bytes. Up to ``MAX_MARKED`` points (or bars) each
  gets its own group, ``id="point-<dim>-<k>"`` (``bar-<dim>-<k>``), ``k`` the row of the pair;
  beyond, one group per dimension (``point-<dim>s``, ``bar-<dim>s``).
- PNG pictures are exactly ``width`` x ``height`` pixels.
"""

import io
import math
from collections.abc import Sequence
from typing import Any

import matplotlib
import numpy as np
from matplotlib.artist import Artist
from matplotlib.colors import to_rgb
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.markers import MarkerStyle
from matplotlib.path import Path
from matplotlib.transforms import Affine2D

from workers.core.errors import ParameterError

__all__ = [
    "COLOURS",
    "MAX_MARKED",
    "MAX_PIXELS",
    "MIN_PIXELS",
    "barcode_plot",
    "diagram_plot",
    "persistence_image_plot",
]

COLOURS = ("#0072B2", "#D55E00", "#009E73", "#CC79A7")
"""H0, H1, H2, H3: Okabe-Ito blue, vermillion, bluish green, reddish purple."""

MAX_MARKED = 20_000
"""Most points (or bars) drawn as one SVG group each; beyond, one group per dimension keeps
the SVG of a huge diagram from growing by a group per point."""

MIN_PIXELS, MAX_PIXELS = 160, 4096
"""Picture sizes drawn (width and height); below 160 px the axis labels leave no room."""

_DPI = 100
_GREY = "#6b7480"
_RC: dict[Any, Any] = {"svg.hashsalt": "lacuna", "svg.fonttype": "none", "font.size": 10.0}

Diagrams = Sequence[tuple[int, np.ndarray]]


def _colour(dim: int) -> str:
    return COLOURS[dim % len(COLOURS)]


def _figure(width: int, height: int, format: str) -> Figure:
    if format not in ("svg", "png"):
        raise ParameterError(f'format must be "svg" or "png", not {format!r}', field="/format")
    for name, size in (("width", width), ("height", height)):
        if not MIN_PIXELS <= size <= MAX_PIXELS:
            raise ParameterError(
                f"{name} must be {MIN_PIXELS} to {MAX_PIXELS} pixels, not {size}", field=f"/{name}"
            )
    return Figure(figsize=(width / _DPI, height / _DPI), dpi=_DPI, layout="constrained")


def _saved(figure: Figure, format: str) -> bytes:
    buffer = io.BytesIO()
    metadata = {"Date": None} if format == "svg" else {"Software": None}
    figure.savefig(buffer, format=format, dpi=_DPI, metadata=metadata)
    return buffer.getvalue()


def _label(units: str | None, value_name: str) -> str:
    return units or value_name


def _pairs(diagrams: Diagrams) -> list[tuple[int, np.ndarray]]:
    return [(dim, np.asarray(pairs, dtype=np.float64).reshape(-1, 2)) for dim, pairs in diagrams]


def _value_range(diagrams: list[tuple[int, np.ndarray]]) -> tuple[float, float]:
    """Smallest and largest finite value (births and deaths), or (0, 1) when there is none."""
    values = np.concatenate([pairs[np.isfinite(pairs)] for _, pairs in diagrams] or [[]])
    if not len(values):
        return 0.0, 1.0
    low, high = float(min(values.min(), 0.0)), float(values.max())
    return (low, high) if high > low else (low, low + 1.0)


def _legend(axes: Any, dims: list[int], marker: str) -> None:
    """One legend entry per dimension, in the marker the picture uses ("o" or a bar "-")."""
    handles = [
        Line2D(
            [],
            [],
            color=_colour(dim),
            marker=marker if marker != "-" else None,
            linestyle="" if marker != "-" else "-",
            linewidth=2,
            label=f"H{dim}",
        )
        for dim in dims
    ]
    if handles:
        # Above the axes, in one row: never over a point or bar.
        axes.legend(
            handles=handles,
            loc="lower center",
            bbox_to_anchor=(0.5, 1.0),
            ncols=len(handles),
            frameon=False,
        )


class _Shapes(Artist):
    """Markers at ``points`` (or horizontal bars between ``points`` and ``ends``) in data
    coordinates, each shape drawn inside an SVG group of its own, ``<prefix>-<id>``, or all
    in one group ``<prefix>s`` when ``one_group``. One artist draws them all: a matplotlib
    artist per shape costs about a millisecond, this a few microseconds."""

    def __init__(
        self,
        points: np.ndarray,
        ids: np.ndarray,
        colour: str,
        prefix: str,
        one_group: bool,
        ends: np.ndarray | None = None,
    ) -> None:
        super().__init__()
        self._points, self._ids, self._ends = points, ids, ends
        self._colour, self._prefix, self._one_group = colour, prefix, one_group
        self.set_zorder(2)

    def draw(self, renderer: Any) -> None:
        if not len(self._points):
            return
        context = renderer.new_gc()
        context.set_foreground(self._colour)
        context.set_clip_rectangle(self.axes.bbox)  # type: ignore[union-attr]
        data = self.axes.transData  # type: ignore[union-attr]
        rgb = to_rgb(self._colour)
        if self._ends is None:
            context.set_linewidth(0.0)
            context.set_alpha(0.85)
            marker = MarkerStyle("o")
            scale = marker.get_transform() + Affine2D().scale(renderer.points_to_pixels(5.0))
            shape = marker.get_path()

            def one(rows: np.ndarray) -> None:
                renderer.draw_markers(context, shape, scale, Path(self._points[rows]), data, rgb)
        else:
            context.set_linewidth(2.0)
            context.set_capstyle("butt")
            ends = self._ends

            def one(rows: np.ndarray) -> None:
                for row in rows:
                    start, (end, _) = self._points[row], ends[row]
                    bar = Path([start, (end, start[1])])
                    renderer.draw_path(context, bar, data)

        if self._one_group:
            renderer.open_group(f"{self._prefix}s", gid=f"{self._prefix}s")
            one(np.arange(len(self._points)))
            renderer.close_group(f"{self._prefix}s")
        else:
            for row, name in enumerate(self._ids.tolist()):
                gid = f"{self._prefix}-{name}"
                renderer.open_group(gid, gid=gid)
                one(np.array([row]))
                renderer.close_group(gid)
        context.restore()


def diagram_plot(
    diagrams: Diagrams,
    *,
    units: str | None = None,
    value_name: str = "value",
    format: str = "svg",
    width: int = 640,
    height: int = 480,
) -> bytes:
    """A persistence diagram: each (birth, death) pair a point, death against birth."""
    figure = _figure(width, height, format)
    found = _pairs(diagrams)
    low, high = _value_range(found)
    span = high - low
    never = high + 0.1 * span  # where classes that never die are drawn
    lower, upper = low - 0.05 * span, never + 0.05 * span
    with matplotlib.rc_context(_RC):
        axes = figure.add_subplot()
        axes.plot([lower, upper], [lower, upper], color=_GREY, linewidth=0.8, zorder=1)
        axes.axhline(never, color=_GREY, linestyle="--", linewidth=0.8, zorder=1)
        one_group = sum(len(pairs) for _, pairs in found) > MAX_MARKED
        for dim, pairs in found:
            deaths = np.where(np.isinf(pairs[:, 1]), never, pairs[:, 1])
            points = np.column_stack([pairs[:, 0], deaths])
            ids = np.arange(len(pairs))
            axes.add_artist(_Shapes(points, ids, _colour(dim), f"point-{dim}", one_group))
        axes.set_xlim(lower, upper)
        axes.set_ylim(lower, upper)
        ticks = [t for t in axes.get_yticks() if lower <= t < never - 0.04 * span]
        axes.set_yticks([*ticks, never], [f"{t:g}" for t in ticks] + ["∞"])
        label = _label(units, value_name)
        axes.set_xlabel(f"birth ({label})")
        axes.set_ylabel(f"death ({label})")
        _legend(axes, [dim for dim, _ in found], "o")
        return _saved(figure, format)


def barcode_plot(
    diagrams: Diagrams,
    *,
    units: str | None = None,
    value_name: str = "value",
    format: str = "svg",
    width: int = 640,
    height: int = 480,
) -> bytes:
    """A barcode: each pair a horizontal bar from birth to death, grouped by dimension (lowest
    at the top), longest first within a dimension; bars of classes that never die run to the
    right edge and end in an arrow."""
    figure = _figure(width, height, format)
    found = _pairs(diagrams)
    low, high = _value_range(found)
    span = high - low
    right = high + 0.1 * span
    with matplotlib.rc_context(_RC):
        axes = figure.add_subplot()
        one_group = sum(len(pairs) for _, pairs in found) > MAX_MARKED
        row = 0
        for dim, pairs in found:
            ends = np.where(np.isinf(pairs[:, 1]), right, pairs[:, 1])
            order = np.lexsort((pairs[:, 0], -(ends - pairs[:, 0])))
            rows = row + np.arange(len(pairs))
            colour = _colour(dim)
            starts = np.column_stack([pairs[order, 0], rows]).astype(np.float64)
            stops = np.column_stack([ends[order], rows]).astype(np.float64)
            axes.add_artist(_Shapes(starts, order, colour, f"bar-{dim}", one_group, stops))
            endless = rows[np.isinf(pairs[order, 1])]
            if len(endless):
                axes.plot(
                    np.full(len(endless), right),
                    endless,
                    marker=">",
                    linestyle="",
                    color=colour,
                    markersize=5,
                )
            row += len(pairs) + 1  # a gap between dimensions
        axes.set_xlim(low - 0.05 * span, right + 0.05 * span)
        axes.set_ylim(max(row - 1, 1) - 0.5, -0.5)  # first bar at the top
        axes.set_yticks([])
        axes.axvline(right, color=_GREY, linestyle="--", linewidth=0.8)
        ticks = [t for t in axes.get_xticks() if low - 0.05 * span <= t < right - 0.04 * span]
        axes.set_xticks([*ticks, right], [f"{t:g}" for t in ticks] + ["∞"])
        axes.set_xlabel(f"{value_name} ({_label(units, value_name)})" if units else value_name)
        _legend(axes, [dim for dim, _ in found], "-")
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
    feature computes it) over its birth and persistence ranges, with a colour bar."""
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
    with matplotlib.rc_context(_RC):
        axes = figure.add_subplot()
        shown = axes.imshow(
            values.T,
            origin="lower",
            extent=(*birth_range, *persistence_range),
            aspect="auto",
            cmap="viridis",
            interpolation="nearest",
        )
        figure.colorbar(shown, ax=axes, label="weight")
        unit = f" ({units})" if units else ""
        axes.set_xlabel(f"birth{unit}")
        axes.set_ylabel(f"persistence{unit}")
        axes.set_title(f"H{dim}", color=_colour(dim))
        return _saved(figure, format)
