"""Scorer workers: one thread per worker, the model loaded once, same results as in-process.

Outside reference: threadpoolctl's own report of the thread count of every loaded
OpenMP and BLAS library (threadpool_info) and OpenCV's cv2.getNumThreads.
"""

from __future__ import annotations

import pytest

from fracto.campaign import runner


@pytest.fixture(scope="module")
def spec(tmp_path_factory):
    from modes_textures import small_model

    from fracto.modes.model import save_model, sha256_of

    p = tmp_path_factory.mktemp("model") / "m.skops"
    save_model(small_model(), p)
    return runner.ModelSpec(sha256=sha256_of(p), path=str(p))


def test_pool_workers_use_one_thread_and_load_the_model_in_the_initializer(spec):
    with runner.Scorer(spec, jobs=2) as sc:
        counts = sc._pool.submit(runner.thread_counts).result(timeout=120)
        cached = sc._pool.submit(_cached_models).result(timeout=120)
    assert counts, "threadpoolctl saw no numerical library"
    assert all(n == 1 for n in counts.values()), counts
    assert cached == [spec.sha256]  # loaded by the initializer, before any image


def _cached_models() -> list[str]:
    return list(runner._MODELS)


def test_serial_limit_is_restored_afterwards():
    before = runner.thread_counts()
    with runner.one_thread():
        inside = runner.thread_counts()
    assert all(n == 1 for n in inside.values()), inside
    assert runner.thread_counts() == before


def test_dask_tasks_use_one_thread(spec):
    distributed = pytest.importorskip("distributed")
    with (
        distributed.LocalCluster(
            n_workers=1, threads_per_worker=1, processes=True, dashboard_address=None
        ) as cl,
        distributed.Client(cl) as c,
    ):
        with runner.Scorer(spec, client=c) as sc:
            sc._warm[0].result(timeout=120)
            counts = c.submit(_counts_in_task, pure=False).result(timeout=120)
            cached = c.submit(_cached_models, pure=False).result(timeout=120)
    assert all(n == 1 for n in counts.values()), counts
    assert cached == [spec.sha256]  # the warm-up task loaded it


def _counts_in_task() -> dict[str, int]:
    runner.single_thread_worker()
    return runner.thread_counts()
