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

Height maps are measured with :func:`fracto.surface.measure.measure_surface`.
They are also classified when the model takes height maps alone (a model with
``height_only_ = True`` and a library function
``fracto.modes.pipeline.classify_height_map``); otherwise their mode columns
stay empty.
"""

from __future__ import annotations

import io
import os
import tempfile
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


def _model(spec: ModelSpec):
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
        _MODELS.clear()
        _MODELS[spec.sha256] = m
    return m


def init_worker(spec: ModelSpec) -> None:
    """Process-pool initializer: load the model once per worker."""
    import signal

    # Ctrl-C is handled once, by the main process (it stops the pool and keeps what is
    # stored); workers ignore it so no traceback of theirs reaches the user.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    _model(spec)


def fraction_names(model) -> tuple[str, ...]:
    """Fraction names reported for a model: fracto's modes, extra classes, unclassified."""
    classes = [str(c) for c in model.classes_]
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
    lo, hi = np.percentile(img[finite], [1, 99]) if finite.any() else (0.0, 1.0)
    grey = np.clip((np.where(finite, img, lo) - lo) / max(hi - lo, 1e-12), 0, 1)
    # downscale first (grey by area averaging, labels by nearest), then colour
    ny, nx = grey.shape
    f = max(ny, nx) / max_side_px
    size = (max(1, round(nx / f)), max(1, round(ny / f))) if f > 1 else (nx, ny)
    g = Image.fromarray(np.round(grey * 255).astype(np.uint8), "L")
    if size != (nx, ny):
        g = g.resize(size, Image.Resampling.BOX)
    rgb = np.repeat((np.asarray(g, dtype=np.float32) / 255.0)[..., None], 3, axis=2)
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
    thumb = thumbnail_jpeg(
        img, res.label_map, res.classes, max_side_px=int(st.get("thumbnail_px", THUMBNAIL_PX))
    )
    return out, thumb


def _score_height(path: Path, task: ScoreTask, model) -> tuple[dict, bytes]:
    from fracto.io import PixelSize, read_height_map
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
        "mode_note": "the model does not classify height maps alone",
    }
    label_map, classes = None, ()
    import fracto.modes.pipeline as pipeline

    classify_height = getattr(pipeline, "classify_height_map", None)
    if getattr(model, "height_only_", False) and classify_height is not None:
        res = classify_height(
            z,
            model,
            pixel_size_um=hm.pixel_size.x_um if hm.pixel_size.calibrated else None,
            seed=int(st.get("seed", 0)),
            n_boot=int(st.get("n_boot", 1000)),
        )
        out["fractions"] = _fractions_dict(res, fraction_names(model))
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
        ``seconds``.
    """
    t0 = time.perf_counter()
    try:
        model = _model(spec)
        if task.data is not None:
            with tempfile.TemporaryDirectory(prefix="fracto-item-") as d:
                p = Path(d) / Path(task.name).name
                p.write_bytes(task.data)
                if task.sidecar is not None:
                    (p.parent / (p.name + ".json")).write_bytes(task.sidecar)
                result, thumb = _score(p, task, model)
        else:
            result, thumb = _score(Path(task.path), task, model)
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
    }


def _score(path: Path, task: ScoreTask, model) -> tuple[dict, bytes]:
    if task.kind == "sem":
        return _score_sem(path, task, model)
    if task.kind == "height":
        return _score_height(path, task, model)
    raise FractoInputError(f"'{task.name}' is of kind '{task.kind}', which batch does not score.")


# ---------------------------------------------------------------- executors


def run_serial(tasks: Iterable[ScoreTask], spec: ModelSpec) -> Iterator[dict]:
    """Score the tasks one after another in this process."""
    for t in tasks:
        yield score_task(t, spec)


def run_pool(tasks: Iterable[ScoreTask], spec: ModelSpec, *, jobs: int) -> Iterator[dict]:
    """Score the tasks in `jobs` local processes, yielding results as they finish.

    At most ``2 * jobs`` tasks are queued at a time. On an exception in the
    consumer (Ctrl-C included) pending tasks are cancelled.
    """
    it = iter(tasks)
    import multiprocessing

    # "spawn", not fork: a parent that has already run OpenMP code (a scikit-learn
    # prediction in this process) can leave forked children deadlocked.
    ex = ProcessPoolExecutor(
        max_workers=jobs,
        mp_context=multiprocessing.get_context("spawn"),
        initializer=init_worker,
        initargs=(spec,),
    )
    pending = set()
    try:
        for t in it:
            pending.add(ex.submit(score_task, t, spec))
            if len(pending) >= 2 * jobs:
                break
        while pending:
            done, pending = wait(pending, return_when=FIRST_COMPLETED)
            for f in done:
                yield f.result()
                nxt = next(it, None)
                if nxt is not None:
                    pending.add(ex.submit(score_task, nxt, spec))
    finally:
        for f in pending:
            f.cancel()
        ex.shutdown(wait=True, cancel_futures=True)


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


def run_dask(
    tasks: Iterable[ScoreTask],
    spec: ModelSpec,
    *,
    client,
    window: int | None = None,
) -> Iterator[dict]:
    """Score the tasks on a Dask cluster; file and model bytes travel with the work.

    Parameters
    ----------
    tasks : iterable of ScoreTask
        Tasks with local paths; their bytes are attached here, a few at a time.
    spec : ModelSpec
        The model (its bytes are scattered to every worker once).
    client : distributed.Client
    window : int, optional
        Tasks in flight (default two per worker thread).
    """
    from dataclasses import replace

    from distributed import as_completed

    if spec.data is None:
        spec = replace(spec, data=Path(spec.path).read_bytes(), path=None)
    nthreads = sum(client.nthreads().values()) or 1
    window = window or 2 * nthreads
    spec_f = client.scatter(spec, broadcast=True)
    it = iter(tasks)
    ac = as_completed()
    n_out = 0
    try:
        for t in it:
            ac.add(client.submit(score_task, with_bytes(t), spec_f, pure=False))
            n_out += 1
            if n_out >= window:
                break
        for f in ac:
            res = f.result()
            f.release()
            yield res
            nxt = next(it, None)
            if nxt is not None:
                ac.add(client.submit(score_task, with_bytes(nxt), spec_f, pure=False))
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
    """Pick the executor: a Dask client/scheduler, a process pool, or this process."""
    if client is not None:
        yield from run_dask(tasks, spec, client=client)
    elif scheduler:
        c = connect_dask(scheduler)
        try:
            yield from run_dask(tasks, spec, client=c)
        finally:
            c.close()
    elif jobs > 1 and len(tasks) > 1:
        yield from run_pool(tasks, spec, jobs=min(jobs, len(tasks)))
    else:
        yield from run_serial(tasks, spec)


ProgressFn = Callable[[int, int, str], None]
