"""C core of ``workers.core.cubical`` (see ``_cubical.c``)."""

from typing_extensions import Buffer

def diagrams(values: Buffer, shape: tuple[int, ...], max_dim: int, /) -> list[bytes]:
    """(birth, death) pairs as packed float64 for dimensions 0..max_dim, unsorted."""
