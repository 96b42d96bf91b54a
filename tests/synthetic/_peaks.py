"""Peak-finding helper shared by the synthetic-spectra tests."""

import numpy as np
from scipy.signal import find_peaks


def strongest_peak(axis, y, lo, hi):
    """Position of the strongest local maximum of ``y`` with lo ≤ ν ≤ hi.

    The position is refined by a parabola through the top three points, so a
    2 cm⁻¹ grid still locates a band to a fraction of a point.
    """
    idx, _ = find_peaks(y)
    idx = idx[(axis[idx] >= lo) & (axis[idx] <= hi)]
    assert idx.size, f"no local maximum between {lo} and {hi} cm-1"
    i = idx[np.argmax(y[idx])]
    y0, y1, y2 = y[i - 1], y[i], y[i + 1]
    delta = 0.5 * (y0 - y2) / (y0 - 2 * y1 + y2)
    return float(axis[i] + delta * (axis[i + 1] - axis[i]))
