"""Default-model build: the data phase on several processes keeps the same regions."""

import numpy as np

from fracto.modes.default_model import _main, field_parts, image_field_part


def test_field_parts_do_not_depend_on_the_number_of_processes():
    # Each field's region subset has its own seeded generator, so two processes keep
    # the very regions one process keeps; features agree to float32 rounding
    # (summation order may follow memory alignment; common practice, no source).
    kw = {"seed": 0, "size": 160, "max_regions": 40, "progress": False}
    one = field_parts(image_field_part, 3, jobs=1, **kw)
    two = field_parts(image_field_part, 3, jobs=2, **kw)
    assert one.names == two.names and len(one.names) == one.X.shape[1]
    assert one.images == two.images
    np.testing.assert_array_equal(one.y, two.y)
    np.testing.assert_array_equal(one.groups, two.groups)
    np.testing.assert_allclose(one.X, two.X, rtol=1e-5, atol=1e-6)
    assert np.bincount(one.groups).max() <= 40


def test_bad_jobs_is_exit_status_2(capsys):
    assert _main(["--jobs", "0", "--out", "unused"]) == 2
    assert "--jobs and --regions-per-field must be at least 1" in capsys.readouterr().err
    assert _main(["--regions-per-field", "0", "--out", "unused"]) == 2


def test_fit_threads_do_not_change_the_model_and_predictions_keep_one_thread(tmp_path):
    # HistGradientBoosting sums each feature's histogram on one thread, so the
    # number of OpenMP threads must not change the trees (property of the
    # scikit-learn implementation; checked here, common practice, no source).
    from fracto.classes import MODES
    from fracto.modes.model import load_model
    from fracto.modes.training import train_and_save

    ts = field_parts(image_field_part, 4, seed=0, size=192, max_regions=60, jobs=1, progress=False)
    probas = []
    for threads in (None, 2):
        path = tmp_path / f"m{threads}.skops"
        train_and_save(
            ts,
            path,
            classes=MODES,
            model_params={"n_threads": 1, "max_iter": 20},
            fit_threads=threads,
            n_splits=2,
            importance=False,
        )
        model = load_model(path)
        assert model.n_threads == 1
        probas.append(model.predict_proba(ts.X))
    np.testing.assert_array_equal(probas[0], probas[1])


def test_the_card_command_names_every_setting():
    from fracto.modes.default_model import build_command

    cmd = build_command(288, 512, 0, 4, 300, height=False)
    assert cmd.endswith("--fields 288 --size 512 --seed 0 --cv 4 --regions-per-field 300")
    assert "--height" in build_command(96, 512, 0, 4, 500, height=True)


def _part_or_refused(i, seed, size, max_regions):
    """Field 1 is refused (as a too-coarse field is); the others give two regions."""
    import numpy as np

    if i == 1:
        return None, np.empty(0, dtype=object), f"f{i}", None
    X = np.full((2, 3), float(i), np.float32)
    return X, np.array(["ductile", "fatigue"], dtype=object), f"f{i}", ["a", "b", "c"]


def test_a_refused_field_is_skipped_and_named():
    import numpy as np

    ts = field_parts(
        _part_or_refused, 3, seed=0, size=64, max_regions=None, jobs=1, progress=False
    )
    assert ts.summary["fields_without_regions"] == ["f1"]
    assert ts.X.shape == (4, 3) and ts.images == ["f0", "f2"]
    np.testing.assert_array_equal(ts.X[:, 0], [0, 0, 2, 2])
    assert list(ts.names) == ["a", "b", "c"]
