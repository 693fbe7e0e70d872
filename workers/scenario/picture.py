"""``python -m workers.scenario.picture --out FILE``: the README's picture, the persistence
diagram (H0, H1) of the demo table ``cells-surrounding-0.csv``, drawn by lacuna's own Rips
engine and drawing module (synthetic data; research use only)."""

import argparse
import csv
import tempfile
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from workers.core.rips import rips_diagrams
from workers.pictures.drawing import diagram_plot
from workers.scenario.writers import write_cells

DEMO_TABLE = "cells-surrounding-0.csv"


def readme_picture() -> bytes:
    """The SVG the README shows; the same bytes on every run."""
    with tempfile.TemporaryDirectory() as folder:
        write_cells(Path(folder), count=3, seed=0)  # the first three tables of `lacuna demo`
        with (Path(folder) / DEMO_TABLE).open(newline="", encoding="utf-8") as table:
            points = np.array([[float(r["x"]), float(r["y"])] for r in csv.DictReader(table)])
    diagrams = rips_diagrams(points, max_dim=1)
    return diagram_plot(list(enumerate(diagrams)), units="um", width=560, height=420)


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        prog="python -m workers.scenario.picture",
        description="Draw the README's persistence diagram of the synthetic demo table "
        f"{DEMO_TABLE} as SVG (the same bytes on every run).",
    )
    parser.add_argument("--out", required=True, type=Path, help="SVG file to write")
    arguments = parser.parse_args(argv)
    arguments.out.parent.mkdir(parents=True, exist_ok=True)
    arguments.out.write_bytes(readme_picture())
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
