"""Scorer workers: one thread per worker, the model loaded once, same results as in-process.

Outside reference: threadpoolctl's own report of the thread count of every loaded
OpenMP and BLAS library (threadpool_info) and OpenCV's cv2.getNumThreads.
"""

from __future__ import annotations

import os
import subprocess
import sys

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


_FAULT_PROBE = """
import resource, sys
import numpy as np
from fracto.campaign.runner import reuse_freed_memory
changed = reuse_freed_memory() if sys.argv[1] == "fix" else False
np.ones(2**20)  # warm up: the heap grows once
f0 = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
for _ in range(20):
    a = np.ones(2**20)  # 8 MiB = 2048 pages of 4 KiB, freed at once
    del a
print(int(changed), resource.getrusage(resource.RUSAGE_SELF).ru_minflt - f0)
"""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc malloc only")
def test_worker_reuses_freed_arrays_under_a_fixed_trim_threshold():
    # Dask's nanny exports MALLOC_TRIM_THRESHOLD_=65536; glibc then maps every array
    # above 128 KiB fresh (mallopt(3): a fixed threshold turns off the adaptive mmap
    # threshold), so each of 20 allocations of 8 MiB is faulted in anew: at least
    # 8 MiB / 2 MiB = 4 faults each even if the kernel backs it with transparent huge
    # pages (2048 with 4 KiB pages). After reuse_freed_memory() the heap keeps the
    # block: almost no new faults.
    env = {**os.environ, "MALLOC_TRIM_THRESHOLD_": "65536"}

    def faults(arg):
        out = subprocess.run(
            [sys.executable, "-c", _FAULT_PROBE, arg], env=env, capture_output=True, text=True
        )
        assert out.returncode == 0, out.stderr
        changed, n = map(int, out.stdout.split())
        return changed, n

    changed_before, before = faults("none")
    changed_after, after = faults("fix")
    assert (changed_before, changed_after) == (0, 1)
    assert before >= 20 * 4
    assert after < 0.1 * before


def test_model_facts_come_from_a_worker_and_a_bad_model_is_one_sentence(spec, tmp_path):
    # The classes a worker reports are the saved model's own (skops round trip of
    # the fitted estimator); the calling process loads nothing.
    from fracto.errors import FractoInputError
    from fracto.modes.model import load_model

    model = load_model(spec.path)
    runner._MODELS.clear()
    with runner.Scorer(spec, jobs=2) as sc:
        facts = sc.model_facts()
    assert facts == runner.ModelFacts.of(model)
    assert facts.classes == tuple(str(c) for c in model.classes_)
    assert runner.fraction_names(facts) == runner.fraction_names(model)
    assert runner._MODELS == {}
    bad = tmp_path / "bad.skops"
    bad.write_bytes(b"not a model")
    bad_spec = runner.ModelSpec(sha256="0" * 64, path=str(bad))
    with runner.Scorer(bad_spec, jobs=2) as sc, pytest.raises(FractoInputError):
        sc.model_facts()
