"""Shared fixtures for the spectrum format tests."""

import numpy as np
import pytest

from registry.spectra.record import SpectrumRecord


@pytest.fixture
def ir_record():
    """A smooth synthetic absorbance spectrum on a 4 cm⁻¹-spaced axis (test data only)."""
    x = np.linspace(650.0, 4000.0, 838)
    bands = [(2960, 30, 0.9), (2870, 25, 0.5), (1460, 20, 0.4), (1380, 10, 0.3), (730, 8, 0.2)]
    y = 0.02 + sum(h * np.exp(-0.5 * ((x - c) / w) ** 2) for c, w, h in bands)
    return SpectrumRecord("FUEL-0001", x, y.astype(np.float32),
                          metadata={"instrument": "bench IR 2", "operator": "a.lee",
                                    "grade": "RON95", "acquired_at": "2026-01-05T10:20:30+00:00"})
