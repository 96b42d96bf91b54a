"""Spectra as CSV: a streaming reader and a writer.

Wide form (one spectrum per row)::

    sample_id,instrument,acquired_at,operator,grade,4000.0,3998.0,...
    S-001,FTIR-2,2024-03-05T14:22:01+00:00,ann,RON95,0.0123,0.0131,...

The header cells that parse as numbers are the axis; every other column
except ``sample_id`` is metadata.  Long form (one point per row)::

    sample_id,x,y
    S-001,4000.0,0.0123

where the rows of one sample must be contiguous (so the file can be
streamed); extra columns are metadata taken from the sample's first row.
Comma or tab separated (detected from the header line).

Line numbers in errors are 1-based file lines (the header is line 1); they
assume no quoted field spans several lines.
"""

from __future__ import annotations

import csv
import math
import os
import re
import warnings
from dataclasses import dataclass
from datetime import date, datetime
from typing import Iterable, Iterator

import numpy as np
import pandas as pd

from registry.errors import FormatError, InputError, all_of
from registry.spectra.axes import WAVENUMBER, canonical_x_unit, normalise_ascending
from registry.spectra.record import SpectrumRecord

_NUMBER = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?\Z")
_LONG_FORM_ROWS = 65536  # rows per pandas chunk in long form
# pandas builds one DataFrame (one array per column) per chunk it parses; with
# ~2,000 columns that fixed cost made 1,000-row chunks ~1.5x slower than one
# whole-file read (tests/benchmarks/bench_csv_parse.py).  Parse in blocks of
# about this many bytes of float64 cells and cut them into chunk_rows chunks.
_PARSE_BYTES = 64 * 2**20


class _Recheck(Exception):
    """A block parsed straight to float32 holds a cell that needs the checked parse."""


@dataclass
class CsvChunk:
    """Up to ``chunk_rows`` spectra sharing one axis.

    Attributes
    ----------
    axis : ndarray of float64, shape (n,)
        Strictly ascending.
    Y : ndarray of float32, shape (m, n)
        One spectrum per row, columns in ``axis`` order.
    sample_ids : list of str
    metadata : list of dict
        Non-empty metadata cells of each row.
    first_line : list of int
        File line where each spectrum starts.
    x_unit : str
    source_file : str or None
    """

    axis: np.ndarray
    Y: np.ndarray
    sample_ids: list
    metadata: list
    first_line: list
    x_unit: str = WAVENUMBER
    source_file: str | None = None

    def __len__(self) -> int:
        return len(self.sample_ids)

    def records(self) -> list[SpectrumRecord]:
        """The chunk as one :class:`SpectrumRecord` per row (rows share ``axis``)."""
        return [SpectrumRecord(sample_id=sid, x=self.axis, y=self.Y[i], x_unit=self.x_unit,
                               metadata=dict(meta), source_file=self.source_file,
                               source_line=line)
                for i, (sid, meta, line) in enumerate(zip(self.sample_ids, self.metadata,
                                                          self.first_line))]


def _is_number(text: str) -> bool:
    return bool(_NUMBER.match(text.strip())) and math.isfinite(float(text))


class _Header:
    """The header line: delimiter, columns and which of them are the axis."""

    def __init__(self, path, label: str, delimiter: str | None, sample_id_column: str):
        self.file = label
        try:
            with open(path, encoding="utf-8-sig", newline="") as handle:
                line = handle.readline()
        except UnicodeDecodeError as exc:
            raise FormatError(f"header is not UTF-8 text ({exc.reason})", file=label,
                              line=1) from None
        if not line.strip():
            raise FormatError("empty file or empty header line", file=label, line=1)
        if delimiter is None:
            delimiter = "\t" if line.count("\t") > line.count(",") else ","
        if delimiter not in (",", "\t", ";"):
            raise InputError(f"unsupported delimiter {delimiter!r}", field="delimiter")
        self.delimiter = delimiter
        try:
            cells = next(csv.reader([line.rstrip("\r\n")], delimiter=delimiter))
        except (csv.Error, StopIteration) as exc:
            raise FormatError(f"unreadable header: {exc}", file=label, line=1) from None
        self.names = [cell.strip() for cell in cells]
        seen = {}
        for position, name in enumerate(self.names, start=1):
            if not name:
                raise FormatError(f"column {position} has an empty header", file=label, line=1)
            if name in seen:
                raise FormatError(f"column header {name!r} appears in columns {seen[name]} and "
                                  f"{position}", file=label, line=1, field=name)
            seen[name] = position
        lowered = [name.lower() for name in self.names]
        if sample_id_column.lower() not in lowered:
            raise FormatError(f"no {sample_id_column!r} column in the header", file=label,
                              line=1, field=sample_id_column)
        self.sample_pos = lowered.index(sample_id_column.lower())
        self.axis_pos = [i for i, name in enumerate(self.names) if _is_number(name)]
        self.wide = bool(self.axis_pos)
        if not self.wide:
            if "x" not in lowered or "y" not in lowered:
                raise FormatError("header has neither numeric axis columns (wide form) nor "
                                  "'x' and 'y' columns (long form)", file=label, line=1)
            self.x_pos, self.y_pos = lowered.index("x"), lowered.index("y")
        numeric = set(self.axis_pos) if self.wide else {self.x_pos, self.y_pos}
        self.meta_pos = [i for i in range(len(self.names))
                         if i != self.sample_pos and i not in numeric]


def _read_chunks(path, header: _Header, rows: int, *, numbers: list[int] | None = None,
                 first_line: int = 2):
    """pandas C-engine chunks from file line ``first_line`` on; text columns as strings.

    The ``numbers`` columns are parsed straight to float32 (pandas parses each cell as a
    float64 and rounds it, as a float64 column cast afterwards would be); a cell that is not
    a number then raises :class:`_Recheck`. Without ``numbers`` the number columns are inferred,
    and a column holding any text stays text (see :func:`_numeric`).
    Line numbers in pandas' errors are file lines (skipped lines count).
    """
    dtype = {i: str for i in [header.sample_pos, *header.meta_pos]}
    dtype.update({i: np.float32 for i in numbers or ()})
    # header=0 with names: pandas parses the header line and replaces it (cheaper than
    # skipping it as a row); lines before first_line are skipped as rows.
    skip = range(1, first_line - 1) if first_line > 2 else None
    try:
        with warnings.catch_warnings():
            # pandas only warns (and drops cells) when the first row is longer
            # than the header; that is a format error here.
            warnings.simplefilter("error", pd.errors.ParserWarning)
            reader = pd.read_csv(
                path, sep=header.delimiter, header=0, skiprows=skip,
                names=list(range(len(header.names))), index_col=False, dtype=dtype,
                na_filter=False, skip_blank_lines=False, engine="c", chunksize=rows,
                encoding="utf-8-sig")
        with reader:
            while True:
                with warnings.catch_warnings(), np.errstate(over="ignore"):
                    # values beyond the float32 range become inf, reported by the caller
                    warnings.simplefilter("error", pd.errors.ParserWarning)
                    try:
                        frame = reader.get_chunk()
                    except StopIteration:
                        return
                    except ValueError as exc:
                        if numbers is None or isinstance(exc, (pd.errors.ParserError,
                                                               UnicodeDecodeError)):
                            raise
                        raise _Recheck from None  # a cell of a number column is not a number
                if len(frame):
                    yield frame
    except pd.errors.ParserWarning:
        raise FormatError(f"a row near the start has more fields than the {len(header.names)} "
                          "columns of the header", file=header.file,
                          line=first_line) from None
    except pd.errors.ParserError as exc:
        found = re.search(r"line (\d+)", str(exc))
        message = str(exc).replace("Error tokenizing data. ", "")
        raise FormatError(f"wrong number of fields: {message}", file=header.file,
                          line=int(found.group(1)) if found else None) from None
    except pd.errors.EmptyDataError:
        return
    except UnicodeDecodeError as exc:
        raise FormatError(f"file is not UTF-8 text ({exc.reason})", file=header.file) from None


#: Problems listed from one chunk before giving up (every bad row, within reason).
MAX_LISTED = 50


def _bad_cells(values: np.ndarray, limit: int = MAX_LISTED) -> list[int]:
    """Indexes of the text cells that are not finite numbers (at most ``limit``)."""
    bad = []
    for i, text in enumerate(values):
        text = "" if text is None or (isinstance(text, float) and math.isnan(text)) else str(text)
        if not _is_number(text):
            bad.append(i)
            if len(bad) >= limit:
                break
    return bad


def _numeric(frame: pd.DataFrame, positions: list[int], header: _Header,
             lines: list[int]) -> pd.DataFrame:
    """Check the numeric columns; return the frame with every one of them numeric.

    The C parser leaves a column as text when any cell is not a number; only
    those columns are examined cell by cell. Every bad row is reported (its
    first bad column in the file), earliest line first.
    """
    kinds = [dtype.kind for dtype in frame.dtypes]
    text_columns = [pos for pos in positions if kinds[pos] not in "fiu"]
    if not text_columns:
        return frame
    first_bad: dict[int, int] = {}  # row -> its leftmost bad column
    for pos in text_columns:
        for row in _bad_cells(frame[pos].to_numpy(dtype=object)):
            first_bad[row] = min(pos, first_bad.get(row, pos))
    if first_bad:
        problems = []
        for row in sorted(first_bad)[:MAX_LISTED]:
            pos = first_bad[row]
            value = frame[pos].iloc[row]
            text = "" if value is None else str(value).strip()
            what = "empty value" if text in ("", "nan") else f"value {text!r} is not a number"
            problems.append(FormatError(what, file=header.file, line=lines[row],
                                        field=header.names[pos]))
        raise all_of(problems)
    frame = frame.copy()
    for pos in text_columns:  # numbers with blanks around them, or after a blank row
        frame[pos] = np.array([float(str(v)) for v in frame[pos].tolist()], dtype=np.float64)
    return frame


def _non_finite(Y: np.ndarray, columns: list[int], header: _Header, lines: list[int]):
    if not np.isfinite(Y).all():
        cells = np.argwhere(~np.isfinite(Y))  # row-major: each row's leftmost cell first
        rows, first = np.unique(cells[:, 0], return_index=True)
        raise all_of([FormatError("value is NaN, infinite or beyond the float32 range",
                                  file=header.file, line=lines[int(row)],
                                  field=header.names[columns[int(cells[k, 1])]])
                      for row, k in zip(rows[:MAX_LISTED], first[:MAX_LISTED])])


def _text_column(frame: pd.DataFrame, pos: int) -> list[str]:
    return [str(v).strip() for v in frame[pos].tolist()]


def _metadata_rows(frame: pd.DataFrame, header: _Header) -> list[dict]:
    """Non-empty metadata cells of each row, by column name."""
    columns = [(header.names[pos], _text_column(frame, pos)) for pos in header.meta_pos]
    return [{name: values[i] for name, values in columns if values[i]}
            for i in range(len(frame))]


def iter_csv_spectra(path, *, chunk_rows: int = 1000, delimiter: str | None = None,
                     x_unit: str = WAVENUMBER, sample_id_column: str = "sample_id",
                     file_label: str | None = None) -> Iterator[CsvChunk]:
    """Stream the spectra of a CSV file, ``chunk_rows`` spectra at a time.

    Parameters
    ----------
    path : path-like
        Wide or long form CSV (see the module docstring), UTF-8.
    chunk_rows : int
        Spectra per chunk; memory is bounded by one chunk.
    delimiter : {",", "\\t", ";"}, optional
        Detected from the header line when omitted (tab if it has more tabs
        than commas).
    x_unit : str
        Unit of the axis values ("1/CM", "MICROMETERS", "NANOMETERS").
    sample_id_column : str
        Name of the sample id column (case-insensitive).
    file_label : str, optional
        Name used in errors and ``source_file``.
    Yields
    ------
    CsvChunk
        Ascending axis and float32 spectra; in long form a new chunk also
        starts whenever the axis changes.

    Raises
    ------
    FormatError
        Naming file, line and column: bad header, non-numeric or non-finite
        values, wrong field counts, empty sample ids, non-contiguous samples
        (long form), an axis that is not monotonic.
    """
    if chunk_rows < 1:
        raise InputError("chunk_rows must be at least 1", field="chunk_rows")
    label = file_label or os.fspath(path)
    unit = canonical_x_unit(x_unit)
    header = _Header(path, label, delimiter, sample_id_column)
    chunks = (_iter_wide(path, header, chunk_rows, unit) if header.wide
              else _iter_long(path, header, chunk_rows, unit))
    empty = True
    for chunk in chunks:
        empty = False
        yield chunk
    if empty:
        raise FormatError("no spectra after the header line", file=label, line=2)


def _iter_wide(path, header: _Header, chunk_rows: int, unit: str) -> Iterator[CsvChunk]:
    """Parse blocks with the numbers straight to float32; from the first block where that
    fails (a cell that is not a number, a blank row, a non-finite value) on, parse with
    the number columns inferred and checked cell by cell, which names the bad cell."""
    raw_axis = np.array([float(header.names[i]) for i in header.axis_pos])
    try:
        axis, order = normalise_ascending(raw_axis, np.arange(raw_axis.size), file=header.file,
                                          line=1)
    except InputError as exc:
        found = re.search(r"index (\d+)", exc.message)
        field = header.names[header.axis_pos[int(found.group(1))]] if found else None
        raise FormatError(exc.message, file=header.file, line=1, field=field) from None
    columns = [header.axis_pos[i] for i in order]  # file columns in ascending-axis order
    # text cells cost a Python string each (~64 bytes), numbers 8 bytes
    row_bytes = 8 * len(columns) + 64 * (1 + len(header.meta_pos))
    read_rows = max(chunk_rows, _PARSE_BYTES // row_bytes)
    first_line = 2  # of the next block
    try:
        for frame in _read_chunks(path, header, read_rows, numbers=header.axis_pos):
            yield from _wide_chunks(frame, first_line, header, columns, axis, chunk_rows, unit,
                                    checked=False)
            first_line += len(frame)
        return
    except _Recheck:
        pass  # the block that starts at first_line needs the checked parse; earlier ones are out
    for frame in _read_chunks(path, header, read_rows, first_line=first_line):
        yield from _wide_chunks(frame, first_line, header, columns, axis, chunk_rows, unit,
                                checked=True)
        first_line += len(frame)


def _wide_chunks(frame: pd.DataFrame, first_line: int, header: _Header, columns: list[int],
                 axis: np.ndarray, chunk_rows: int, unit: str, *,
                 checked: bool) -> Iterator[CsvChunk]:
    ids = _text_column(frame, header.sample_pos)
    lines = list(range(first_line, first_line + len(frame)))
    if not all(ids):
        keep = [i for i in range(len(frame)) if ids[i] or not _is_blank_row(frame, i)]
        for i in keep:
            if not ids[i]:
                raise FormatError("empty sample id", file=header.file, line=lines[i],
                                  field=header.names[header.sample_pos])
        frame = frame.iloc[keep].reset_index(drop=True)
        ids = [ids[i] for i in keep]
        lines = [lines[i] for i in keep]
        if not keep:
            return
    if checked:
        frame = _numeric(frame, columns, header, lines)
    with np.errstate(over="ignore"):  # values beyond float32 become inf, reported below
        Y = frame.iloc[:, columns].to_numpy(dtype=np.float32)
    if not checked and not np.isfinite(Y).all():
        raise _Recheck  # "inf", "nan" or 1e39 in the text: the checked parse says which
    _non_finite(Y, columns, header, lines)
    metadata = _metadata_rows(frame, header)
    del frame
    for start in range(0, len(ids), chunk_rows):
        stop = start + chunk_rows
        yield CsvChunk(axis=axis, Y=Y[start:stop], sample_ids=ids[start:stop],
                       metadata=metadata[start:stop], first_line=lines[start:stop],
                       x_unit=unit, source_file=header.file)


def _is_blank_row(frame: pd.DataFrame, i: int) -> bool:
    return all(str(v).strip() in ("", "nan") for v in frame.iloc[i].tolist())


def _iter_long(path, header: _Header, chunk_rows: int, unit: str) -> Iterator[CsvChunk]:
    builder = _LongBuilder(header, chunk_rows, unit)
    next_line = 2
    for frame in _read_chunks(path, header, _LONG_FORM_ROWS):
        first_line = next_line
        next_line += len(frame)
        ids = _text_column(frame, header.sample_pos)
        keep = [i for i in range(len(frame)) if ids[i] or not _is_blank_row(frame, i)]
        if len(keep) != len(frame):
            frame = frame.iloc[keep].reset_index(drop=True)
            ids = [ids[i] for i in keep]
        lines = [first_line + i for i in keep]
        for i, sid in enumerate(ids):
            if not sid:
                raise FormatError("empty sample id", file=header.file, line=lines[i],
                                  field=header.names[header.sample_pos])
        frame = _numeric(frame, [header.x_pos, header.y_pos], header, lines)
        xs = frame[header.x_pos].to_numpy(dtype=np.float64)
        ys = frame[header.y_pos].to_numpy(dtype=np.float64)
        metas = _metadata_rows(frame, header)
        start = 0
        for i in range(1, len(ids) + 1):
            if i == len(ids) or ids[i] != ids[start]:
                yield from builder.add(ids[start], xs[start:i], ys[start:i], metas[start],
                                       lines[start:i])
                start = i
    yield from builder.finish()


class _LongBuilder:
    """Collects contiguous long-form rows into spectra and spectra into chunks."""

    def __init__(self, header: _Header, chunk_rows: int, unit: str):
        self.header, self.chunk_rows, self.unit = header, chunk_rows, unit
        self.seen: dict[str, int] = {}
        self.current: tuple | None = None  # (sample id, [x parts], [y parts], meta, lines)
        self.axis = None
        self.rows: list = []

    def add(self, sid, x, y, meta, lines):
        if self.current is not None and self.current[0] == sid:
            self.current[1].append(x)
            self.current[2].append(y)
            self.current[4].extend(lines)
            return
        yield from self.close_sample()
        if sid in self.seen:
            raise FormatError(f"rows of sample {sid!r} are not contiguous (it also starts at "
                              f"line {self.seen[sid]})", file=self.header.file, line=lines[0],
                              field=self.header.names[self.header.sample_pos])
        self.seen[sid] = lines[0]
        self.current = (sid, [x], [y], meta, list(lines))

    def close_sample(self):
        if self.current is None:
            return
        sid, xs, ys, meta, lines = self.current
        self.current = None
        y = np.concatenate(ys)
        with np.errstate(over="ignore"):
            bad = np.flatnonzero(~np.isfinite(y.astype(np.float32)))
        if bad.size:
            raise FormatError("value is NaN, infinite or beyond the float32 range",
                              file=self.header.file, line=lines[bad[0]],
                              field=self.header.names[self.header.y_pos])
        try:
            axis, y = normalise_ascending(np.concatenate(xs), y, file=self.header.file,
                                          line=lines[0], field=self.header.names[self.header.x_pos])
        except InputError as exc:
            found = re.search(r"index (\d+)", exc.message)
            line = lines[int(found.group(1))] if found else lines[0]
            raise FormatError(f"sample {sid!r}: {exc.message}", file=self.header.file,
                              line=line, field=self.header.names[self.header.x_pos]) from None
        if self.axis is not None and not np.array_equal(axis, self.axis):
            yield from self.flush()
        self.axis = axis
        with np.errstate(over="ignore"):
            self.rows.append((sid, y.astype(np.float32), meta, lines[0]))
        if len(self.rows) >= self.chunk_rows:
            yield from self.flush()

    def flush(self):
        if self.rows:
            yield CsvChunk(axis=self.axis, Y=np.stack([r[1] for r in self.rows]),
                           sample_ids=[r[0] for r in self.rows],
                           metadata=[r[2] for r in self.rows],
                           first_line=[r[3] for r in self.rows], x_unit=self.unit,
                           source_file=self.header.file)
        self.rows = []

    def finish(self):
        yield from self.close_sample()
        yield from self.flush()


# --------------------------------------------------------------------------- writer

def _cell(value, delimiter: str, name: str) -> str:
    if isinstance(value, (datetime, date)):
        value = value.isoformat()
    text = "" if value is None else str(value)
    if "\n" in text or "\r" in text:
        raise InputError(f"{name} value {text!r} contains a line break", field=name)
    if delimiter in text or '"' in text:
        text = '"' + text.replace('"', '""') + '"'
    return text


def write_csv_spectra(records: Iterable[SpectrumRecord], path_or_buffer, *,
                      float_format: str = "%.9g", delimiter: str = ",",
                      metadata_fields: list[str] | None = None) -> int:
    """Write spectra in wide form; returns the number of rows written.

    Parameters
    ----------
    records : iterable of SpectrumRecord
        All on the same axis (bit-identical) and unit.
    path_or_buffer : path-like or text file object
    float_format : str
        ``%``-format for the ordinates; the default ``%.9g`` keeps every
        float32 exactly (9 significant digits identify a float32).  The axis
        header is written with the shortest text that reads back to the same
        float64.
    delimiter : {",", "\\t"}
    metadata_fields : list of str, optional
        Metadata columns, in order; by default every scalar metadata key of
        any record, in order of first appearance (this reads all records
        first; pass the list to stream).

    Raises
    ------
    InputError
        Records on different axes, a metadata name that would read back as an
        axis value, or a value containing a line break.
    """
    if metadata_fields is None:
        records = list(records)
        metadata_fields = []
        for record in records:
            for key, value in (record.metadata or {}).items():
                if key not in metadata_fields and _scalar(value):
                    metadata_fields.append(key)
    for name in metadata_fields:
        if _is_number(str(name)) or str(name).lower() == "sample_id" or not str(name).strip():
            raise InputError(f"metadata name {name!r} cannot be a CSV column", field=str(name))
    own = isinstance(path_or_buffer, (str, os.PathLike))
    handle = open(path_or_buffer, "w", encoding="utf-8", newline="") if own else path_or_buffer
    count = 0
    try:
        axis = unit = row_format = None
        for record in records:
            if axis is None:
                axis, unit = record.x, record.x_unit
                names = ["sample_id", *map(str, metadata_fields)]
                cells = [_cell(name, delimiter, name) for name in names]
                cells += [_shortest(v) for v in axis]
                handle.write(delimiter.join(cells) + "\n")
                row_format = delimiter.join([float_format] * axis.size) + "\n"
            elif record.x_unit != unit or not np.array_equal(record.x, axis):
                raise InputError(f"spectrum {record.sample_id!r} is on a different axis from "
                                 "the first one; resample before writing one CSV file",
                                 field="x")
            if not str(record.sample_id).strip():
                raise InputError("empty sample id", field="sample_id")
            meta = record.metadata or {}
            prefix = [_cell(record.sample_id, delimiter, "sample_id")]
            prefix += [_cell(meta.get(name) if _scalar(meta.get(name)) else None, delimiter,
                             str(name)) for name in metadata_fields]
            values = np.asarray(record.y, dtype=np.float32).astype(np.float64)
            handle.write(delimiter.join(prefix) + delimiter + row_format % tuple(values.tolist()))
            count += 1
    finally:
        if own:
            handle.close()
    return count


def _scalar(value) -> bool:
    return isinstance(value, (str, int, float, datetime, date)) and not isinstance(value, bool)


def _shortest(value: float) -> str:
    return repr(float(value))
