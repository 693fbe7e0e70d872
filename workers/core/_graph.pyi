"""C core of ``workers.core.graph_persistence`` (see ``_graph.c``)."""

from typing_extensions import Buffer

def diagrams(values: Buffer, order: Buffer, edges: Buffer, max_dim: int, /) -> list[bytes]:
    """(birth, death) pairs as packed float64 for dimensions 0..max_dim, unsorted."""
