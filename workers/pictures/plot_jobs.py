"""Plot jobs: the stored rows or grid drawn by ``workers.pictures.drawing`` (matplotlib,
imported on the first plot, in the compute child only)."""

import base64
from typing import Any

import numpy as np

from workers.spec.plots import MEDIA_TYPES, PlotResult, PlotTask

__all__ = ["picture"]


def picture(task: PlotTask, array: np.ndarray) -> PlotResult:
    """Draw ``array``: (k, 4) rows of (dim, birth, death, row) for diagrams and barcodes, the
    (birth, persistence) grid for a persistence image, the N x N matrix for a matrix."""
    from workers.pictures import drawing as plots

    size: dict[str, Any] = {"format": task.format, "width": task.width, "height": task.height}
    if task.kind == "image":
        if task.birth_range is None or task.persistence_range is None:
            raise ValueError("a persistence image plot needs its birth and persistence ranges")
        drawn = plots.persistence_image_plot(
            array,
            birth_range=task.birth_range,
            persistence_range=task.persistence_range,
            dim=task.dims[0],
            units=task.units,
            **size,
        )
    elif task.kind == "matrix":
        drawn = plots.matrix_plot(
            array,
            value_name=task.value_name,
            units=task.units,
            labels=task.labels,
            null_meaning=task.null_meaning,
            caption=task.caption,
            **size,
        )
    else:
        rows = np.asarray(array, dtype=np.float64).reshape(-1, 4)
        chosen = [rows[rows[:, 0] == dim] for dim in task.dims]
        draw = plots.diagram_plot if task.kind == "diagram" else plots.barcode_plot
        drawn = draw(
            [(dim, found[:, 1:3]) for dim, found in zip(task.dims, chosen, strict=True)],
            rows=[found[:, 3].astype(np.int64) for found in chosen],
            units=task.units,
            value_name=task.value_name,
            caption=task.caption,
            **size,
        )
    return PlotResult(
        media_type=MEDIA_TYPES[task.format], base64=base64.b64encode(drawn).decode("ascii")
    )
