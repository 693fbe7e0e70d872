"""Cubical persistence table: lacuna against gudhi and cripser, measured side by side in one run.

Data: Gaussian-smoothed white noise (sigma 4 pixels, fixed seed), a 2048 x 2048 image and a
128^3 volume, all dimensions; then a 96^3 volume of raw white noise, the hard case for the
H1 reduction (few apparent pairs). References: gudhi's CubicalComplex on the same top-dimensional
cells, and cripser's T-construction binding (``tcripser``, pixels as top cells, the same
filtration). Each engine runs in forked children: the median of 3 timed runs, then one more
child for its peak memory (rise of the resident set's high-water mark during the call, so
the input array and the interpreter are left out). Every reference's diagrams are checked
against lacuna's, dimension by dimension.

Run: ``.venv/bin/python -m tests.benchmarks.cubical [--cap SECONDS]``.
"""

import argparse
from collections.abc import Callable
from functools import partial
from types import ModuleType
from typing import Any

import gudhi
import numpy as np
from scipy.ndimage import gaussian_filter

from tests.benchmarks.vectors import Timed, _other_load, _ratio, _rss_rise, _timed_in_child
from workers.core.cubical import cubical_diagrams
from workers.core.diagrams import sort_pairs

Engine = Callable[[np.ndarray], np.ndarray]
"""values -> (k, 3) array of (dimension, birth, death), each dimension sorted."""

CASES = [((2048, 2048), 4.0), ((128, 128, 128), 4.0), ((96, 96, 96), 0.0)]
"""(shape, Gaussian sigma in pixels; 0: raw white noise)."""
SEED = 2024


def _stacked(diagrams: list[np.ndarray]) -> np.ndarray:
    """Diagrams of dimensions 0.. as one (k, 3) array: zero-length and +inf-born pairs out."""
    rows = []
    for k, pairs in enumerate(diagrams):
        pairs = np.asarray(pairs, dtype=np.float64).reshape(-1, 2)
        pairs = sort_pairs(pairs[(pairs[:, 1] > pairs[:, 0]) & np.isfinite(pairs[:, 0])])
        rows.append(np.column_stack([np.full(len(pairs), float(k)), pairs]))
    return np.concatenate(rows)


def lacuna(values: np.ndarray) -> np.ndarray:
    return _stacked(cubical_diagrams(values, max_dim=values.ndim - 1))


def gudhi_cubical(values: np.ndarray) -> np.ndarray:
    complex_ = gudhi.CubicalComplex(top_dimensional_cells=values)
    complex_.persistence(homology_coeff_field=2)  # Z/2, as lacuna
    return _stacked([complex_.persistence_intervals_in_dimension(k) for k in range(values.ndim)])


def cripser_cubical(tcripser: ModuleType, values: np.ndarray) -> np.ndarray:
    answer = np.asarray(tcripser.computePH(values, maxdim=values.ndim - 1, location="no"))
    dims, births, deaths = answer[:, 0].astype(int), answer[:, 1], answer[:, 2].copy()
    deaths[deaths >= np.finfo(np.float64).max] = np.inf  # its "never dies"
    pairs = np.column_stack([births, deaths])
    return _stacked([pairs[dims == k] for k in range(values.ndim)])


def _agreement(ours: np.ndarray, theirs: np.ndarray, ndim: int) -> str:
    """Per dimension: max abs difference of the sorted pairs, or the counts if they differ."""
    cells = []
    for k in range(ndim):
        mine, other = ours[ours[:, 0] == k, 1:], theirs[theirs[:, 0] == k, 1:]
        if mine.shape != other.shape:
            cells.append(f"H{k} {len(mine)} vs {len(other)} pairs (differs!)")
        elif not np.array_equal(np.isinf(mine), np.isinf(other)):
            cells.append(f"H{k} essential classes differ!")
        else:
            finite = np.isfinite(mine)
            gap = float(np.max(np.abs(mine[finite] - other[finite]), initial=0.0))
            cells.append(f"H{k} {gap:.0e}" + ("" if gap <= 1e-12 else " (differs!)"))
    return ", ".join(cells)


def _megabytes(measured: Timed | None) -> float | None:
    return None if measured is None else float(measured.value) / 2**20


def _cell(value: float | None, cap_text: str, digits: str) -> str:
    return cap_text if value is None else format(value, digits)


def _memory_ratio(top: float | None, bottom: float | None) -> str:
    return "?" if top is None or bottom is None else f"{top / bottom:.3g}"


@_other_load()
def cubical_table(cap: float) -> None:
    """lacuna, cripser and gudhi on one image and one volume, all dimensions."""
    import tcripser  # GPL reference: benchmark only

    engines: dict[str, Engine] = {
        "lacuna": lacuna,
        "cripser": partial(cripser_cubical, tcripser),
        "gudhi": gudhi_cubical,
    }
    print(
        "\n## Cubical persistence (sublevel, pixels as top cells, all dimensions): median "
        "seconds of 3 runs and peak memory (1 core)\n"
    )
    print(
        "Goal: lacuna <= 1.0x cripser's time and <= 1.5x its peak memory, with equal "
        "diagrams. Data: gaussian_filter(standard normal noise, sigma), seed "
        f"{SEED}. Peak memory: rise of the resident high-water mark (VmHWM) during one call "
        "in a fresh forked child, the input array excluded. Diagrams: max abs difference of "
        "the sorted pairs per dimension, zero-length bars left out.\n"
    )
    print(
        "| data | lacuna s | cripser s | gudhi s | lacuna / cripser time (goal <= 1) "
        "| lacuna / gudhi time | lacuna MB | cripser MB | gudhi MB "
        "| lacuna / cripser memory (goal <= 1.5) | lacuna / gudhi memory "
        "| lacuna bytes / voxel | cripser agrees | gudhi agrees |"
    )
    print("|---|" + "---|" * 13)
    for shape, sigma in CASES:
        values = np.random.default_rng(SEED).standard_normal(shape)
        if sigma > 0:
            values = np.asarray(gaussian_filter(values, sigma))
        label = " x ".join(map(str, shape)) + (f", sigma {sigma:g}" if sigma else ", raw noise")
        timed: dict[str, Timed | None] = {}
        memory: dict[str, float | None] = {}
        for name, engine in engines.items():
            call: Callable[[], Any] = partial(engine, values)
            timed[name] = _timed_in_child(call, 3, cap)
            memory[name] = _megabytes(_timed_in_child(partial(_rss_rise, call), 1, cap))
        ours = timed["lacuna"]
        seconds = {name: None if t is None else t.seconds for name, t in timed.items()}
        agreement = []
        for name in ("cripser", "gudhi"):
            theirs = timed[name]
            if ours is None or theirs is None:
                agreement.append("? (capped)")
            else:
                agreement.append(_agreement(ours.value, theirs.value, len(shape)))
        lacuna_mb = memory["lacuna"]
        per_voxel = "?" if lacuna_mb is None else f"{lacuna_mb * 2**20 / values.size:.1f}"
        print(
            f"| {label} "
            + "".join(f"| {_cell(seconds[n], f'> {cap:.0f}', '.3f')} " for n in engines)
            + f"| {_ratio(seconds['lacuna'], seconds['cripser'], cap)} "
            f"| {_ratio(seconds['lacuna'], seconds['gudhi'], cap)} "
            + "".join(f"| {_cell(memory[n], '?', '.1f')} " for n in engines)
            + f"| {_memory_ratio(lacuna_mb, memory['cripser'])} "
            f"| {_memory_ratio(lacuna_mb, memory['gudhi'])} | {per_voxel} "
            f"| {agreement[0]} | {agreement[1]} |",
            flush=True,
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cap", type=float, default=120.0, help="seconds allowed to one run")
    cubical_table(parser.parse_args().cap)


if __name__ == "__main__":
    main()
