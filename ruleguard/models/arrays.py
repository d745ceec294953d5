"""Small array steps shared by the models, the analysis and the rules.

``np.unique`` imports ``numpy.ma`` on first use (its masked-array test),
about 10 ms of a pre-commit hook's start; :func:`sorted_unique` gives the
same array for the 1-d float grids this project merges, without it.
"""

from __future__ import annotations

import numpy as np


def sorted_unique(values) -> np.ndarray:
    """``np.unique(values)`` for 1-d real data: sorted, repeats dropped.

    The same steps as numpy's own (a copy sorted in place by the default
    sort, then each element kept where it differs from the one before it;
    NaNs, sorted last, kept once), so the result is the same array, element
    for element and sign of zero included.
    """
    out = np.array(values, dtype=float).ravel()
    out.sort()
    n = out.size
    if n < 2:
        return out
    keep = np.empty(n, dtype=bool)
    keep[0] = True
    if np.isnan(out[-1]):
        first_nan = int(np.searchsorted(out, out[-1], side="left"))
        if first_nan > 1:  # all NaN: only the first is kept
            np.not_equal(out[1:first_nan], out[: first_nan - 1], out=keep[1:first_nan])
        keep[first_nan] = True
        keep[first_nan + 1:] = False
    else:
        np.not_equal(out[1:], out[:-1], out=keep[1:])
    return out[keep]
