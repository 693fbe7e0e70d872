"""The input hash of provenance: defined on float64 values, whatever dtype the array holds."""

import hashlib

import numpy as np

from workers.spec.arrays import HASH_CHUNK, array_sha256


def test_hash_of_any_dtype_is_the_hash_of_its_float64_values() -> None:
    # The definition in the Provenance schema, computed by hand with hashlib: the shape as
    # ASCII "a,b,c;" then the values as little-endian float64 in C order.
    rng = np.random.default_rng(0)
    volume = rng.integers(0, 65535, size=(3, HASH_CHUNK // 1000, 1001), dtype=np.uint16)
    assert volume.size > 2 * HASH_CHUNK  # several chunks, and a partial last one
    expected = hashlib.sha256(
        f"3,{HASH_CHUNK // 1000},1001;".encode() + volume.astype("<f8").tobytes()
    ).hexdigest()
    assert array_sha256(volume) == expected
    assert array_sha256(np.asfortranarray(volume)) == expected  # memory order does not matter
    assert array_sha256(volume.astype(">f4")) == expected
