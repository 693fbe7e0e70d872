"""Pictures of diagrams: SVG parsed as XML with one group per point (or bar) of a diagram from
ripser (reference library), PNG decoded by Pillow (reference decoder) at the requested size,
the same bytes for the same input, pictures of empty diagrams, and the look: a marker shape
per dimension, the strip of classes that never die, the shaded half-plane, the legend with
counts, one tick format, labelled colour bars and the distance matrix."""

import io
import xml.etree.ElementTree as ElementTree

import numpy as np
import pytest
import ripser
from PIL import Image

from tests.support.synthetic import noisy_circle
from workers.core.errors import ParameterError
from workers.pictures.drawing import (
    COLOURS,
    MAX_MARKED,
    TickFormatter,
    barcode_plot,
    diagram_plot,
    matrix_plot,
    persistence_image_plot,
)

SVG = "{http://www.w3.org/2000/svg}"


@pytest.fixture(scope="module")
def circle() -> list[tuple[int, np.ndarray]]:
    """ripser's H0 and H1 of a noisy circle (the last H0 class never dies: inf)."""
    diagrams = ripser.ripser(noisy_circle(60, seed=4), maxdim=1)["dgms"]
    return [(dim, np.asarray(pairs)) for dim, pairs in enumerate(diagrams)]


def ids(svg: bytes, prefix: str) -> list[str]:
    root = ElementTree.fromstring(svg)
    return [e.get("id", "") for e in root.iter() if e.get("id", "").startswith(prefix)]


def texts(svg: bytes) -> list[str]:
    root = ElementTree.fromstring(svg)
    return ["".join(e.itertext()) for e in root.iter(f"{SVG}text")]


def test_one_marker_group_per_point(circle: list[tuple[int, np.ndarray]]) -> None:
    svg = diagram_plot(circle, units="um")
    for dim, pairs in circle:
        assert len(ids(svg, f"point-{dim}-")) == len(pairs) > 0
    words = texts(svg)
    assert "birth (um)" in words and "death (um)" in words
    # The legend counts each dimension's pairs; classes that never die have their own strip.
    assert f"H0 · {len(circle[0][1])} pairs" in words and "H1 · 1 pair" in words
    assert "never" in words and "dies" in words and "∞" not in words


def uses(svg: bytes, gid: str) -> list[ElementTree.Element]:
    """The marker placements (<use>) inside the group ``gid``."""
    group = next(e for e in ElementTree.fromstring(svg).iter() if e.get("id") == gid)
    return list(group.iter(f"{SVG}use"))


def test_each_dimension_has_its_own_marker_shape(circle: list[tuple[int, np.ndarray]]) -> None:
    svg = diagram_plot(circle)
    link = "{http://www.w3.org/1999/xlink}href"
    shape = {dim: {u.get(link) for u in uses(svg, f"point-{dim}-0")} for dim in (0, 1)}
    assert len(shape[0]) == len(shape[1]) == 1 and shape[0] != shape[1]


def test_classes_that_never_die_sit_in_the_strip_above(
    circle: list[tuple[int, np.ndarray]],
) -> None:
    svg = diagram_plot(circle)
    h0 = circle[0][1]
    endless = int(np.flatnonzero(np.isinf(h0[:, 1]))[0])
    finite = [k for k in range(len(h0)) if k != endless]
    # SVG y grows downwards: the strip's point lies above every point of the plot area.
    strip_y = float(uses(svg, f"point-0-{endless}")[0].get("y", "nan"))
    plotted_y = [float(uses(svg, f"point-0-{k}")[0].get("y", "nan")) for k in finite]
    top_of_h1 = float(uses(svg, "point-1-0")[0].get("y", "nan"))
    assert strip_y < min([*plotted_y, top_of_h1])


def test_the_half_plane_below_the_diagonal_is_shaded(
    circle: list[tuple[int, np.ndarray]],
) -> None:
    svg = diagram_plot(circle).decode()
    assert "fill: #eceef3" in svg  # the band, filled; no dashed reference lines
    assert "stroke-dasharray" not in svg


def test_a_caption_says_what_a_filter_left_out(circle: list[tuple[int, np.ndarray]]) -> None:
    caption = "showing 3 of 61 pairs (top 3 per dimension)"
    for draw in (diagram_plot, barcode_plot):
        assert caption in texts(draw(circle, caption=caption))


def test_given_rows_number_the_groups() -> None:
    pairs = np.array([[0.0, 1.0], [0.2, 0.5]])
    svg = diagram_plot([(1, pairs)], rows=[np.array([7, 40])])
    assert ids(svg, "point-1-") == ["point-1-7", "point-1-40"]
    with pytest.raises(ParameterError):
        diagram_plot([(1, pairs)], rows=[np.array([7])])


def test_barcode_labels_its_axes_and_groups(circle: list[tuple[int, np.ndarray]]) -> None:
    words = texts(barcode_plot(circle, units="um", value_name="edge length"))
    assert "edge length (um)" in words and "bars, by dimension" in words
    assert f"{len(circle[0][1])} bars" in words and "1 bar" in words  # beside each group
    assert "H0" in words and "H1" in words and "never" in words


@pytest.mark.parametrize(
    ("ticks", "expected"),
    [
        ([0.0, 0.5, 1.0, 1.5], ["0", "0.5", "1.0", "1.5"]),
        ([0.0, 0.25, 0.5], ["0", "0.25", "0.50"]),
        ([0.0, 500.0, 1000.0], ["0", "500", "1000"]),
        # From 10^4 on every tick of the axis takes the one exponent: never "1e+04" beside "5000".
        ([0.0, 5000.0, 10000.0, 15000.0], ["0", "0.5×10⁴", "1.0×10⁴", "1.5×10⁴"]),
        ([0.0, 0.0002, 0.0004], ["0", "2×10⁻⁴", "4×10⁻⁴"]),
        ([-1.0, 0.0, 1.0], ["−1", "0", "1"]),
    ],
)
def test_one_tick_format(ticks: list[float], expected: list[str]) -> None:
    assert TickFormatter().format_ticks(ticks) == expected  # worked by hand


def test_large_values_never_mix_tick_styles() -> None:
    pairs = np.array([[0.0, 25_000.0], [100.0, 400.0]])
    for svg in (diagram_plot([(0, pairs)]), barcode_plot([(0, pairs)])):
        numbers = [w for w in texts(svg) if w[:1].isdigit() and w != "0" and " " not in w]
        assert numbers and all("×10⁴" in w for w in numbers), numbers
        assert not any("e+" in w for w in texts(svg))


def test_points_carry_their_dimensions_colour(circle: list[tuple[int, np.ndarray]]) -> None:
    svg = diagram_plot(circle).decode()
    root = ElementTree.fromstring(svg)
    for dim in (0, 1):
        group = next(e for e in root.iter() if e.get("id") == f"point-{dim}-0")
        assert COLOURS[dim].lower() in ElementTree.tostring(group, encoding="unicode").lower()


def test_one_bar_group_per_pair(circle: list[tuple[int, np.ndarray]]) -> None:
    svg = barcode_plot(circle, value_name="edge length")
    for dim, pairs in circle:
        assert len(ids(svg, f"bar-{dim}-")) == len(pairs)


def test_large_diagrams_draw_one_group_per_dimension() -> None:
    rng = np.random.default_rng(0)
    births = rng.uniform(size=MAX_MARKED + 1)
    pairs = np.column_stack([births, births + rng.uniform(size=len(births))])
    svg = diagram_plot([(1, pairs)])
    assert ids(svg, "point-") == ["point-1s"]
    assert ids(barcode_plot([(1, pairs)]), "bar-") == ["bar-1s"]


@pytest.mark.parametrize("draw", [diagram_plot, barcode_plot])
@pytest.mark.parametrize("size", [(160, 160), (300, 200), (1001, 333)])
def test_png_has_exactly_the_requested_size(
    circle: list[tuple[int, np.ndarray]], draw: object, size: tuple[int, int]
) -> None:
    png = draw(circle, format="png", width=size[0], height=size[1])  # type: ignore[operator]
    picture = Image.open(io.BytesIO(png))
    picture.load()
    assert picture.format == "PNG" and picture.size == size


def test_persistence_image_png_and_svg() -> None:
    image = np.random.default_rng(1).uniform(size=(6, 4))
    png = persistence_image_plot(
        image,
        birth_range=(0.0, 1.0),
        persistence_range=(0.0, 2.0),
        dim=1,
        format="png",
        width=256,
        height=200,
    )
    assert Image.open(io.BytesIO(png)).size == (256, 200)
    svg = persistence_image_plot(
        image, birth_range=(0.0, 1.0), persistence_range=(0.0, 2.0), dim=1, units="um"
    )
    words = texts(svg)
    assert "birth (um)" in words and "persistence (um)" in words
    assert "intensity (weighted pairs per pixel)" in words  # the colour bar says what it shows


def test_matrix_labels_thinned_and_nulls_explained() -> None:
    rng = np.random.default_rng(5)
    points = rng.uniform(size=(150, 2))
    matrix = np.sqrt(((points[:, None] - points[None]) ** 2).sum(-1))
    matrix[3, 9] = matrix[9, 3] = np.inf
    svg = matrix_plot(
        matrix,
        value_name="bottleneck distance, H1",
        units="um",
        null_meaning="infinite: unequal numbers",
        width=480,
        height=480,
    )
    words = texts(svg)
    assert "bottleneck distance, H1 (um)" in words and "null: infinite: unequal numbers" in words
    labels = sorted({int(w) for w in words if w.isdigit()} & set(range(150)) - {0})
    step = labels[0]
    assert 1 < step and all(label % step == 0 for label in labels)  # every step-th item
    png = matrix_plot(matrix, value_name="x", format="png", width=300, height=260)
    assert Image.open(io.BytesIO(png)).size == (300, 260)


def test_matrix_rows_carry_their_job_ids() -> None:
    labels = ["0 · 3f2a1b9c", "1 · 77aa0e12"]
    words = texts(matrix_plot(np.array([[0.0, 1.0], [1.0, 0.0]]), value_name="d", labels=labels))
    assert words.count("0 · 3f2a1b9c") == 2 and "item · job" in words  # rows and columns
    assert not any(w.startswith("null") for w in words)  # no null, no null legend


def test_same_input_same_bytes(circle: list[tuple[int, np.ndarray]]) -> None:
    assert diagram_plot(circle) == diagram_plot(circle)
    assert barcode_plot(circle, format="png") == barcode_plot(circle, format="png")


@pytest.mark.parametrize(
    "diagrams",
    [[], [(0, np.empty((0, 2)))], [(0, np.array([[0.0, np.inf]])), (1, np.empty((0, 2)))]],
    ids=["none", "empty", "only-infinite"],
)
def test_empty_and_infinite_only_diagrams_draw(diagrams: list[tuple[int, np.ndarray]]) -> None:
    for draw in (diagram_plot, barcode_plot):
        svg = draw(diagrams)
        assert ElementTree.fromstring(svg).tag == f"{SVG}svg"
        assert len(ids(svg, "point-") + ids(svg, "bar-")) == sum(len(p) for _, p in diagrams)


@pytest.mark.parametrize(
    ("options", "field"),
    [({"format": "gif"}, "format"), ({"width": 159}, "width"), ({"height": 4097}, "height")],
)
def test_invalid_picture_options_raise(options: dict[str, object], field: str) -> None:
    with pytest.raises(ParameterError) as raised:
        diagram_plot([], **options)  # type: ignore[arg-type]
    assert raised.value.field == f"/{field}"  # a pointer into its own arguments
