"""Persistence diagrams as arrays: one (k, 2) float64 array of (birth, death) per dimension.

An essential class (one that never dies within the filtration) has death ``np.inf``. Pairs are
sorted by (birth, death) with ``inf`` last, which makes diagrams comparable by equality.
"""

from typing import Literal

import numpy as np

from workers.core.errors import InvalidArrayError, ParameterError

__all__ = [
    "sort_pairs",
    "drop_empty_bars",
    "checked_diagram",
    "finite_part",
    "split_essential",
]

InfiniteDeaths = Literal["drop", "cap"]
"""How a vectorisation treats classes with death ``inf``: leave them out, or end them at a cap."""


def sort_pairs(pairs: np.ndarray) -> np.ndarray:
    """Return ``pairs`` (k, 2) sorted by birth, then death (``np.inf`` sorts last)."""
    pairs = np.asarray(pairs, dtype=np.float64).reshape(-1, 2)
    order = np.lexsort((pairs[:, 1], pairs[:, 0]))
    return pairs[order]


def drop_empty_bars(pairs: np.ndarray) -> np.ndarray:
    """Remove pairs with death == birth: they carry no persistence (common practice)."""
    pairs = np.asarray(pairs, dtype=np.float64).reshape(-1, 2)
    return pairs[pairs[:, 1] > pairs[:, 0]]


def checked_diagram(pairs: np.ndarray, field: str | None = None) -> np.ndarray:
    """``pairs`` as a (k, 2) float64 array after checking it is a diagram.

    Births must be finite; deaths finite or ``+inf``, never below their birth. Raises
    ``InvalidArrayError`` naming ``field`` otherwise.
    """
    pairs = np.asarray(pairs, dtype=np.float64)
    if pairs.ndim != 2 or pairs.shape[1] != 2:
        raise InvalidArrayError("a diagram is a (k, 2) array of (birth, death)", field=field)
    if not np.isfinite(pairs[:, 0]).all():
        raise InvalidArrayError("births must be finite", field=field)
    deaths = pairs[:, 1]
    if np.isnan(deaths).any() or (deaths == -np.inf).any():
        raise InvalidArrayError("deaths must be finite or +inf (never dies)", field=field)
    if (deaths < pairs[:, 0]).any():
        raise InvalidArrayError("a death is below its birth", field=field)
    return pairs


def finite_part(pairs: np.ndarray, infinite: InfiniteDeaths, cap: float | None) -> np.ndarray:
    """The pairs a vectorisation sees: essential classes dropped or ended at ``cap``.

    With ``"cap"``, a death ``inf`` becomes ``max(birth, cap)``, so a class born at or after
    the cap has zero persistence and, like every zero-length pair, is left out.
    """
    pairs = checked_diagram(np.asarray(pairs, dtype=np.float64).reshape(-1, 2))
    essential = np.isinf(pairs[:, 1])
    if infinite == "drop":
        return drop_empty_bars(pairs[~essential])
    if cap is None:
        raise ParameterError('infinite "cap" needs a cap value', field="/cap")
    capped = pairs.copy()
    capped[essential, 1] = np.maximum(capped[essential, 0], cap)
    return drop_empty_bars(capped)


def split_essential(pairs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(finite pairs (k, 2), births of essential classes (e,)) of a diagram."""
    pairs = np.asarray(pairs, dtype=np.float64).reshape(-1, 2)
    essential = np.isinf(pairs[:, 1])
    return pairs[~essential], pairs[essential, 0]
