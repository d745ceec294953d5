"""ruleguard.models.arrays against the numpy routines it stands in for."""

import numpy as np
from hypothesis import example, given, settings
from hypothesis import strategies as st

from ruleguard.models.arrays import sorted_unique

_FLOATS = st.floats(allow_nan=True, allow_infinity=True) | st.sampled_from([0.0, -0.0, 1.0])


def _same(a: np.ndarray, b: np.ndarray) -> bool:
    """Equal element for element, NaN and the sign of zero included."""
    return a.dtype == b.dtype and a.shape == b.shape and a.tobytes() == b.tobytes()


@settings(max_examples=500, deadline=None)
@given(st.lists(_FLOATS, max_size=40))
@example([float("nan")] * 3)  # all NaN (found by hypothesis in CI)
@example([1.0, float("nan"), float("nan")])
def test_sorted_unique_is_numpy_unique(values):
    # reference: numpy.unique (sorted, repeats dropped, NaNs kept once)
    w = np.array(values, dtype=float)
    assert _same(sorted_unique(w), np.unique(w))


def test_sorted_unique_on_grids():
    # reference: numpy.unique, on grids like the ones merged here
    rng = np.random.default_rng(1)
    for size in (0, 1, 2, 5, 50, 400, 5000):
        w = np.round(rng.uniform(0.0, 30.0, size), 1)
        assert _same(sorted_unique(w), np.unique(w))
        merged = np.concatenate([np.geomspace(1.0, 1e4, size + 2), w, [np.nan, np.nan]])
        assert _same(sorted_unique(merged), np.unique(merged))
    assert _same(sorted_unique([3, 1, 3]), np.unique(np.array([3.0, 1.0, 3.0])))
