"""The Python client of the lacuna API and the ``lacuna`` command line.

    from lacuna_client import Client, Distances, LacunaError

It needs requests, numpy and tqdm, and imports nothing of the server (``pip install lacuna``;
the server is ``pip install 'lacuna[server]'``). The names below are loaded on first use
(PEP 562), so ``lacuna --help``, which imports this package, pays for neither requests nor
numpy.
"""

from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from lacuna_client.client import Client, Distances, LacunaError

__all__ = ["Client", "Distances", "LacunaError"]


def __getattr__(name: str) -> Any:
    if name in __all__:
        from lacuna_client import client

        return getattr(client, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
