"""One spectrum as read from a file, before it is stored."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field, replace

import numpy as np

from registry.errors import InputError
from registry.spectra.axes import (WAVENUMBER, canonical_x_unit, convert_axis_to_wavenumber,
                                   normalise_ascending)


def content_sha256(x, y) -> str:
    """SHA-256 hex digest identifying a spectrum's content.

    The bytes hashed are, with nothing between them:

    1. the axis as little-endian IEEE-754 float64 (``"<f8"``), C order;
    2. the ordinates as little-endian IEEE-754 float32 (``"<f4"``), C order.

    Both arrays have the same length ``n``, so the ``12·n`` bytes split
    unambiguously.  The axis unit is not part of this digest (see
    :func:`registry.spectra.axes.axis_sha256` for the axis identity).
    """
    axis = np.ascontiguousarray(x, dtype="<f8")
    data = np.ascontiguousarray(y, dtype="<f4")
    if axis.ndim != 1 or data.shape != axis.shape:
        raise InputError(f"axis shape {axis.shape} and data shape {data.shape} differ",
                         field="y")
    digest = hashlib.sha256(axis.tobytes())
    digest.update(data.tobytes())
    return digest.hexdigest()


def content_sha256_rows(x, Y) -> list[str]:
    """:func:`content_sha256` of each row of ``Y`` (all on axis ``x``), hashing the axis once."""
    axis = np.ascontiguousarray(x, dtype="<f8")
    data = np.ascontiguousarray(Y, dtype="<f4")
    if axis.ndim != 1 or data.ndim != 2 or data.shape[1] != axis.size:
        raise InputError(f"axis shape {axis.shape} and data shape {data.shape} differ", field="y")
    prefix = hashlib.sha256(axis.tobytes())
    out = []
    for row in data:
        digest = prefix.copy()
        digest.update(row.tobytes())
        out.append(digest.hexdigest())
    return out


@dataclass
class SpectrumRecord:
    """A spectrum with its sample identity and where it came from.

    Attributes
    ----------
    sample_id : str
        Identity of the measured sample.
    x : ndarray of float64, shape (n,)
        Axis, strictly ascending once read through a reader of this package.
    y : ndarray of float32, shape (n,)
        Absorbance.
    x_unit : str
        "1/CM" (the registry's canonical unit), "MICROMETERS" or "NANOMETERS"
        as read; :meth:`to_wavenumber` converts.
    metadata : dict
        ``instrument``, ``acquired_at`` (ISO-8601 string or datetime),
        ``operator``, ``grade``, ``title`` when known, plus other headers kept
        by the reader.
    source_file : str or None
        File (or label) the spectrum was read from.
    source_line : int or None
        1-based line where this spectrum starts in that file.
    """

    sample_id: str
    x: np.ndarray
    y: np.ndarray
    x_unit: str = WAVENUMBER
    metadata: dict = field(default_factory=dict)
    source_file: str | None = None
    source_line: int | None = None

    def __post_init__(self):
        self.x = np.asarray(self.x, dtype=np.float64)
        self.y = np.asarray(self.y, dtype=np.float32)
        self.x_unit = canonical_x_unit(self.x_unit, file=self.source_file,
                                       line=self.source_line)
        if self.x.ndim != 1 or self.y.shape != self.x.shape:
            raise InputError(
                f"spectrum {self.sample_id!r}: axis shape {self.x.shape} and data shape "
                f"{self.y.shape} differ", file=self.source_file, line=self.source_line)

    def content_sha256(self) -> str:
        """Digest of axis and data; see :func:`content_sha256`."""
        return content_sha256(self.x, self.y)

    def to_wavenumber(self) -> "SpectrumRecord":
        """Return a copy on an ascending 1/CM axis (the data are reordered, not interpolated)."""
        if self.x_unit == WAVENUMBER:
            return replace(self, x=self.x.copy(), y=self.y.copy(), metadata=dict(self.metadata))
        x, y = normalise_ascending(convert_axis_to_wavenumber(self.x, self.x_unit), self.y,
                                   file=self.source_file, line=self.source_line)
        return replace(self, x=x, y=y, x_unit=WAVENUMBER, metadata=dict(self.metadata))
