"""Spectrum file formats: JCAMP-DX 4.24 and CSV (wide and long form).

Entry points
------------
- :func:`detect_format` — "jcamp" or "csv" from the extension and first bytes.
- :func:`read_jcamp` / :func:`write_jcamp` — JCAMP-DX reader and writer.
- :func:`iter_csv_spectra` / :func:`write_csv_spectra` — streaming CSV reader, writer.
- :func:`read_spectra_file` — either reader, yielding batches of records.
"""

from registry.spectra.formats.csv_matrix import (CsvChunk, iter_csv_spectra,
                                                 write_csv_spectra)
from registry.spectra.formats.detect import detect_format, read_spectra_file
from registry.spectra.formats.jcamp import JCAMP_FORMS, normalise_label, read_jcamp, write_jcamp

#: The spectrum file formats the registry reads and writes.
FILE_FORMATS = ("jcamp", "csv")

__all__ = [
    "CsvChunk", "FILE_FORMATS", "JCAMP_FORMS", "detect_format", "iter_csv_spectra",
    "normalise_label", "read_jcamp",
    "read_spectra_file", "write_csv_spectra", "write_jcamp",
]
