"""Which reader a spectrum file needs, and one entry point for both."""

from __future__ import annotations

import os
from pathlib import Path
from typing import Iterator

from registry.errors import FormatError, InputError
from registry.spectra.formats.csv_matrix import iter_csv_spectra
from registry.spectra.formats.jcamp import read_jcamp
from registry.spectra.record import SpectrumRecord

JCAMP_EXTENSIONS = {".jdx", ".dx", ".jcamp", ".jcm"}
CSV_EXTENSIONS = {".csv", ".tsv"}


def detect_format(path) -> str:
    """Return "jcamp" or "csv" for a spectrum file.

    Known extensions decide (.jdx/.dx/.jcamp/.jcm → jcamp, .csv/.tsv → csv);
    otherwise (.txt, no extension, ...) the first non-blank bytes decide: a
    line starting with ``##`` means JCAMP-DX, a first line with a comma or tab
    means CSV.

    Raises
    ------
    FormatError
        When neither applies.
    """
    suffix = Path(path).suffix.lower()
    if suffix in JCAMP_EXTENSIONS:
        return "jcamp"
    if suffix in CSV_EXTENSIONS:
        return "csv"
    with open(path, "rb") as handle:
        head = handle.read(4096)
    text = head.decode("latin-1").lstrip("\ufeff\xef\xbb\xbf \t\r\n\x1a")
    if text.startswith("##"):
        return "jcamp"
    first_line = text.split("\n", 1)[0]
    if "," in first_line or "\t" in first_line:
        return "csv"
    raise FormatError("cannot tell the format: neither a JCAMP-DX label (##) nor a CSV header "
                      "on the first line", file=os.fspath(path), line=1)


def read_spectra_file(path, format: str = "auto", **kw) -> Iterator[list[SpectrumRecord]]:
    """Yield the spectra of a file in batches of records.

    A JCAMP-DX file gives one batch (all its blocks); a CSV file one batch per
    chunk of :func:`iter_csv_spectra`.  ``kw`` goes to the reader.
    """
    kind = detect_format(path) if format == "auto" else format
    if kind == "jcamp":
        yield read_jcamp(path, **kw)
    elif kind == "csv":
        for chunk in iter_csv_spectra(path, **kw):
            yield chunk.records()
    else:
        raise InputError(f"unknown format {format!r}; use 'auto', 'jcamp' or 'csv'",
                         field="format")
