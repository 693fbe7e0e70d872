"""The public surface of lacuna_client is deliberate: the names of ``__all__``, each there."""

import pytest

import lacuna_client


def test_public_names() -> None:
    assert lacuna_client.__all__ == ["Client", "Distances", "LacunaError"]
    namespace: dict[str, object] = {}
    exec("from lacuna_client import *", namespace)
    assert sorted(name for name in namespace if name != "__builtins__") == [
        "Client",
        "Distances",
        "LacunaError",
    ]
    assert isinstance(lacuna_client.Client, type)
    assert isinstance(lacuna_client.Distances, type)
    assert issubclass(lacuna_client.LacunaError, Exception)


def test_other_names_are_not_there() -> None:
    with pytest.raises(AttributeError, match="no attribute 'submit'"):
        lacuna_client.submit  # noqa: B018
