"""Engines are named by lacuna, after their method; the libraries they use are in versions."""

from workers.spec.results import ALL_PACKAGES, ENGINE_PACKAGES, ENGINES


def test_no_engine_is_named_after_a_library_it_runs_on() -> None:
    libraries = [name for name in ALL_PACKAGES if name != "lacuna"]
    for engine in ENGINES:
        assert not [library for library in libraries if library in engine], engine


def test_every_engine_is_described_and_its_libraries_are_known() -> None:
    assert all(ENGINES[engine] for engine in ENGINES)
    assert set(ENGINE_PACKAGES) <= set(ENGINES)
    assert {p for packages in ENGINE_PACKAGES.values() for p in packages} <= set(ALL_PACKAGES)
