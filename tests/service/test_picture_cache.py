"""PictureCache on the suite's Redis: pictures kept by job and digest, at most max_bytes each
and bytes_per_job per job, counted in a key that expires with the job's pictures."""

import threading

from redis import Redis

from service.picture_cache import USED_PREFIX, PictureCache

JOB = "00000000-0000-4000-8000-000000000001"


def cache(redis_url: str, *, max_bytes: int = 1000, bytes_per_job: int = 2500) -> PictureCache:
    return PictureCache(Redis.from_url(redis_url), max_bytes=max_bytes, bytes_per_job=bytes_per_job)


def test_a_kept_picture_reads_back_with_its_media_type_and_ttl(redis_url: str) -> None:
    pictures = cache(redis_url)
    assert pictures.get(JOB, "a") is None
    assert pictures.put(JOB, "a", b"<svg/>", "image/svg+xml", ttl_s=60)
    assert pictures.get(JOB, "a") == (b"<svg/>", "image/svg+xml")
    assert 0 < pictures.redis.ttl(PictureCache.picture_key(JOB, "a")) <= 60
    assert 0 < pictures.redis.ttl(f"{USED_PREFIX}{JOB}") <= 60  # the budget expires as well


def test_pictures_past_the_jobs_budget_are_not_kept(redis_url: str) -> None:
    # Budget 2500 bytes: two pictures of 1000 fit, a third does not, a smaller one still does.
    pictures = cache(redis_url)
    assert pictures.put(JOB, "a", b"a" * 1000, "image/png", ttl_s=60)
    assert pictures.put(JOB, "b", b"b" * 1000, "image/png", ttl_s=60)
    assert not pictures.put(JOB, "c", b"c" * 1000, "image/png", ttl_s=60)
    assert pictures.get(JOB, "c") is None
    assert pictures.put(JOB, "d", b"d" * 500, "image/png", ttl_s=60)
    assert int(pictures.redis.get(f"{USED_PREFIX}{JOB}") or 0) == 2500
    # Another job has a budget of its own.
    assert pictures.put(JOB.replace("1", "2"), "c", b"c" * 1000, "image/png", ttl_s=60)


def test_putting_a_kept_picture_again_counts_it_once(redis_url: str) -> None:
    pictures = cache(redis_url)
    for _ in range(3):
        assert pictures.put(JOB, "a", b"a" * 1000, "image/png", ttl_s=60)
    assert int(pictures.redis.get(f"{USED_PREFIX}{JOB}") or 0) == 1000


def test_too_large_empty_or_expired_pictures_are_not_kept(redis_url: str) -> None:
    pictures = cache(redis_url)
    assert not pictures.put(JOB, "a", b"a" * 1001, "image/png", ttl_s=60)  # over max_bytes
    assert not pictures.put(JOB, "b", b"", "image/png", ttl_s=60)
    assert not pictures.put(JOB, "c", b"c", "image/png", ttl_s=0)  # the job has expired
    assert pictures.redis.keys("lacuna:picture*") == []


def test_concurrent_puts_never_overrun_the_budget(redis_url: str) -> None:
    # 20 threads each put a distinct 1000-byte picture against a 2500-byte budget.
    pictures = cache(redis_url)
    kept: list[bool] = []
    threads = [
        threading.Thread(
            target=lambda i=i: kept.append(
                pictures.put(JOB, str(i), b"x" * 1000, "image/png", ttl_s=60)
            )
        )
        for i in range(20)
    ]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert kept.count(True) == 2
    assert len(pictures.redis.keys(f"lacuna:picture:{JOB}:*")) == 2
