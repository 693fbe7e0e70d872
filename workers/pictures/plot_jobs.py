"""Plot jobs: the stored rows or grid drawn by ``workers.pictures.drawing`` (matplotlib,
imported on the first plot, in the compute child only)."""

import base64

import numpy as np

from workers.spec.arrays import diagrams_of_rows
from workers.spec.plots import MEDIA_TYPES, PlotResult, PlotTask

__all__ = ["picture"]


def picture(task: PlotTask, array: np.ndarray) -> PlotResult:
    """Draw ``array``: (k, 3) rows of (dim, birth, death) for diagrams and barcodes, the
    (birth, persistence) grid for a persistence image."""
    from workers.pictures import drawing as plots

    if task.kind == "image":
        if task.birth_range is None or task.persistence_range is None:
            raise ValueError("a persistence image plot needs its birth and persistence ranges")
        drawn = plots.persistence_image_plot(
            array,
            birth_range=task.birth_range,
            persistence_range=task.persistence_range,
            dim=task.dims[0],
            units=task.units,
            format=task.format,
            width=task.width,
            height=task.height,
        )
    else:
        by_dim = diagrams_of_rows(array, task.dims)
        diagrams = [(dim, by_dim[dim]) for dim in task.dims]
        draw = plots.diagram_plot if task.kind == "diagram" else plots.barcode_plot
        drawn = draw(
            diagrams,
            units=task.units,
            value_name=task.value_name,
            format=task.format,
            width=task.width,
            height=task.height,
        )
    return PlotResult(
        media_type=MEDIA_TYPES[task.format], base64=base64.b64encode(drawn).decode("ascii")
    )
