"""Scoring the items of a campaign: one item, a local process pool, a Dask cluster.

:func:`score_task` is the single work function: it reads one SEM image or
height map (from a path, or from the bytes sent with the task), scores it and
returns a plain dict with the result JSON and a downscaled overlay thumbnail.
It never raises for bad input: a file that cannot be scored comes back with
``status = "error"`` and one sentence.

The same function runs in this process (``jobs=1``), in a
:class:`concurrent.futures.ProcessPoolExecutor` (``jobs=N``; each worker
process loads the model once, in its initializer) or on a ``dask.distributed``
cluster (``scheduler=ADDRESS``). Cluster workers need not see this machine's
files: the file bytes travel with each task and the model bytes are scattered
to every worker once. At most a few tasks per worker are in flight, so memory
stays bounded on long campaigns.

:class:`Scorer` holds the executor. It is started before the caller's own
set-up work (hashing the files, loading the model for the summaries), so the
worker processes start and load the model meanwhile; on a cluster one
warm-up task per worker loads the model before the first image arrives.

Threads: one image per core. Every worker (process-pool initializer, and each
Dask task's thread) calls :func:`single_thread_worker`, which limits OpenMP,
BLAS and OpenCV to one thread; ``jobs=1`` runs under the same limit for the
duration of the batch (restored afterwards), so N workers use N cores and
``--jobs 2`` on 2 cores does not oversubscribe them.

Height maps are measured with :func:`fracto.surface.measure.measure_surface`
and classified through their rendered SEM view
(:func:`fracto.modes.pipeline.classify_height_map`) by the height model
(``ModelSpec.height``, or the model itself when it takes height maps alone);
without one, or when the map cannot be classified (no calibration, too
small), their mode columns stay empty and ``mode_note`` says why.
"""

from __future__ import annotations

import contextlib
import io
import os
import sys
import tempfile
import threading
import time
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from fracto.classes import MODES, UNCLASSIFIED
from fracto.errors import FractoInputError

#: Longest side of an overlay thumbnail in pixels.
THUMBNAIL_PX = 512
#: JPEG quality of the thumbnails (common practice for previews).
THUMBNAIL_QUALITY = 80


@dataclass(frozen=True)
class ModelSpec:
    """How a worker gets the model: a path it can read, or the file's bytes."""

    sha256: str
    path: str | None = None
    data: bytes | None = None
    trust: bool = False
    #: The height model for height maps without an SEM image (None: none).
    height: ModelSpec | None = None


@dataclass(frozen=True)
class ScoreTask:
    """One item to score.

    Parameters
    ----------
    key : str
        Store key (content hash, settings hash, tool version).
    kind : str
        ``"sem"`` or ``"height"``.
    name : str
        File name as the manifest gives it (for messages).
    path : str or None
        File to read (local runs).
    data : bytes or None
        The file's content (cluster runs).
    sidecar : bytes or None
        The calibration sidecar JSON beside the file, if any (cluster runs).
    pixel_size_um : float or None
        Pixel size from the manifest (None: the file's calibration).
    settings : dict
        ``seed``, ``n_boot``, ``threshold``, ``banner``, ``thumbnail_px``.
    """

    key: str
    kind: str
    name: str
    path: str | None
    data: bytes | None = None
    sidecar: bytes | None = None
    pixel_size_um: float | None = None
    settings: dict = field(default_factory=dict)


# Per-process model cache (sha256 -> model): one load per worker process.
_MODELS: dict[str, object] = {}
_MODEL_LOCK = threading.Lock()
_THREAD_STATE = threading.local()

#: Environment variables that set the thread count of numerical libraries at their start.
THREAD_ENV_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


def single_thread_worker() -> None:
    """Limit the numerical libraries of this worker (process and thread) to one thread.

    Sets :data:`THREAD_ENV_VARS` to 1 (read by libraries that start later),
    imports the scoring modules (so that their OpenMP and BLAS libraries are
    loaded) and then limits every loaded one to one thread with
    ``threadpoolctl.threadpool_limits(1)``, and OpenCV with
    ``cv2.setNumThreads(1)``. OpenMP's limit belongs to the calling thread, so
    it is applied once per thread (a Dask worker runs its tasks in threads of its
    own); later calls in the same thread return at once.
    """
    if getattr(_THREAD_STATE, "single", False):
        return
    reuse_freed_memory()
    for var in THREAD_ENV_VARS:
        os.environ[var] = "1"
    from threadpoolctl import threadpool_limits

    import fracto.modes.pipeline  # noqa: F401  (loads scikit-learn's OpenMP, SciPy's BLAS)

    threadpool_limits(limits=1)
    with contextlib.suppress(ImportError):
        import cv2

        cv2.setNumThreads(1)
    _THREAD_STATE.single = True


#: glibc ``mallopt`` parameters (malloc.h) and the values :func:`reuse_freed_memory` sets.
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3
_MMAP_THRESHOLD_BYTES = 32 * 2**20  # glibc's largest allowed value on 64-bit (HEAP_MAX / 2)
_TRIM_THRESHOLD_BYTES = 256 * 2**20


def reuse_freed_memory() -> bool:
    """Let this process reuse freed large arrays when its launcher fixed a trim threshold.

    Dask's nanny starts workers with ``MALLOC_TRIM_THRESHOLD_=65536``. A fixed trim
    threshold turns off glibc's adaptive mmap threshold, so every array above
    128 KiB is mapped fresh from the kernel and unmapped when freed, and each
    image's many megabyte-sized temporaries are page-faulted anew: about a
    quarter more CPU per image was measured here (bench/bench_batch.py). When
    that variable is set, this raises the mmap threshold to 32 MiB and the trim
    threshold to 256 MiB with ``mallopt`` so the heap keeps and reuses them
    (the worker keeps its peak heap). Does nothing elsewhere (no glibc, or the
    variable unset); returns whether it changed anything.
    """
    if not os.environ.get("MALLOC_TRIM_THRESHOLD_") or not sys.platform.startswith("linux"):
        return False
    import ctypes

    try:
        libc = ctypes.CDLL("libc.so.6")
        ok = libc.mallopt(_M_MMAP_THRESHOLD, _MMAP_THRESHOLD_BYTES) == 1
        return bool(ok and libc.mallopt(_M_TRIM_THRESHOLD, _TRIM_THRESHOLD_BYTES) == 1)
    except (OSError, AttributeError):
        return False


@contextlib.contextmanager
def interrupt_deferred():
    """Hold a Ctrl-C that arrives inside the block until the block has finished.

    Starting a spawned worker writes its start-up data down a pipe; a
    KeyboardInterrupt in the middle of that write leaves the child reading a
    truncated pipe and printing a traceback. Off the main thread this does nothing.
    """
    import signal

    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught: list[int] = []
    previous = signal.signal(signal.SIGINT, lambda signum, frame: caught.append(signum))
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)
    if caught:
        raise KeyboardInterrupt


@contextlib.contextmanager
def one_thread():
    """Context: one thread for OpenMP, BLAS and OpenCV in this process, restored after."""
    from threadpoolctl import threadpool_limits

    import fracto.modes.pipeline  # noqa: F401

    cv2 = None
    with contextlib.suppress(ImportError):
        import cv2
    n_cv = cv2.getNumThreads() if cv2 is not None else None
    try:
        with threadpool_limits(limits=1):
            if cv2 is not None:
                cv2.setNumThreads(1)
            yield
    finally:
        if cv2 is not None:
            cv2.setNumThreads(n_cv)


def thread_counts() -> dict[str, int]:
    """Threads each loaded numerical library would use now (threadpoolctl and OpenCV)."""
    from threadpoolctl import threadpool_info

    out = {
        f"{d['user_api']}:{d['internal_api']}": int(d["num_threads"]) for d in threadpool_info()
    }
    with contextlib.suppress(ImportError):
        import cv2

        out["opencv"] = int(cv2.getNumThreads())
    return out


def remember_model(spec: ModelSpec, model, height_model=None) -> None:
    """Put already loaded models into this process's cache (no second load)."""
    with _MODEL_LOCK:
        _MODELS.clear()
        _MODELS[spec.sha256] = model
        if spec.height is not None and height_model is not None:
            _MODELS[spec.height.sha256] = height_model


def _cached(spec: ModelSpec, keep: tuple[str, ...] = ()):
    m = _MODELS.get(spec.sha256)
    if m is None:
        from fracto.modes.model import load_model

        if spec.data is not None:
            with tempfile.TemporaryDirectory(prefix="fracto-model-") as d:
                p = Path(d) / "model.skops"
                p.write_bytes(spec.data)
                m = load_model(p, trust=spec.trust)
        else:
            m = load_model(spec.path, trust=spec.trust)
        for k in [k for k in _MODELS if k not in keep]:
            del _MODELS[k]
        _MODELS[spec.sha256] = m
    return m


def _model(spec: ModelSpec):
    with _MODEL_LOCK:
        return _cached(spec, (spec.height.sha256,) if spec.height is not None else ())


def _height_model(spec: ModelSpec):
    """The height model of `spec` (None without one), cached beside the image model."""
    if spec.height is None:
        return None
    with _MODEL_LOCK:
        return _cached(spec.height, (spec.sha256,))


def init_worker(spec: ModelSpec) -> None:
    """Process-pool initializer: one thread, Ctrl-C left to the parent, the model loaded once."""
    import signal

    # Ctrl-C is handled once, by the main process (it stops the pool and keeps what is
    # stored); workers ignore it so no traceback of theirs reaches the user.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    single_thread_worker()
    # a model that cannot be loaded is reported by each task (score_task), not here:
    # an initializer that raises would break the whole pool
    with contextlib.suppress(Exception):
        _model(spec)
        _height_model(spec)


def warm_up(spec: ModelSpec) -> int:
    """A task that only readies its worker (one thread, the model loaded); returns its pid."""
    single_thread_worker()
    with contextlib.suppress(Exception):
        _model(spec)
        _height_model(spec)
    return os.getpid()


@dataclass(frozen=True)
class ModelFacts:
    """What the calling process needs of a model that only its workers load.

    Parameters
    ----------
    classes : tuple of str
        The model's classes, in its order.
    feature_set_version : str or None
    """

    classes: tuple[str, ...]
    feature_set_version: str | None = None

    @classmethod
    def of(cls, model) -> ModelFacts:
        """The facts of a loaded model."""
        return cls(
            classes=tuple(str(c) for c in model.classes_),
            feature_set_version=getattr(model, "feature_set_version_", None),
        )


def model_facts(spec: ModelSpec) -> ModelFacts:
    """The facts of `spec`'s model, loaded (once) in the process that runs this."""
    return ModelFacts.of(_model(spec))


def fraction_names(model) -> tuple[str, ...]:
    """Fraction names reported for a model: fracto's modes, extra classes, unclassified.

    `model` is a fitted model or its :class:`ModelFacts`.
    """
    classes = (model if isinstance(model, ModelFacts) else ModelFacts.of(model)).classes
    return (*MODES, *[c for c in classes if c not in MODES], UNCLASSIFIED)


def _hex_rgb(colour: str) -> np.ndarray:
    h = colour.lstrip("#")
    return np.array([int(h[k : k + 2], 16) / 255.0 for k in (0, 2, 4)], dtype=np.float32)


def thumbnail_jpeg(
    image: np.ndarray,
    label_map: np.ndarray | None = None,
    classes: tuple[str, ...] = (),
    *,
    max_side_px: int = THUMBNAIL_PX,
    alpha: float = 0.4,
) -> bytes:
    """A downscaled JPEG of a grey image with translucent mode colours.

    Colours are those of :func:`fracto.modes.overlay.class_colours`; the report
    names each colour in text, so the picture never relies on colour alone.
    """
    from PIL import Image

    from fracto.modes.overlay import class_colours

    img = np.asarray(image, dtype=np.float32)
    finite = np.isfinite(img)
    if not finite.all():
        img = np.where(finite, img, float(img[finite].mean()) if finite.any() else 0.0)
    # downscale first (grey by area averaging, labels by nearest), then stretch the
    # 1st-99th percentile range of the small image (a quarter of the work or less)
    ny, nx = img.shape
    f = max(ny, nx) / max_side_px
    size = (max(1, round(nx / f)), max(1, round(ny / f))) if f > 1 else (nx, ny)
    g = Image.fromarray(np.ascontiguousarray(img), "F")
    if size != (nx, ny):
        g = g.resize(size, Image.Resampling.BOX)
    small = np.asarray(g, dtype=np.float32)
    lo, hi = np.percentile(small, [1, 99])
    grey = np.clip((small - lo) / max(float(hi - lo), 1e-12), 0, 1)
    grey = np.round(grey * 255) / 255.0  # the 8-bit grey levels a JPEG holds
    rgb = np.repeat(grey.astype(np.float32)[..., None], 3, axis=2)
    if label_map is not None:
        lab = Image.fromarray(np.asarray(label_map).astype(np.uint8), "L")
        if size != (nx, ny):
            lab = lab.resize(size, Image.Resampling.NEAREST)
        lab = np.asarray(lab)
        cols = class_colours(classes)
        for i, c in enumerate(classes, start=1):
            sel = lab == i
            if sel.any():
                rgb[sel] = (1 - alpha) * rgb[sel] + alpha * _hex_rgb(cols[c])
    im = Image.fromarray(np.round(rgb * 255).astype(np.uint8), "RGB")
    buf = io.BytesIO()
    im.save(buf, format="JPEG", quality=THUMBNAIL_QUALITY, optimize=True)
    return buf.getvalue()


def _fractions_dict(res, names) -> dict:
    fr = res.fractions.to_dict()
    return {n: fr.get(n, {"value": 0.0, "ci95": [0.0, 0.0]}) for n in names}


def _score_sem(path: Path, task: ScoreTask, model) -> tuple[dict, bytes]:
    from fracto.io import PixelSize, read_sem_image
    from fracto.modes.pipeline import classify_image

    st = task.settings
    ps = PixelSize.square(task.pixel_size_um, "manifest") if task.pixel_size_um else None
    sem = read_sem_image(path, banner=st.get("banner", "auto"), pixel_size=ps)
    img = np.asarray(sem.image, dtype=np.float32)
    if model.uses_height:
        raise FractoInputError(
            "The model needs a height map with each image; batch scores images with "
            "image-only models."
        )
    px = sem.pixel_size.x_um if sem.pixel_size.calibrated else None
    res = classify_image(
        img,
        model,
        pixel_size_um=px,
        threshold=st.get("threshold"),
        seed=int(st.get("seed", 0)),
        n_boot=int(st.get("n_boot", 1000)),
    )
    q = res.quality.to_dict()
    q.pop("limits", None)
    out = {
        "kind": "sem",
        "shape": list(img.shape),
        "pixel_size": sem.pixel_size.to_dict(),
        "fractions": _fractions_dict(res, fraction_names(model)),
        "quality": q,
        "scale": res.features.scale.to_dict(),
        "banner": {k: v for k, v in sem.banner.items() if k in ("rows", "side", "method")},
        "threshold": res.threshold,
    }
    out["striation"] = _striation(img, res, px, int(st.get("seed", 0)))
    thumb = thumbnail_jpeg(
        img, res.label_map, res.classes, max_side_px=int(st.get("thumbnail_px", THUMBNAIL_PX))
    )
    return out, thumb


def _striation(img: np.ndarray, res, px: float | None, seed: int) -> dict | None:
    """Striation spacing in the regions classified as fatigue (None: no fatigue windows)."""
    from fracto.modes.striation import striations_from_mode_result

    if min(img.shape) < 16:
        return None
    sr = striations_from_mode_result(img, res, px, seed=seed)
    return sr.to_dict() if sr is not None else None


def _score_height(path: Path, task: ScoreTask, model, height_model=None) -> tuple[dict, bytes]:
    from fracto.io import PixelSize, read_height_map
    from fracto.modes.pipeline import classify_height_map, is_height_model
    from fracto.surface.measure import measure_surface

    st = task.settings
    ps = PixelSize.square(task.pixel_size_um, "manifest") if task.pixel_size_um else None
    hm = read_height_map(path, pixel_size=ps)
    z = np.asarray(hm.z_um, dtype=np.float64)
    m = measure_surface(z, hm.pixel_size, **st.get("measure", {}))
    md = m.to_dict()
    out = {
        "kind": "height",
        "shape": list(z.shape),
        "pixel_size": hm.pixel_size.to_dict(),
        "parameters": md["parameters"],
        "valid_fraction": md["valid_fraction"],
        "fractions": None,
        "quality": None,
        "mode_note": "no height model was given, and the model does not classify height maps",
    }
    label_map, classes = None, ()
    hmodel = height_model if height_model is not None else model
    if is_height_model(hmodel):
        try:
            res = classify_height_map(
                z,
                hmodel,
                pixel_size_um=hm.pixel_size.x_um if hm.pixel_size.calibrated else None,
                threshold=st.get("threshold"),
                seed=int(st.get("seed", 0)),
                n_boot=int(st.get("n_boot", 1000)),
            )
        except FractoInputError as exc:  # the roughness still stands
            out["mode_note"] = f"not classified: {exc}"
        else:
            out["fractions"] = _fractions_dict(res, fraction_names(hmodel))
            q = res.quality.to_dict()
            q.pop("limits", None)
            out["quality"] = q
            out["scale"] = res.features.scale.to_dict()
            out["threshold"] = res.threshold
            out["mode_input"] = "height map alone (rendered view + height features)"
            out.pop("mode_note")
            label_map, classes = res.label_map, res.classes
    thumb = thumbnail_jpeg(
        z, label_map, classes, max_side_px=int(st.get("thumbnail_px", THUMBNAIL_PX))
    )
    return out, thumb


def score_task(task: ScoreTask, spec: ModelSpec) -> dict:
    """Score one item; never raises for bad input.

    Returns
    -------
    dict
        ``key``, ``status`` (``"ok"`` / ``"error"``), ``error`` (sentence or None),
        ``result`` (JSON-ready dict or None), ``thumbnail`` (JPEG bytes or None),
        ``seconds`` (wall) and ``cpu_seconds`` (CPU time of this process meanwhile).
    """
    t0 = time.perf_counter()
    c0 = time.process_time()
    try:
        model = _model(spec)
        hmodel = _height_model(spec) if task.kind == "height" else None
        if task.data is not None:
            with tempfile.TemporaryDirectory(prefix="fracto-item-") as d:
                p = Path(d) / Path(task.name).name
                p.write_bytes(task.data)
                if task.sidecar is not None:
                    (p.parent / (p.name + ".json")).write_bytes(task.sidecar)
                result, thumb = _score(p, task, model, hmodel)
        else:
            result, thumb = _score(Path(task.path), task, model, hmodel)
        status, error = "ok", None
    except FractoInputError as exc:
        result, thumb, status, error = None, None, "error", str(exc)
    except MemoryError:
        result, thumb, status = None, None, "error"
        error = f"'{task.name}' is too large to score in the memory available."
    except Exception as exc:  # a library failure on one file must not stop the batch
        result, thumb, status = None, None, "error"
        error = f"Internal error while scoring '{task.name}' ({type(exc).__name__}: {exc})."
    return {
        "key": task.key,
        "status": status,
        "error": error,
        "result": result,
        "thumbnail": thumb,
        "seconds": time.perf_counter() - t0,
        "cpu_seconds": time.process_time() - c0,
    }


def _score(path: Path, task: ScoreTask, model, height_model=None) -> tuple[dict, bytes]:
    if task.kind == "sem":
        return _score_sem(path, task, model)
    if task.kind == "height":
        return _score_height(path, task, model, height_model)
    raise FractoInputError(f"'{task.name}' is of kind '{task.kind}', which batch does not score.")


# ---------------------------------------------------------------- executors


def score_task_one_thread(task: ScoreTask, spec: ModelSpec) -> dict:
    """:func:`score_task` after :func:`single_thread_worker` (the Dask task function)."""
    single_thread_worker()
    return score_task(task, spec)


def with_bytes(task: ScoreTask) -> ScoreTask:
    """The task with the file's bytes (and its sidecar's) attached, for a remote worker."""
    from dataclasses import replace

    p = Path(task.path)
    try:
        data = p.read_bytes()
    except OSError as exc:
        raise FractoInputError(f"'{task.name}' cannot be read ({exc.strerror}).") from exc
    side = None
    for cand in (p.with_name(p.name + ".json"), p.with_suffix(".json")):
        if cand != p and cand.is_file():
            side = cand.read_bytes()
            break
    return replace(task, data=data, sidecar=side, path=None)


def connect_dask(address: str):
    """A ``dask.distributed`` client of the scheduler at `address` (one clear error if not)."""
    try:
        from distributed import Client
    except ImportError as exc:
        raise FractoInputError(
            "--scheduler needs dask.distributed; install it with: pip install 'fracto[cluster]'."
        ) from exc
    try:
        return Client(address, timeout="5s")
    except (OSError, TimeoutError) as exc:
        raise FractoInputError(
            f"Cannot reach the Dask scheduler at '{address}' ({type(exc).__name__})."
        ) from exc


class Scorer:
    """Where the tasks are scored: this process, local processes or a Dask cluster.

    Parameters
    ----------
    spec : ModelSpec
        The model.
    jobs : int
        Local worker processes (1: this process).
    scheduler : str, optional
        Address of a Dask scheduler (a client is opened and closed here).
    client : distributed.Client, optional
        An existing Dask client (not closed here).

    Use as a context manager; :meth:`start` (called on entry) begins the
    workers' start-up without waiting for it, :meth:`run` scores tasks and
    yields their results as they finish, with at most two tasks per worker in
    flight. On an exception in the consumer (Ctrl-C included) the pending
    tasks are cancelled.
    """

    def __init__(
        self,
        spec: ModelSpec,
        *,
        jobs: int = 1,
        scheduler: str | None = None,
        client=None,
    ) -> None:
        self.spec = spec
        self.jobs = max(1, int(jobs))
        self.scheduler = scheduler
        self.client = client
        self._own_client = False
        self._pool: ProcessPoolExecutor | None = None
        self._spec_f = None
        self._warm: list = []

    @property
    def kind(self) -> str:
        if self.client is not None or self.scheduler:
            return "dask"
        return "pool" if self.jobs > 1 else "serial"

    # ------------------------------------------------------------ life cycle

    def start(self) -> Scorer:
        """Start the workers (processes spawn and load the model in the background)."""
        if self.kind == "dask":
            self._start_dask()
        elif self.kind == "pool" and self._pool is None:
            import multiprocessing

            # "spawn", not fork: a parent that has already run OpenMP code (a scikit-learn
            # prediction in this process) can leave forked children deadlocked.
            with interrupt_deferred():
                self._pool = ProcessPoolExecutor(
                    max_workers=self.jobs,
                    mp_context=multiprocessing.get_context("spawn"),
                    initializer=init_worker,
                    initargs=(self.spec,),
                )
                # one submission per worker makes the pool spawn them all now
                self._warm = [self._pool.submit(os.getpid) for _ in range(self.jobs)]
        return self

    def model_facts(self) -> ModelFacts:
        """Classes and feature-set version of the model, from a worker that has loaded it.

        The calling process then need not load the model itself while the workers
        start (on two cores that load delays them by about 1.2 s); without workers
        the model is loaded here, once, into the cache the scoring uses. A model
        that cannot be loaded raises its :class:`fracto.errors.FractoInputError`.
        """
        kind = self.kind
        if kind == "serial":
            return model_facts(self.spec)
        self.start()
        if kind == "dask":
            return self.client.submit(model_facts, self._spec_f, pure=False).result()
        return self._pool.submit(model_facts, self.spec).result()

    def _start_dask(self) -> None:
        from dataclasses import replace

        if self._spec_f is not None:
            return
        if self.client is None:
            self.client = connect_dask(self.scheduler)
            self._own_client = True
        spec = self.spec
        if spec.data is None:
            spec = replace(spec, data=Path(spec.path).read_bytes(), path=None)
        if spec.height is not None and spec.height.data is None:
            h = spec.height
            spec = replace(spec, height=replace(h, data=Path(h.path).read_bytes(), path=None))
        self._spec_f = self.client.scatter(spec, broadcast=True)
        # one warm-up task per worker: one thread and the model loaded before any image
        self._warm = [
            self.client.submit(
                warm_up, self._spec_f, workers=[w], allow_other_workers=False, pure=False
            )
            for w in self.client.scheduler_info()["workers"]
        ]

    def close(self) -> None:
        """Stop the workers (a client opened here is closed)."""
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None
        for f in self._warm:
            with contextlib.suppress(Exception):
                f.cancel()
        self._warm = []
        if self._own_client and self.client is not None:
            self.client.close()
            self.client = None
            self._own_client = False
        self._spec_f = None

    def __enter__(self) -> Scorer:
        return self.start()

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------ scoring

    def run(self, tasks: Iterable[ScoreTask]) -> Iterator[dict]:
        """Score the tasks, yielding one result dict per task as it finishes."""
        tasks = list(tasks)
        if not tasks:
            return
        kind = self.kind
        if kind == "serial" or (kind == "pool" and len(tasks) == 1 and self._pool is None):
            with one_thread():
                for t in tasks:
                    yield score_task(t, self.spec)
            return
        self.start()
        if kind == "dask":
            yield from self._run_dask(tasks)
        else:
            yield from self._run_pool(tasks)

    def _run_pool(self, tasks: list[ScoreTask]) -> Iterator[dict]:
        ex = self._pool
        it = iter(tasks)
        pending: set = set()
        try:
            for t in it:
                pending.add(ex.submit(score_task, t, self.spec))
                if len(pending) >= 2 * self.jobs:
                    break
            while pending:
                done, pending = wait(pending, return_when=FIRST_COMPLETED)
                for f in done:
                    yield f.result()
                    nxt = next(it, None)
                    if nxt is not None:
                        pending.add(ex.submit(score_task, nxt, self.spec))
        finally:
            for f in pending:
                f.cancel()

    def _run_dask(self, tasks: list[ScoreTask]) -> Iterator[dict]:
        from distributed import as_completed

        client = self.client
        nthreads = sum(client.nthreads().values()) or 1
        window = 2 * nthreads
        it = iter(tasks)
        ac = as_completed()
        n_out = 0
        try:
            for t in it:
                ac.add(
                    client.submit(score_task_one_thread, with_bytes(t), self._spec_f, pure=False)
                )
                n_out += 1
                if n_out >= window:
                    break
            for f in ac:
                res = f.result()
                f.release()
                yield res
                nxt = next(it, None)
                if nxt is not None:
                    ac.add(
                        client.submit(
                            score_task_one_thread, with_bytes(nxt), self._spec_f, pure=False
                        )
                    )
        finally:
            for f in list(ac.futures) if hasattr(ac, "futures") else []:
                f.cancel()


def run_tasks(
    tasks: list[ScoreTask],
    spec: ModelSpec,
    *,
    jobs: int = 1,
    scheduler: str | None = None,
    client=None,
) -> Iterator[dict]:
    """Score `tasks` with a :class:`Scorer` made for this call."""
    jobs = min(jobs, len(tasks)) if tasks else 1
    with Scorer(spec, jobs=jobs, scheduler=scheduler, client=client) as sc:
        yield from sc.run(tasks)


ProgressFn = Callable[[int, int, str], None]
