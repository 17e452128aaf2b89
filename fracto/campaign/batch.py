"""The whole batch: manifest -> store -> scoring -> CSV/JSON -> transition -> report.

:func:`run_batch` is what ``fracto batch`` calls. Order of writes for every
scored item: its thumbnail (atomic rename) first, then its result row (one
SQLite transaction), so a stored result always has its thumbnail and an
interrupted run loses at most the items in flight. The summary files are
rewritten from the store at the end of every run.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

from fracto.errors import FractoInputError

#: Folder of the overlay thumbnails inside the output folder.
OVERLAY_DIR = "overlays"


@dataclass(frozen=True)
class BatchSummary:
    """What a batch did and wrote."""

    n_rows: int
    scored: int
    failed: int
    skipped: int
    not_scored: int
    duplicates: dict
    outputs: dict
    transition: dict | None
    seconds: float
    messages: tuple[str, ...] = field(default_factory=tuple)

    def line(self) -> str:
        s = f"{self.scored} scored, {self.failed} failed, {self.skipped} skipped (already done)"
        if self.not_scored:
            s += f", {self.not_scored} not scored (label images)"
        return s


def check_output_folder(out: Path) -> None:
    """Create the output folder and make sure fracto can write into it (one sentence if not)."""
    try:
        out.mkdir(parents=True, exist_ok=True)
    except FileExistsError as exc:
        raise FractoInputError(f"The output path '{out}' exists and is not a folder.") from exc
    except OSError as exc:
        raise FractoInputError(
            f"The output folder '{out}' cannot be created ({exc.strerror})."
        ) from exc
    if not out.is_dir():
        raise FractoInputError(f"The output path '{out}' is not a folder.")
    probe = out / f".fracto-write-test-{os.getpid()}"
    try:
        probe.write_bytes(b"")
    except OSError as exc:
        raise FractoInputError(
            f"The output folder '{out}' is not writable ({exc.strerror})."
        ) from exc
    finally:
        with contextlib.suppress(OSError):
            probe.unlink()


def _sha256_file(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def default_settings(
    *, seed: int, n_boot: int, threshold: float | None, model_sha256: str
) -> dict:
    """The settings that decide a result (hashed into every store key)."""
    from fracto.campaign.runner import THUMBNAIL_PX

    return {
        "seed": int(seed),
        "n_boot": int(n_boot),
        "threshold": threshold,
        "banner": "auto",
        "model_sha256": model_sha256,
        "measure": {},  # fracto.surface.measure.measure_surface defaults
        "thumbnail_px": THUMBNAIL_PX,
    }


def _height_model(manifest, path, trust: bool):
    """The height model's path, sha256 and the model: the given one, else the default
    when the campaign holds height maps and it is found, else (None, None, None)."""
    from fracto.modes.heightview import default_height_model_path
    from fracto.modes.model import load_model, sha256_of
    from fracto.modes.pipeline import is_height_model

    if path is None:
        if not any(r.kind == "height" and r.problem is None for r in manifest.rows):
            return None, None, None
        try:
            path = default_height_model_path()
        except FractoInputError:
            return None, None, None
    p = Path(path)
    model = load_model(p, trust=trust)  # one sentence for a missing or bad file
    if not is_height_model(model):
        raise FractoInputError(
            f"'{p}' is not a height model (it classifies SEM images); give --height-model a "
            "model built with 'python -m fracto.modes.default_model --height'."
        )
    return p, sha256_of(p), model


def run_batch(
    source: str | os.PathLike,
    out_dir: str | os.PathLike,
    *,
    jobs: int = 1,
    scheduler: str | None = None,
    client=None,
    model_path: str | os.PathLike | None = None,
    height_model_path: str | os.PathLike | None = None,
    trust: bool = False,
    transition_temperature_C: float | None = None,
    report: bool = True,
    seed: int = 0,
    n_boot: int = 1000,
    threshold: float | None = None,
    progress: Callable[[int, int, str], None] | None = None,
) -> BatchSummary:
    """Score a campaign into `out_dir` and write its summaries.

    Parameters
    ----------
    source : path-like
        A manifest CSV or a folder of files (:mod:`fracto.campaign.manifest`).
    out_dir : path-like
        Output folder (created; an existing one is resumed into).
    jobs : int
        Local worker processes.
    scheduler : str, optional
        Address of a Dask scheduler (``tcp://host:8786``); overrides `jobs`.
    client : distributed.Client, optional
        An existing Dask client (used instead of `scheduler`).
    model_path : path-like, optional
        Mode model (default :func:`fracto.modes.model.default_model_path`).
    height_model_path : path-like, optional
        Height model for the height maps of the campaign (rows without an SEM
        image); default :func:`fracto.modes.heightview.default_height_model_path`
        when the campaign holds height maps and one is found, else their mode
        columns stay empty.
    trust : bool
        Load a model holding unexpected types.
    transition_temperature_C : float, optional
        The transition temperature; None = estimate it from the data.
    report : bool
        Write ``report.html``.
    seed, n_boot, threshold :
        Bootstrap seed and replicates; probability threshold (None: the model's).
    progress : callable, optional
        Called as ``progress(done, total, name)`` after each scored item.

    Returns
    -------
    BatchSummary
    """
    from fracto import __version__
    from fracto.campaign import summary as sm
    from fracto.campaign.manifest import duplicate_paths, load_campaign
    from fracto.campaign.runner import (
        ModelSpec,
        Scorer,
        ScoreTask,
        fraction_names,
        remember_model,
    )
    from fracto.campaign.store import DB_NAME, ResultStore, result_key, settings_hash
    from fracto.io.safe import write_bytes_atomic, write_json_atomic
    from fracto.io.sidecar import find_sidecar
    from fracto.modes.model import default_model_path, load_model, sha256_of

    t0 = time.perf_counter()
    if jobs < 1:
        raise FractoInputError(f"--jobs must be at least 1, not {jobs}.")
    out = Path(out_dir)
    manifest = load_campaign(source, exclude=out)
    mpath = Path(model_path) if model_path is not None else default_model_path()
    if not mpath.is_file():
        load_model(mpath, trust=trust)  # its one sentence for a missing file
    check_output_folder(out)
    (out / OVERLAY_DIR).mkdir(exist_ok=True)
    msha = sha256_of(mpath)
    hpath, hsha, hmodel = _height_model(manifest, height_model_path, trust)
    settings = default_settings(seed=seed, n_boot=n_boot, threshold=threshold, model_sha256=msha)
    global_hash = settings_hash(settings)
    manifest_id = hashlib.sha256(str(manifest.source.resolve()).encode()).hexdigest()

    # content hashes and keys
    info: dict[int, dict] = {}
    for r in manifest.rows:
        d = {"status": "error", "error": r.problem, "content_sha256": "", "key": None}
        if r.problem is None and r.kind == "labels":
            d.update(status="not scored", error="Ground-truth label image; not scored.")
        elif r.problem is None:
            try:
                sha = _sha256_file(r.file)
            except OSError as exc:
                d["error"] = f"The file '{r.path}' cannot be read ({exc.strerror})."
            else:
                side = find_sidecar(r.file)  # calibration sidecars change results too
                item_hash = settings_hash(
                    {
                        **settings,
                        "kind": r.kind,
                        "pixel_size_um": r.pixel_size_um,
                        "sidecar_sha256": _sha256_file(side) if side is not None else None,
                        # the height model decides the fractions of height maps
                        **({"height_model_sha256": hsha} if r.kind == "height" and hsha else {}),
                    }
                )
                d.update(
                    content_sha256=sha,
                    key=result_key(sha, item_hash, __version__),
                    item_hash=item_hash,
                    status=None,
                    error=None,
                )
        info[r.index] = d

    store = ResultStore(out / DB_NAME)
    try:
        keys = [d["key"] for d in info.values() if d["key"]]
        done = store.done_keys(keys)
        store.link_rows(
            manifest_id,
            [(r.index, r.path, r.specimen, info[r.index]["key"]) for r in manifest.rows],
        )
        tasks: list[ScoreTask] = []
        seen: set[str] = set()
        for r in manifest.rows:
            d = info[r.index]
            k = d["key"]
            if not k or k in done or k in seen:
                continue
            seen.add(k)
            tasks.append(
                ScoreTask(
                    key=k,
                    kind=r.kind,
                    name=r.path,
                    path=str(r.file),
                    pixel_size_um=r.pixel_size_um,
                    settings=settings,
                )
            )
        meta = {t.key: t for t in tasks}
        by_key = {d["key"]: d for d in info.values() if d["key"]}
        hspec = ModelSpec(sha256=hsha, path=str(hpath), trust=trust) if hpath else None
        spec = ModelSpec(sha256=msha, path=str(mpath), trust=trust, height=hspec)
        n_done = 0
        new_ok: set[str] = set()
        scorer = Scorer(spec, jobs=min(jobs, len(tasks)) or 1, scheduler=scheduler, client=client)
        try:
            if scorer.kind == "serial":
                # jobs=1 scores in this process with these very objects
                remember_model(spec, load_model(mpath, trust=trust), hmodel)
            # with workers, one of them tells the classes: loading the model here too
            # would slow their start
            facts = scorer.model_facts()
            names = fraction_names(facts)
            for res in scorer.run(tasks):
                t = meta[res["key"]]
                if res["thumbnail"] is not None:
                    write_bytes_atomic(out / OVERLAY_DIR / f"{t.key[:24]}.jpg", res["thumbnail"])
                d0 = by_key[t.key]
                store.put_result(
                    t.key,
                    content_sha256=d0["content_sha256"],
                    settings_hash=d0["item_hash"],
                    tool_version=__version__,
                    kind=t.kind,
                    status=res["status"],
                    error=res["error"],
                    result=res["result"],
                    seconds=res["seconds"],
                )
                if res["status"] == "ok":
                    new_ok.add(t.key)
                n_done += 1
                if progress is not None:
                    progress(n_done, len(tasks), t.name)
        finally:
            scorer.close()
        stored = store.get_results(keys)
    finally:
        store.close()

    # per-row state
    rowstate: dict[int, dict] = {}
    overlays: dict[int, str] = {}
    scored = failed = skipped = not_scored = 0
    for r in manifest.rows:
        d = info[r.index]
        k = d["key"]
        if k and k in stored:
            s = stored[k]
            rowstate[r.index] = {**s, "content_sha256": d["content_sha256"]}
            if s["status"] == "ok":
                ov = out / OVERLAY_DIR / f"{k[:24]}.jpg"
                if ov.is_file():
                    overlays[r.index] = f"{OVERLAY_DIR}/{ov.name}"
                if k in done:
                    skipped += 1
                else:
                    scored += 1
            else:
                failed += 1
        elif k:  # not stored: the run stopped before it (should not happen on a normal end)
            rowstate[r.index] = {
                "status": "error",
                "error": "Not scored in this run.",
                "content_sha256": d["content_sha256"],
            }
            failed += 1
        else:
            rowstate[r.index] = {"status": d["status"], "error": d["error"], "result": None}
            if d["status"] == "not scored":
                not_scored += 1
            else:
                failed += 1

    rows, columns = sm.image_rows(manifest, rowstate, fraction_names=names, overlays=overlays)
    specimens, spec_cols = sm.specimen_rows(rows, columns, manifest)
    dups = duplicate_paths(manifest)
    outputs = {
        "images": out / "images.csv",
        "specimens": out / "specimens.csv",
        "provenance": out / "provenance.json",
        "database": out / DB_NAME,
        "overlays": out / OVERLAY_DIR,
    }
    sm.write_csv(outputs["images"], rows, columns)
    sm.write_csv(outputs["specimens"], specimens, spec_cols)
    counts = {
        "rows": len(manifest.rows),
        "scored": scored,
        "failed": failed,
        "skipped_already_done": skipped,
        "not_scored": not_scored,
        "duplicate_files": {k: v for k, v in dups.items()},
    }
    run = {"jobs": jobs, "scheduler": scheduler or (str(client) if client is not None else None)}
    prov = sm.provenance(
        manifest=manifest,
        model_path=mpath,
        model_sha256=msha,
        model=facts,
        settings=settings,
        settings_hash=global_hash,
        seed=seed,
        run=run,
        counts=counts,
    )
    prov["height_model"] = (
        {"path": str(hpath), "sha256": hsha, "used_for": "height maps without an SEM image"}
        if hpath
        else None
    )
    prov["manifest"]["sha256"] = (
        _sha256_file(manifest.source) if manifest.source.is_file() else None
    )
    write_json_atomic(outputs["provenance"], prov)

    from fracto.campaign.transition import analyse_campaign

    try:
        transition = analyse_campaign(
            rows, transition_temperature_C=transition_temperature_C, seed=seed
        )
    except FractoInputError as exc:  # too few temperatures: the scores still stand
        transition = {
            "transition_temperature_C": transition_temperature_C,
            "transition_estimated": False,
            "transition_basis": None,
            "fits": {},
            "available": False,
            "note": str(exc),
        }
    outputs["transition"] = out / "transition.json"
    write_json_atomic(outputs["transition"], transition)
    if report:
        from fracto.campaign.report import write_report

        ov_paths = {rows[i]["path"]: out / p for i, p in overlays.items()}
        outputs["report"] = write_report(
            out,
            images=rows,
            specimens=specimens,
            transition=transition,
            provenance=prov,
            overlays=ov_paths,
        )
    messages = []
    for _path, lines in dups.items():
        messages.append(
            f"Manifest lines {', '.join(map(str, lines))} name the same file; it is scored once "
            "and listed on each line."
        )
    return BatchSummary(
        n_rows=len(manifest.rows),
        scored=scored,
        failed=failed,
        skipped=skipped,
        not_scored=not_scored,
        duplicates=dups,
        outputs={k: Path(v) for k, v in outputs.items()},
        transition=transition,
        seconds=time.perf_counter() - t0,
        messages=tuple(messages),
    )
