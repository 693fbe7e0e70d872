"""Image and mask arrays: built from nested lists, and checked against the request and limits.

The same checks run whether the array came as JSON ``values`` or as an uploaded file, so a
client gets the same answer for the same pixels either way; only the pointer differs
(``/input/values/...`` for JSON, ``/data`` for the uploaded part).
"""

import math
from typing import Any

import numpy as np
from pydantic import BaseModel

from workers.spec.capabilities import Limits
from workers.spec.filtrations import (
    MASK_FILTRATIONS,
    CubicalFiltration,
    Filtration,
    HeightFiltration,
    RadialFiltration,
    direction_errors,
)
from workers.spec.inputs import MAX_PIXEL_MAGNITUDE, ArrayInput, ImageInput, MaskInput
from workers.spec.jobs import PersistenceTask
from workers.spec.kinds.base import Checked, InputData, InputKind, Stored
from workers.spec.kinds.graphs import graph_filtration_errors, graph_max_dim
from workers.spec.problems import FieldError
from workers.spec.requests import JobRequest

__all__ = [
    "ImageKind",
    "MaskKind",
    "UPLOAD_POINTER",
    "array_of_values",
    "max_dim_of",
    "pixel_errors",
    "shape_error",
]

UPLOAD_POINTER = "/data"
"""Pointer naming the uploaded file part of a multipart request."""


def array_of_values(values: list[Any]) -> np.ndarray | FieldError:
    """The nested lists of ``values`` as a float64 array, or a FieldError at the first row whose
    length differs from the first row's (pydantic has checked depth and numbers)."""
    if isinstance(values[0][0], list):  # planes of rows
        rows = len(values[0])
        width = len(values[0][0])
        for plane, plane_rows in enumerate(values):
            if len(plane_rows) != rows:
                return FieldError(
                    pointer=f"/input/values/{plane}",
                    message=f"plane {plane} has {len(plane_rows)} rows, plane 0 has {rows}; "
                    "every plane needs the same number",
                )
            for row, pixels in enumerate(plane_rows):
                if len(pixels) != width:
                    return _ragged(f"/input/values/{plane}/{row}", len(pixels), width)
    else:
        width = len(values[0])
        for row, pixels in enumerate(values):
            if len(pixels) != width:
                return _ragged(f"/input/values/{row}", len(pixels), width)
    return np.asarray(values, dtype=np.float64)


def _ragged(pointer: str, length: int, width: int) -> FieldError:
    return FieldError(
        pointer=pointer,
        message=f"this row has {length} pixels, the first row has {width}; every row needs "
        "the same number",
    )


def max_dim_of(filtration: Filtration, ndim: int) -> int:
    """The highest homology dimension a filtration on a ``ndim``-dimensional array computes."""
    max_dim = filtration.max_dim
    return ndim - 1 if max_dim is None else max_dim


def pixel_errors(
    array: np.ndarray,
    array_input: ArrayInput,
    filtration: Filtration | None,
    limits: Limits,
    where: str,
) -> list[FieldError]:
    """What is wrong with an image or mask array and the filtration asked of it.

    ``where`` points at the array: ``/input/values`` or ``/data``.
    """
    errors = _shape_errors(array, limits, where)
    if errors:
        return errors
    errors = _value_errors(array, array_input, where)
    ndim = array.ndim
    if array_input.units is not None and array_input.spacing is None:
        errors.append(
            FieldError(
                pointer="/input/units",
                message="units name the unit of spacing; give spacing too (without it, lengths "
                'are in pixels and results say "pixel")',
            )
        )
    if array_input.spacing is not None and len(array_input.spacing) != ndim:
        errors.append(
            FieldError(
                pointer="/input/spacing",
                message=f"spacing has {len(array_input.spacing)} numbers for a {ndim}D array; "
                f"give one per axis ({ndim})",
            )
        )
    return errors + _filtration_errors(array, array_input, filtration, limits)


def shape_error(
    shape: tuple[int, ...], limits: Limits, where: str, what: str = "the array"
) -> FieldError | None:
    """What is wrong with an array's shape (its dimensions, size and the size limits), if
    anything. Uploads call it on the shape a file declares, before reading any pixel."""
    if len(shape) not in (2, 3):
        return FieldError(
            pointer=where,
            message=f"{what} is {len(shape)}-dimensional (shape {list(shape)}); images are 2D "
            "(rows, columns) and volumes 3D (planes, rows, columns)",
        )
    size = math.prod(shape)
    if size < 2:
        return FieldError(
            pointer=where,
            message=f"{what} has {size} pixels (shape {list(shape)}); at least 2 are needed "
            "for any topology",
        )
    limit = limits.max_image_pixels if len(shape) == 2 else limits.max_volume_voxels
    if size > limit:
        kind = "pixels in a 2D image" if len(shape) == 2 else "voxels in a 3D volume"
        return FieldError(
            pointer=where,
            message=f"{what} has shape {list(shape)}, {size} values, above the limit of "
            f"{limit} {kind}",
        )
    return None


def _shape_errors(array: np.ndarray, limits: Limits, where: str) -> list[FieldError]:
    error = shape_error(tuple(array.shape), limits, where)
    if error is not None:
        return [error]
    if array.dtype.kind not in "biuf":
        return [
            FieldError(
                pointer=where,
                message=f"the array holds {array.dtype} values; send numbers (bool, integer "
                "or floating point)",
            )
        ]
    return []


def _first_index(bad: np.ndarray) -> list[int]:
    return [int(i) for i in np.unravel_index(int(np.argmax(bad)), bad.shape)]


def _at(where: str, index: list[int]) -> str:
    """Pointer to one pixel: a path into JSON values, or the uploaded part itself."""
    if where.startswith("/input/values"):
        return where + "".join(f"/{i}" for i in index)
    return where


def _value_errors(array: np.ndarray, array_input: ArrayInput, where: str) -> list[FieldError]:
    if array.dtype.kind == "f":
        bad = ~np.isfinite(array)
        if array.dtype.itemsize >= 8:  # narrower floats cannot reach the bound (nor hold it)
            bad |= np.abs(array) > MAX_PIXEL_MAGNITUDE
        if bad.any():
            index = _first_index(bad)
            value = float(array[tuple(index)])  # a Python float: no numpy repr in the message
            return [
                FieldError(
                    pointer=_at(where, index),
                    message=f"pixel {index} is {value!r}; values must be finite numbers of "
                    f"magnitude at most {MAX_PIXEL_MAGNITUDE:g}",
                )
            ]
    if isinstance(array_input, MaskInput) and array.dtype.kind != "b":
        bad = array < 0
        if array.dtype.kind == "f":
            bad |= array != np.floor(array)
        if bad.any():
            index = _first_index(bad)
            return [
                FieldError(
                    pointer=_at(where, index),
                    message=f"pixel {index} is {float(array[tuple(index)])!r}; a mask holds 0 for "
                    "background and positive integers for foreground (0/1, 0/255 or labels)",
                )
            ]
    if isinstance(array_input, MaskInput) and array_input.skeletonize and array.all():
        return [
            FieldError(
                pointer=where,
                message="the mask has no background pixel (0); a skeleton's radii are distances "
                "to the background, so a skeletonized mask needs some",
            )
        ]
    return []


def _filtration_errors(
    array: np.ndarray, array_input: ArrayInput, filtration: Filtration | None, limits: Limits
) -> list[FieldError]:
    kind = array_input.type
    if isinstance(array_input, MaskInput) and array_input.skeletonize:
        return []  # a skeleton graph's filtration is checked as a graph's
    if filtration is None:
        hint = (
            '{"type": "cubical", "direction": "sublevel"}'
            if kind == "image"
            else '{"type": "distance"}'
        )
        return [
            FieldError(pointer="/filtration", message=f"an {kind} needs a filtration, e.g. {hint}")
        ]
    if kind == "image" and not isinstance(filtration, CubicalFiltration):
        return [
            FieldError(
                pointer="/filtration/type",
                message=f'an image takes the "cubical" filtration, not "{filtration.type}" '
                '(distance, height and radial are for "mask" inputs)',
            )
        ]
    if kind == "mask" and filtration.type not in MASK_FILTRATIONS:
        return [
            FieldError(
                pointer="/filtration/type",
                message=f'a mask takes a "distance", "height" or "radial" filtration, not '
                f'"{filtration.type}" (send the array as an "image" for "cubical")',
            )
        ]
    ndim = array.ndim
    errors: list[FieldError] = []
    if filtration.max_dim is not None and filtration.max_dim > limits.max_dim:
        errors.append(
            FieldError(
                pointer="/filtration/max_dim",
                message=f"max_dim {filtration.max_dim} is above this server's limit of "
                f"{limits.max_dim}",
            )
        )
    elif max_dim_of(filtration, ndim) > limits.max_dim:
        errors.append(
            FieldError(
                pointer="/filtration/max_dim",
                message=f"the default max_dim of a {ndim}D array, {ndim - 1}, is above this "
                f"server's limit of {limits.max_dim}; ask for max_dim {limits.max_dim} or less",
            )
        )
    if filtration.max_dim is not None and filtration.max_dim > ndim - 1:
        errors.append(
            FieldError(
                pointer="/filtration/max_dim",
                message=f"max_dim {filtration.max_dim} is above {ndim - 1}, the highest "
                f"dimension a {ndim}D array has",
            )
        )
    if isinstance(filtration, HeightFiltration):
        errors.extend(direction_errors(filtration, ndim, f"a {ndim}D array"))
    if isinstance(filtration, RadialFiltration) and len(filtration.center) != ndim:
        errors.append(
            FieldError(
                pointer="/filtration/center",
                message=f"center has {len(filtration.center)} coordinates for a {ndim}D array",
            )
        )
    if filtration.type == "distance":
        foreground = int(np.count_nonzero(array))
        if foreground in (0, array.size):
            side = "no foreground" if foreground == 0 else "no background"
            errors.append(
                FieldError(
                    pointer="/filtration/type",
                    message=f"the mask has {side} pixels, so the distance to its boundary is "
                    "undefined; use height or radial, or send a mask with both",
                )
            )
    return errors


class _PixelKind(InputKind[ArrayInput]):
    """Images and masks: an array of pixels or voxels, as JSON values or an uploaded file,
    stored in the dtype it arrived in."""

    data_fields = ("values",)  # null for JSON values and uploads alike: the same hash
    upload = "array"

    def data(self, given: BaseModel) -> InputData | FieldError | None:
        if isinstance(given, ImageInput | MaskInput) and given.values is not None:
            return array_of_values(given.values)
        return None

    def check(
        self, request: JobRequest, data: InputData | None, uploaded: bool, limits: Limits
    ) -> Checked:
        given = self.given(request)
        if uploaded and given.values is not None:
            return Checked.stop(
                "/input/values",
                "the array is both in values and uploaded as the data part; send it one way",
            )
        if not isinstance(data, np.ndarray):
            return Checked.stop(
                "/input/values",
                "give the array as values (nested lists), or upload it as the data part of a "
                "multipart/form-data request",
            )
        where = UPLOAD_POINTER if uploaded else "/input/values"
        errors = pixel_errors(data, given, request.filtration, limits, where)
        if errors:
            return Checked(errors, None)
        filtration = request.filtration
        if self.on_graph(given):
            errors = graph_filtration_errors(
                filtration, data.ndim, None, request.descriptors, limits
            )
            if errors:
                return Checked(errors, None)
            return Checked([], set(range(graph_max_dim(filtration) + 1)) if filtration else set())
        assert filtration is not None  # pixel_errors asks for one
        return Checked([], set(range(max_dim_of(filtration, data.ndim) + 1)))

    def stored(self, request: JobRequest, data: InputData | None, uploaded: bool) -> Stored:
        given = self.given(request)
        if not isinstance(data, np.ndarray):
            raise TypeError(f"an {self.type} job needs its checked array")
        name = request.filtration_name()
        return Stored(
            data,
            given.type,
            {"spacing": given.spacing, "skeletonize": self.on_graph(given)},
            f"{name} on {given.type} " + " x ".join(map(str, data.shape)),
        )

    def worker(self, task: PersistenceTask) -> str:
        return "workers.jobs.graphs" if task.skeletonize else "workers.jobs.pixels"


class ImageKind(_PixelKind):
    type = "image"
    model = ImageInput


class MaskKind(_PixelKind):
    type = "mask"
    model = MaskInput

    def on_graph(self, given: BaseModel) -> bool:
        return isinstance(given, MaskInput) and given.skeletonize
