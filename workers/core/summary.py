"""Summary statistics of a diagram's lifetimes (persistence l = d - b of finite pairs).

Fixed order of the values (``SUMMARY_NAMES``, then one value per requested quantile):

- count: number of pairs;
- total_persistence: sum of l ** order (the p-th total persistence; Cohen-Steiner et al.
  2010, "Lipschitz functions have L_p-stable persistence");
- max_persistence: largest l;
- mean_lifetime, std_lifetime: mean and population standard deviation (ddof = 0) of l;
- persistent_entropy: -sum (l / L) log(l / L) with L = sum l, natural log (Chintakunta et al.
  2015, "An entropy-based persistence barcode");
- quantiles of l, linear interpolation between order statistics (numpy's default method).

An empty diagram gives 0 for every value.
"""

from collections.abc import Sequence

import numpy as np

from workers.core.errors import ParameterError

__all__ = ["SUMMARY_NAMES", "summary", "summary_names"]

SUMMARY_NAMES = (
    "count",
    "total_persistence",
    "max_persistence",
    "mean_lifetime",
    "std_lifetime",
    "persistent_entropy",
)
"""Names of the fixed values, in order; quantiles follow."""


def summary_names(quantiles: Sequence[float]) -> list[str]:
    """Names of every value of ``summary``, in order (quantiles as ``quantile_<q>``, q in its
    shortest exact form, so distinct levels get distinct names)."""
    return [*SUMMARY_NAMES, *(f"quantile_{float(q)!r}" for q in quantiles)]


def summary(pairs: np.ndarray, *, order: float, quantiles: Sequence[float]) -> np.ndarray:
    """The values named by ``summary_names(quantiles)`` for finite ``pairs`` (k, 2)."""
    if not order > 0:
        raise ParameterError("order must be > 0", field="/order")
    if any(not 0 <= q <= 1 for q in quantiles):
        raise ParameterError("quantiles must lie in [0, 1]", field="/quantiles")
    pairs = np.asarray(pairs, dtype=np.float64).reshape(-1, 2)
    if not np.isfinite(pairs).all():
        raise ParameterError("summaries need finite deaths", field="/pairs")
    lives = pairs[:, 1] - pairs[:, 0]
    lives = lives[lives > 0]
    values = np.zeros(len(SUMMARY_NAMES) + len(quantiles))
    if lives.size == 0:
        return values
    total = lives.sum()
    shares = lives / total
    values[:6] = (
        lives.size,
        (lives**order).sum(),
        lives.max(),
        lives.mean(),
        lives.std(),
        float(-(shares * np.log(shares)).sum()) + 0.0,  # + 0.0: one bar gives 0, not -0
    )
    values[6:] = np.quantile(lives, list(quantiles)) if len(quantiles) else []
    return values
