"""fracto batch end to end on tiny campaigns: outputs, resume, bad input, kill -9, Dask.

Outside references: the sine height map's Sq = A/√2 and Sa = 2A/π (analytic,
REFERENCES.md), the Student-t interval against scipy.stats, the Kelvin-Celsius
offset 273.15 K (SI Brochure, 9th ed., 2019), and the library's own
classify_image called directly (the batch must reproduce it, not recompute it).
"""

from __future__ import annotations

import csv
import errno
import json
import math
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from campaign_fixtures import SINE_A_UM, make_small_campaign, write_manifest

from fracto.cli import main


@pytest.fixture(scope="module")
def model_file(tmp_path_factory):
    from modes_textures import small_model

    from fracto.modes.model import save_model

    p = tmp_path_factory.mktemp("model") / "m.skops"
    save_model(small_model(), p)
    return str(p)


@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    return make_small_campaign(tmp_path_factory.mktemp("camp"))


def read_csv(path: Path) -> list[dict]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _batch(args, capsys=None):
    rc = main(["batch", *args, "--quiet", "--n-boot", "100"])
    out = capsys.readouterr() if capsys is not None else None
    return rc, out


def test_batch_outputs(tmp_path, campaign, model_file, capsys):
    out = tmp_path / "out"
    rc, o = _batch(
        [str(campaign), "--out", str(out), "--model", model_file, "--no-report"], capsys
    )
    assert rc == 0, o.err
    assert "7 scored, 0 failed, 0 skipped (already done)" in o.out
    rows = read_csv(out / "images.csv")
    manifest = read_csv(campaign)
    assert [r["path"] for r in rows] == [m["path"] for m in manifest]
    assert all(r["status"] == "ok" for r in rows)
    cols = rows[0].keys()
    for m in ("intergranular", "transgranular", "ductile", "fatigue", "unclassified"):
        assert {f"{m}_fraction", f"{m}_ci95_low", f"{m}_ci95_high"} <= set(cols)
    assert {"Sa_um", "Sq_um", "Sdr_percent", "Vm_um3_per_um2", "Spd_per_um2", "Std_deg"} <= set(
        cols
    )
    assert {"focus_laplacian_variance", "clipped_fraction", "noise_sigma", "fit_to_score"} <= set(
        cols
    )
    assert "toughness_MPa_sqrt_m" in cols and "notes" in cols
    # temperatures with units: 313.15 K = 40 °C (SI Brochure: T/°C = T/K - 273.15)
    temps = [float(r["temperature_C"]) for r in rows]
    assert temps[:6] == pytest.approx([-40, -40, 0, 0, 40, 40], abs=1e-9)
    # the cosine height map: analytic Sq = A/sqrt(2) (exact on whole sampled periods),
    # Sa = 2A/pi (the 32-sample midpoint sum of |cos| lies 0.16 % above 2/pi: 0.3 %)
    h = rows[-1]
    assert h["kind"] == "height"
    assert float(h["Sq_um"]) == pytest.approx(SINE_A_UM / math.sqrt(2), rel=1e-9)
    assert float(h["Sa_um"]) == pytest.approx(2 * SINE_A_UM / math.pi, rel=3e-3)
    # the tiny image model does not take height maps alone: the default height model does;
    # its fractions (modes + unclassified) partition the map's area
    names = ("intergranular", "transgranular", "ductile", "fatigue", "unclassified")
    assert sum(float(h[f"{n}_fraction"]) for n in names) == pytest.approx(1.0, abs=1e-6)
    # SEM rows: the same numbers as the library call itself
    from fracto.io import read_sem_image
    from fracto.modes.model import load_model
    from fracto.modes.pipeline import classify_image

    sem = read_sem_image(campaign.parent / rows[0]["path"], pixel_size="0.1um")
    res = classify_image(sem.image, load_model(model_file), pixel_size_um=0.1, seed=0, n_boot=100)
    d = res.fractions.to_dict()
    for m in ("intergranular", "ductile", "unclassified"):
        assert float(rows[0][f"{m}_fraction"]) == pytest.approx(d[m]["value"], abs=1e-12)
        assert float(rows[0][f"{m}_ci95_low"]) == pytest.approx(d[m]["ci95"][0], abs=1e-12)
    # overlays: downscaled JPEGs
    from PIL import Image

    for r in rows:
        with Image.open(out / r["overlay"]) as im:
            assert im.format == "JPEG" and max(im.size) <= 512
    # specimens.csv: Student-t interval of the mean (checked against scipy.stats)
    from scipy import stats

    spec = {r["specimen"]: r for r in read_csv(out / "specimens.csv")}
    assert list(spec) == ["SP-1", "SP-2", "SP-3"]
    sp1_rows = [r for r in rows if r["specimen"] == "SP-1"]  # two SEM images + the height map
    assert len(sp1_rows) == 3
    sp1 = [float(r["ductile_fraction"]) for r in sp1_rows]
    ci = stats.ttest_1samp(sp1, 0.0).confidence_interval(0.95)
    assert float(spec["SP-1"]["ductile_fraction_ci95_low"]) == pytest.approx(ci.low, rel=1e-9)
    assert float(spec["SP-1"]["ductile_fraction_ci95_high"]) == pytest.approx(ci.high, rel=1e-9)
    assert spec["SP-1"]["ductile_fraction_n"] == "3"
    assert float(spec["SP-1"]["toughness_MPa_sqrt_m_mean"]) == pytest.approx((50 + 60 + 50) / 3)
    assert float(spec["SP-1"]["temperature_C"]) == -40.0
    prov = json.loads((out / "provenance.json").read_text())
    from fracto import CAUTION, __version__

    assert prov["version"] == __version__ and prov["caution"] == CAUTION
    assert len(prov["model"]["sha256"]) == 64 and len(prov["settings_hash"]) == 64
    assert prov["seed"] == 0 and "numpy" in prov["library_versions"]
    tr = json.loads((out / "transition.json").read_text())
    assert "transition_temperature_C" in tr  # only 3 temperatures: not enough to fit, said so
    assert "transition temperature: not available" in o.out
    # a re-run scores nothing and writes the same rows
    rc, o2 = _batch(
        [str(campaign), "--out", str(out), "--model", model_file, "--no-report"], capsys
    )
    assert rc == 0 and "0 scored, 0 failed, 7 skipped (already done)" in o2.out
    assert read_csv(out / "images.csv") == rows


def test_bad_rows_and_duplicates(tmp_path, campaign, model_file, capsys):
    src = campaign.parent
    (tmp_path / "broken.png").write_bytes(b"not an image at all")
    for name in ("s00.png", "s01.png"):
        (tmp_path / name).write_bytes((src / name).read_bytes())
    m = write_manifest(
        tmp_path / "m.csv",
        ["path", "specimen", "temperature_C", "pixel_size_um", "orientation"],
        [
            ["s00.png", "A", "-20", "0.1", "T-L"],
            ["missing.png", "A", "-20", "0.1", "T-L"],
            ["broken.png", "B", "0", "0.1", "L-T"],
            ["s01.png", "B", "zero", "0.1", "L-T"],
            ["s00.png", "C", "20", "0.1", "T-L"],  # the same file again
            ["s01.png", "C", "20", "-3", "T-L"],
        ],
    )
    out = tmp_path / "out"
    rc, o = _batch([str(m), "--out", str(out), "--model", model_file, "--no-report"], capsys)
    assert rc == 0
    # counts are per manifest row: the duplicate row of s00.png counts as scored too
    assert "2 scored, 4 failed" in o.out
    assert "name the same file" in o.err
    rows = read_csv(out / "images.csv")
    assert len(rows) == 6
    st = [r["status"] for r in rows]
    assert st == ["ok", "error", "error", "error", "ok", "error"]
    assert "does not exist" in rows[1]["error"]
    assert "broken.png" in rows[2]["error"]
    assert "zero" in rows[3]["error"] and "not a number" in rows[3]["error"]
    assert "positive" in rows[5]["error"]
    assert rows[0]["ductile_fraction"] == rows[4]["ductile_fraction"] != ""
    assert rows[0]["orientation"] == "T-L"
    with sqlite3.connect(out / "results.sqlite") as c:
        keys = [k for (k,) in c.execute("SELECT key FROM results")]
    assert len(keys) == len(set(keys)) == 2  # s00 once (duplicate), broken.png as an error


@pytest.mark.parametrize(
    ("header", "row", "phrase"),
    [
        (["file", "specimen", "temperature_C"], ["a.png", "A", "1"], "no 'path' column"),
        (["path", "temperature_C"], ["a.png", "1"], "no 'specimen' column"),
        (
            ["path", "specimen", "temperature_C", "temperature"],
            ["a.png", "A", "1", "1C"],
            "more than one temperature",
        ),
        (["path", "specimen", "path"], ["a.png", "A", "b"], "twice"),
    ],
)
def test_bad_manifest_is_exit_2(tmp_path, model_file, capsys, header, row, phrase):
    m = write_manifest(tmp_path / "m.csv", header, [row])
    rc, o = _batch([str(m), "--out", str(tmp_path / "o"), "--model", model_file], capsys)
    assert rc == 2
    assert phrase in o.err and o.err.count("\n") == 1 and "Traceback" not in o.err


def test_missing_manifest_and_unwritable_out(tmp_path, campaign, model_file, capsys):
    rc, o = _batch([str(tmp_path / "nope.csv"), "--out", str(tmp_path / "o")], capsys)
    assert rc == 2 and "does not exist" in o.err
    (tmp_path / "afile").write_text("x")
    rc, o = _batch(
        [str(campaign), "--out", str(tmp_path / "afile"), "--model", model_file], capsys
    )
    assert rc == 2 and "is a file" in o.err and o.err.count("\n") == 1
    if os.geteuid() != 0:  # root writes anywhere; the permission case needs a normal user
        ro = tmp_path / "ro"
        ro.mkdir()
        ro.chmod(0o500)
        rc, o = _batch([str(campaign), "--out", str(ro), "--model", model_file], capsys)
        assert rc == 2 and "not writable" in o.err


def test_unwritable_output_folder_message(tmp_path, monkeypatch):
    from fracto.campaign.batch import check_output_folder
    from fracto.errors import FractoInputError

    def deny(self, data):
        raise PermissionError(errno.EACCES, "Permission denied")

    monkeypatch.setattr(Path, "write_bytes", deny)
    with pytest.raises(FractoInputError, match="not writable"):
        check_output_folder(tmp_path / "o")


def test_full_disk_stops_cleanly_and_resumes(tmp_path, campaign, model_file, capsys, monkeypatch):
    import fracto.io.safe as safe

    out = tmp_path / "out"
    real = safe.os.replace
    calls = {"n": 0}

    def replace(src, dst):
        calls["n"] += 1
        if calls["n"] == 4:  # the fourth atomic write finds the disk full
            raise OSError(errno.ENOSPC, "No space left on device")
        return real(src, dst)

    monkeypatch.setattr(safe.os, "replace", replace)
    rc, o = _batch(
        [str(campaign), "--out", str(out), "--model", model_file, "--no-report"], capsys
    )
    assert rc == 2 and "disk is full" in o.err and o.err.count("\n") == 1
    with sqlite3.connect(out / "results.sqlite") as c:
        assert c.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        n_stored = c.execute("SELECT COUNT(*) FROM results").fetchone()[0]
    assert n_stored == 3
    assert not list(out.rglob("*.part"))  # no half-written file left behind
    monkeypatch.setattr(safe.os, "replace", real)
    rc, o = _batch(
        [str(campaign), "--out", str(out), "--model", model_file, "--no-report"], capsys
    )
    assert rc == 0 and "4 scored, 0 failed, 3 skipped (already done)" in o.out
    assert [r["status"] for r in read_csv(out / "images.csv")] == ["ok"] * 7


def test_kill_9_mid_run_resumes_without_loss_or_duplicates(tmp_path, model_file, capsys):
    camp = make_small_campaign(tmp_path / "camp", n_sem=12)
    out = tmp_path / "out"
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)}
    cmd = [
        sys.executable,
        "-m",
        "fracto",
        "batch",
        str(camp),
        "--out",
        str(out),
        "--model",
        model_file,
        "--no-report",
        "--quiet",
        "--n-boot",
        "100",
    ]
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    db = out / "results.sqlite"
    deadline = time.time() + 120
    n = 0
    try:
        while time.time() < deadline and proc.poll() is None:
            if db.is_file():
                try:
                    with sqlite3.connect(db, timeout=1) as c:
                        n = c.execute("SELECT COUNT(*) FROM results").fetchone()[0]
                except sqlite3.OperationalError:
                    n = 0
                if n >= 3:
                    break
            time.sleep(0.05)
        assert proc.poll() is None, "the batch ended before it could be killed"
        os.kill(proc.pid, signal.SIGKILL)
    finally:
        proc.wait(30)
    assert proc.returncode == -signal.SIGKILL
    with sqlite3.connect(db) as c:
        assert c.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        n_killed = c.execute("SELECT COUNT(*) FROM results").fetchone()[0]
    assert 3 <= n_killed < 13
    rc, o = _batch([str(camp), "--out", str(out), "--model", model_file, "--no-report"], capsys)
    assert rc == 0
    assert f"{13 - n_killed} scored, 0 failed, {n_killed} skipped (already done)" in o.out
    rows = read_csv(out / "images.csv")
    assert [r["path"] for r in rows] == [r["path"] for r in read_csv(camp)]
    assert all(r["status"] == "ok" for r in rows)
    with sqlite3.connect(db) as c:
        keys = [k for (k,) in c.execute("SELECT key FROM results")]
        assert c.execute("SELECT COUNT(*) FROM manifest_rows").fetchone()[0] == 13
    assert len(keys) == len(set(keys)) == 13


def test_folder_source_and_jobs_2(tmp_path, campaign, model_file, capsys):
    import tifffile

    folder = tmp_path / "f"
    folder.mkdir()
    src = campaign.parent
    for name in ("s00.png", "s01.png", "sine.npy"):
        (folder / name).write_bytes((src / name).read_bytes())
    # a 16-bit TIFF is an SEM image, a float TIFF a height map (decided by sample type)
    from PIL import Image

    a = np.asarray(Image.open(src / "s02.png"), dtype=np.uint16) * 257
    tifffile.imwrite(folder / "grey16.tif", a)
    tifffile.imwrite(folder / "hmap.tif", np.load(src / "sine.npy").astype(np.float32))
    out = folder / "out"  # inside the scanned folder: never scanned itself
    rc, o = _batch(
        [str(folder), "--out", str(out), "--model", model_file, "--jobs", "2", "--no-report"],
        capsys,
    )
    assert rc == 0, o.err
    rows = {r["path"]: r for r in read_csv(out / "images.csv")}
    assert set(rows) == {"grey16.tif", "hmap.tif", "s00.png", "s01.png", "sine.npy"}
    assert rows["grey16.tif"]["kind"] == "sem" and rows["hmap.tif"]["kind"] == "height"
    assert rows["s00.png"]["specimen"] == "s00" and rows["s00.png"]["temperature_C"] == ""
    assert all(r["status"] == "ok" for r in rows.values())
    # jobs 2 gives the numbers of jobs 1 (same seed): compare with the first test's kind of run
    out1 = folder / "out1"
    rc, _ = _batch([str(folder), "--out", str(out1), "--model", model_file, "--no-report"], capsys)
    rows1 = {r["path"]: r for r in read_csv(out1 / "images.csv")}
    for p in rows:
        assert rows[p]["ductile_fraction"] == rows1[p]["ductile_fraction"]
        assert rows[p]["Sq_um"] == rows1[p]["Sq_um"]


def test_dask_local_cluster_matches_local_run(tmp_path, campaign, model_file):
    distributed = pytest.importorskip("distributed")
    from fracto.campaign.batch import run_batch

    local = run_batch(
        campaign, tmp_path / "local", model_path=model_file, report=False, n_boot=100
    )
    assert local.scored == 7
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    ) as cluster:
        with distributed.Client(cluster) as client:
            dk = run_batch(
                campaign,
                tmp_path / "dask",
                client=client,
                model_path=model_file,
                report=False,
                n_boot=100,
            )
    assert dk.scored == 7 and dk.failed == 0
    a = read_csv(tmp_path / "local" / "images.csv")
    b = read_csv(tmp_path / "dask" / "images.csv")
    assert [r["path"] for r in a] == [r["path"] for r in b]
    for ra, rb in zip(a, b, strict=True):
        for c in ("ductile_fraction", "intergranular_ci95_high", "Sa_um", "noise_sigma"):
            assert ra[c] == rb[c]


def test_unreachable_scheduler_is_one_sentence(tmp_path, campaign, model_file, capsys):
    pytest.importorskip("distributed")
    rc, o = _batch(
        [
            str(campaign),
            "--out",
            str(tmp_path / "o"),
            "--model",
            model_file,
            "--scheduler",
            "tcp://127.0.0.1:9",
            "--no-report",
        ],
        capsys,
    )
    assert rc == 2 and "Dask scheduler" in o.err


def test_ctrl_c_with_two_jobs_stops_cleanly_and_resumes(tmp_path, model_file, capsys):
    # Deterministic: once the results table exists, this test holds the database's
    # write lock, so the batch cannot store (and so cannot finish) before the Ctrl-C
    # arrives; the lock is let go after the signal and the batch stops by itself.
    n_sem = 16
    total = n_sem + 1
    camp = make_small_campaign(tmp_path / "camp", n_sem=n_sem)
    out = tmp_path / "out"
    env = {**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)}
    cmd = [
        sys.executable,
        "-m",
        "fracto",
        "batch",
        str(camp),
        "--out",
        str(out),
        "--model",
        model_file,
        "--no-report",
        "--quiet",
        "--n-boot",
        "100",
        "--jobs",
        "2",
    ]
    proc = subprocess.Popen(
        cmd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
    )
    db = out / "results.sqlite"
    deadline = time.time() + 120
    lock = None
    try:
        while time.time() < deadline and proc.poll() is None:
            if db.is_file():
                try:
                    c = sqlite3.connect(db, timeout=1, isolation_level=None)
                    c.execute("BEGIN IMMEDIATE")  # the write lock: no result stored from now
                    # the lock is taken as soon as the results table exists: with fast
                    # workers the whole batch can be stored within one polling interval
                    n_at_lock = c.execute("SELECT COUNT(*) FROM results").fetchone()[0]
                    lock = c
                    break
                except sqlite3.OperationalError:
                    pass  # no table yet, or the batch is writing: try again
            time.sleep(0.02)
        assert lock is not None, "the batch made no results database in time"
        assert n_at_lock < total, "the batch stored every result before the lock was taken"
        assert proc.poll() is None, "the batch ended with results still to store"
        proc.send_signal(signal.SIGINT)
        time.sleep(0.5)
    finally:
        if lock is not None:
            lock.execute("ROLLBACK")
            lock.close()
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    assert "run the same command again to resume" in err and "Traceback" not in err
    with sqlite3.connect(db) as c:
        assert c.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        n_stopped = c.execute("SELECT COUNT(*) FROM results").fetchone()[0]
    # at most the one result whose store was waiting on the lock was added after it
    assert n_at_lock <= n_stopped <= n_at_lock + 1 < total + 1
    rc, o = _batch([str(camp), "--out", str(out), "--model", model_file, "--no-report"], capsys)
    assert rc == 0
    assert f"{total - n_stopped} scored, 0 failed, {n_stopped} skipped (already done)" in o.out
    rows = read_csv(out / "images.csv")
    assert len(rows) == total and all(r["status"] == "ok" for r in rows)
    with sqlite3.connect(db) as c:
        keys = [k for (k,) in c.execute("SELECT key FROM results")]
    assert len(keys) == len(set(keys)) == total
