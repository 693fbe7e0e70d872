"""Pictures of diagrams: SVG parsed as XML with one group per point (or bar) of a diagram from
ripser (reference library), PNG decoded by Pillow (reference decoder) at the requested size,
the same bytes for the same input, and pictures of empty diagrams."""

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
    barcode_plot,
    diagram_plot,
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
    assert "H0" in words and "H1" in words and "∞" in words  # legend and the infinite line


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
    assert "birth (um)" in texts(svg) and "persistence (um)" in texts(svg)


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
