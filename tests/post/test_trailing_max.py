"""The sliding maximum of the voxel-grid SAR procedure (numpy doublings) equals scipy's
``scipy.ndimage.maximum_filter1d`` with the trailing window it replaced (scipy as the outside reference)."""
import numpy as np
import pytest
from scipy.ndimage import maximum_filter1d

from bodysweep.workflow.post.sar_average import trailing_max


@pytest.mark.parametrize("w", [1, 2, 4, 8, 16, 64])
@pytest.mark.parametrize("axis", [0, 1, 2])
def test_equals_scipy_trailing_window(w, axis):
    rng = np.random.default_rng(w * 3 + axis)
    a = rng.normal(size=(13, 9, 21))
    a[rng.random(a.shape) < 0.3] = -np.inf  # the procedure's empty cells
    ref = maximum_filter1d(a, w, axis=axis, mode="constant", cval=-np.inf, origin=(w - 1) - w // 2)
    got = trailing_max(a, w, axis)
    assert np.array_equal(got, ref)  # exact: a maximum rounds nothing
    assert np.array_equal(a, np.where(np.isfinite(a), a, -np.inf))  # input untouched


def test_window_not_a_power_of_two_is_refused():
    with pytest.raises(ValueError):
        trailing_max(np.zeros(4), 3, 0)
