"""Default-model build: the data phase on several processes keeps the same regions."""

import numpy as np

from fracto.modes.default_model import _main, field_parts, image_field_part


def test_field_parts_do_not_depend_on_the_number_of_processes():
    # Each field's region subset has its own seeded generator, so two processes keep
    # the very regions one process keeps; features agree to float32 rounding
    # (summation order may follow memory alignment; common practice, no source).
    kw = {"seed": 0, "size": 160, "max_regions": 40, "progress": False}
    one, names1 = field_parts(image_field_part, 3, jobs=1, **kw)
    two, names2 = field_parts(image_field_part, 3, jobs=2, **kw)
    assert names1 == names2 and len(names1) == one[0][0].shape[1]
    assert [p[2] for p in one] == [p[2] for p in two]
    for (x1, y1, _), (x2, y2, _) in zip(one, two, strict=True):
        np.testing.assert_array_equal(y1, y2)
        np.testing.assert_allclose(x1, x2, rtol=1e-5, atol=1e-6)
        assert len(y1) <= 40


def test_bad_jobs_is_exit_status_2(capsys):
    assert _main(["--jobs", "0", "--out", "unused"]) == 2
    assert "--jobs must be at least 1" in capsys.readouterr().err
