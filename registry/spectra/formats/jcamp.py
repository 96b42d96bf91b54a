"""JCAMP-DX 4.24 infrared spectra: reader and writer.

Follows McDonald & Wilks, "JCAMP-DX: A Standard Form for Exchange of
Infrared Spectra in Computer Readable Form", Appl. Spectrosc. 42:151 (1988).

What the reader accepts
-----------------------
- ``##XYDATA=(X++(Y..Y))`` in AFFN (free-format decimal, PAC signs as
  separators) and ASDF (SQZ, DIF and DUP characters); after a line that ends
  in DIF form the first ordinate of the next line repeats the last ordinate
  (the Y-check); it is verified and dropped.
- ``##XYPOINTS=(XY..XY)`` with AFFN pairs separated by blanks, commas or
  semicolons.
- XFACTOR/YFACTOR scaling; FIRSTX, LASTX, NPOINTS and DELTAX are checked
  against each other and against the abscissa written on each data line.
- XUNITS 1/CM, MICROMETERS, NANOMETERS; YUNITS ABSORBANCE or TRANSMITTANCE
  (converted to absorbance, fraction or percent detected).
- Labels compared after dropping case, blanks, ``-``, ``/`` and ``_`` (the
  label rule of the spec); ``$$`` comments anywhere; Ctrl-Z characters;
  text outside blocks (before the first ``##TITLE`` or after the last
  ``##END``) is ignored.
- Compound files: a ``##DATA TYPE=LINK`` block with ``##BLOCKS=n`` holding
  child blocks; every child with spectrum data gives one record.

Every problem raises :class:`registry.errors.FormatError` naming file, line
and (where one applies) the header.

ASDF reading rule chosen here: ``E``/``e`` directly after an AFFN number and
followed by a sign and digits is an exponent (``1.5E-03``); anywhere else it
is the SQZ character for ±5.
"""

from __future__ import annotations

import math
import os
import re
from bisect import bisect_right
from dataclasses import dataclass, field
from datetime import datetime

import numpy as np

from registry.errors import FormatError, InputError
from registry.spectra.formats.asdf import decode_table
from registry.spectra.axes import (canonical_x_unit, normalise_ascending,
                                   transmittance_to_absorbance)
from registry.spectra.record import SpectrumRecord

MAX_NPOINTS = 1_000_000  # far above any infrared spectrum; bounds memory on hostile input
MAX_LINE = 80  # line length limit of the spec

_LABEL_NOISE = re.compile(r"[\s\-/_]")
_AFFN = r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)"
_AFFN_FULL = re.compile(_AFFN + r"(?:[eE][+-]?\d+)?\Z")
_ASDF_TOKEN = re.compile(
    r"(?P<sep>[\s,;]+)"
    r"|(?P<affn>" + _AFFN + r"(?:[eE][+-]\d+)?)"
    r"|(?P<sqz>[@A-Ia-i](?:\d+(?:\.\d*)?|\.\d+)?)"
    r"|(?P<dif>[%J-Rj-r](?:\d+(?:\.\d*)?|\.\d+)?)"
    r"|(?P<dup>[S-Zs]\d*)")
_WORD_SPLIT = re.compile(r"[\s,;]+")
_NON_FINITE_WORDS = {"nan", "inf", "infinity"}

# Leading-digit characters of the ASDF forms (spec tables 1–3).
_SQZ_DIGIT = {"@": 0, **{c: i + 1 for i, c in enumerate("ABCDEFGHI")},
              **{c: -(i + 1) for i, c in enumerate("abcdefghi")}}
_DIF_DIGIT = {"%": 0, **{c: i + 1 for i, c in enumerate("JKLMNOPQR")},
              **{c: -(i + 1) for i, c in enumerate("jklmnopqr")}}
_DUP_DIGIT = {c: i + 1 for i, c in enumerate("STUVWXYZs")}
# The same digits as the text that replaces the leading character before float()/int().
_SQZ_TEXT = {c: ("-" if d < 0 else "") + str(abs(d)) for c, d in _SQZ_DIGIT.items()}
_DIF_TEXT = {c: ("-" if d < 0 else "") + str(abs(d)) for c, d in _DIF_DIGIT.items()}
_DUP_TEXT = {c: str(d) for c, d in _DUP_DIGIT.items()}
# A line can hold a NaN/Inf word only if it contains one of these letter runs.
_MAYBE_NON_FINITE = re.compile(r"[nN][aA][nN]|[iI][nN][fF]")
_SQZ_POS, _SQZ_NEG = "@ABCDEFGHI", " abcdefghi"
_DIF_POS, _DIF_NEG = "%JKLMNOPQR", " jklmnopqr"
_DUP_CHARS = " STUVWXYZs"

_ABS, _DIF, _DUP = "abs", "dif", "dup"
_DATA_LABELS = {"XYDATA", "XYPOINTS", "PEAKTABLE", "NTUPLES", "PEAKASSIGNMENTS"}
_KNOWN_META = {"SPECTROMETERDATASYSTEM": "instrument", "$OPERATOR": "operator",
               "$GRADE": "grade", "TITLE": "title"}


def normalise_label(label: str) -> str:
    """JCAMP-DX label rule: ignore case, blanks, dashes, slashes and underscores."""
    return _LABEL_NOISE.sub("", label).upper()


# --------------------------------------------------------------------------- lexing

@dataclass
class _Ldr:
    """One labelled data record: ``##LABEL=value`` and the lines that follow it."""

    label: str | None  # normalised; None for text outside any label
    raw_label: str
    value: str
    line: int
    more: list = field(default_factory=list)  # (line number, stripped text)

    def text(self) -> str:
        return "\n".join([self.value] + [t for _, t in self.more]).strip()


def _lex(text: str) -> list[_Ldr]:
    text = text.lstrip("\ufeff").replace("\x1a", "")
    text = text.replace("\r\n", "\n").replace("\r", "\n")
    ldrs: list[_Ldr] = []
    for number, raw in enumerate(text.split("\n"), start=1):
        line = raw.strip()
        cut = line.find("$$", 2 if line.startswith("##") else 0)
        if cut >= 0:
            line = line[:cut].strip()
        if not line or line == "##":
            continue
        if line.startswith("##"):
            label, eq, value = line[2:].partition("=")
            if not eq:
                ldrs.append(_Ldr(None, label.strip(), "label line without '='", number))
                continue
            ldrs.append(_Ldr(normalise_label(label), label.strip(), value.strip(), number))
        elif ldrs and ldrs[-1].label is not None:
            ldrs[-1].more.append((number, line))
        else:
            ldrs.append(_Ldr(None, "", "text outside a labelled record", number))
    return ldrs


# --------------------------------------------------------------------------- blocks

@dataclass
class _Block:
    start: int
    parent: "_Block | None"
    headers: dict = field(default_factory=dict)
    children: int = 0

    def is_link(self) -> bool:
        kind = self.headers.get("DATATYPE")
        return "BLOCKS" in self.headers or (kind is not None and kind.value.upper() == "LINK")

    def lookup(self, label: str):
        block = self
        while block is not None:
            if label in block.headers:
                return block.headers[label]
            block = block.parent
        return None


class _Reader:
    def __init__(self, label: str, sample_id_field: str):
        self.file = label
        self.sample_id_field = sample_id_field
        self.sample_label = normalise_label(sample_id_field)

    def error(self, message, line=None, field=None) -> FormatError:
        return FormatError(message, file=self.file, line=line, field=field)

    # ---- structure
    def read(self, text: str) -> list[SpectrumRecord]:
        records: list[SpectrumRecord] = []
        stack: list[_Block] = []
        for ldr in _lex(text):
            if ldr.label is None:
                if stack:  # garbage is tolerated only outside blocks
                    raise self.error(ldr.value, line=ldr.line)
                continue
            if ldr.label == "TITLE":
                parent = stack[-1] if stack else None
                if parent is not None:
                    if not parent.is_link():
                        raise self.error(
                            f"##TITLE before the ##END of the block that starts at line "
                            f"{parent.start}", line=ldr.line, field="TITLE")
                    parent.children += 1
                stack.append(_Block(ldr.line, parent))
            elif not stack:
                continue  # trailing text after the last ##END
            elif ldr.label == "END":
                block = stack.pop()
                record = self.finish(block)
                if record is not None:
                    records.append(record)
                continue
            block = stack[-1]
            if ldr.label in _DATA_LABELS and ldr.label in block.headers:
                raise self.error(f"second ##{ldr.raw_label} in the block that starts at line "
                                 f"{block.start}", line=ldr.line, field=ldr.label)
            block.headers[ldr.label] = ldr
        if stack:
            raise self.error("missing ##END for the block that starts here",
                             line=stack[-1].start, field="END")
        if not records:
            raise self.error("no ##XYDATA or ##XYPOINTS spectrum found", line=1)
        return records

    def finish(self, block: _Block) -> SpectrumRecord | None:
        if block.is_link():
            declared = block.headers.get("BLOCKS")
            if declared is not None:
                count = self.header_int(block, "BLOCKS")
                if count != block.children:
                    raise self.error(f"##BLOCKS={count} but {block.children} blocks follow",
                                     line=declared.line, field="BLOCKS")
            return None
        if "NTUPLES" in block.headers:
            raise self.error("##NTUPLES data are not supported",
                             line=block.headers["NTUPLES"].line, field="NTUPLES")
        table = block.headers.get("XYDATA") or block.headers.get("XYPOINTS")
        if table is None:
            return None  # e.g. a peak table only: no spectrum in this block
        for label in ("JCAMPDX", "XUNITS", "YUNITS", "NPOINTS"):
            self.require(block, label)
        if table.label == "XYDATA":
            x, y, line_of = self.read_xydata(block, table)
        else:
            x, y, line_of = self.read_xypoints(block, table)
        return self.make_record(block, table, x, y, line_of)

    # ---- headers
    def require(self, block: _Block, label: str) -> _Ldr:
        ldr = block.headers.get(label)
        if ldr is None:
            raise self.error(f"missing required header ##{label} in the block that starts "
                             "here", line=block.start, field=label)
        return ldr

    def header_float(self, block: _Block, label: str, default=None):
        ldr = block.headers.get(label)
        if ldr is None:
            if default is None:
                self.require(block, label)
            return default
        value = ldr.text()
        if not _AFFN_FULL.match(value):
            raise self.error(f"##{ldr.raw_label}={value!r} is not a number",
                             line=ldr.line, field=label)
        number = float(value)
        if not math.isfinite(number):
            raise self.error(f"##{ldr.raw_label}={value!r} is not finite",
                             line=ldr.line, field=label)
        return number

    def header_int(self, block: _Block, label: str) -> int:
        number = self.header_float(block, label)
        ldr = block.headers[label]
        if number != int(number) or number < 0:
            raise self.error(f"##{ldr.raw_label}={ldr.value!r} is not a whole number",
                             line=ldr.line, field=label)
        return int(number)

    def npoints(self, block: _Block) -> int:
        n = self.header_int(block, "NPOINTS")
        if not 1 <= n <= MAX_NPOINTS:
            raise self.error(f"##NPOINTS={n} is outside 1..{MAX_NPOINTS}",
                             line=block.headers["NPOINTS"].line, field="NPOINTS")
        return n

    def factor(self, block: _Block, label: str) -> float:
        value = self.header_float(block, label, default=1.0)
        if value == 0:
            raise self.error(f"##{label} must not be zero", line=block.headers[label].line,
                             field=label)
        return value

    # ---- (X++(Y..Y))
    def read_xydata(self, block: _Block, table: _Ldr):
        form = re.sub(r"\s+", "", table.value).upper()
        if form != "(X++(Y..Y))":
            raise self.error(f"unsupported ##XYDATA form {table.value!r}; expected (X++(Y..Y))",
                             line=table.line, field="XYDATA")
        n = self.npoints(block)
        firstx = self.header_float(block, "FIRSTX")
        lastx = self.header_float(block, "LASTX")
        xfactor = self.factor(block, "XFACTOR")
        yfactor = self.factor(block, "YFACTOR")
        if not table.more:
            raise self.error("##XYDATA has no data lines", line=table.line, field="XYDATA")

        numbers = [number for number, _ in table.more]
        decoded = decode_table([text for _, text in table.more], n)
        if decoded is None:  # not plain well-formed ASDF: line by line, naming any problem
            ys, lines = self.decode_asdf_lines(table, n)
        else:
            ys, abscissas, starts = decoded
            lines = list(zip(numbers, abscissas, starts))
        x = self.check_xydata_axis(block, lines, n, firstx, lastx, xfactor)
        y = np.asarray(ys, dtype=np.float64) * yfactor
        starts = [start for _, _, start in lines]
        return x, y, lambda i: numbers[max(bisect_right(starts, i) - 1, 0)]

    def decode_asdf_lines(self, table: _Ldr, n: int) -> tuple[list[float], list[tuple]]:
        """Ordinates and (line, abscissa, index of its first ordinate) per data line."""
        ys: list[float] = []
        lines: list[tuple[int, float, int]] = []
        check_next = False
        for number, text in table.more:
            abscissa, values, ends_in_dif = self.decode_asdf_line(text, number, n - len(ys) + 1)
            if check_next:
                if not values:
                    raise self.error("line has no Y-check ordinate", line=number)
                expected = ys[-1]
                if abs(values[0] - expected) > 1e-9 * max(abs(expected), abs(values[0])):
                    raise self.error(
                        f"Y-check failed: first ordinate {values[0]:g} should repeat the last "
                        f"ordinate {expected:g} of the previous line", line=number)
                lines.append((number, abscissa, len(ys) - 1))
                values = values[1:]
            else:
                if not values:
                    raise self.error("data line has an abscissa but no ordinates", line=number)
                lines.append((number, abscissa, len(ys)))
            ys.extend(values)
            if len(ys) > n:
                raise self.error(f"more ordinates than ##NPOINTS={n}", line=number,
                                 field="NPOINTS")
            check_next = ends_in_dif
        if len(ys) != n:
            raise self.error(f"##NPOINTS={n} but {len(ys)} ordinates were read",
                             line=table.line, field="NPOINTS")
        return ys, lines

    def decode_asdf_line(self, text: str, number: int, room: int):
        """Abscissa, ordinates and whether the line ends in DIF form."""
        if _MAYBE_NON_FINITE.search(text):  # the word check only where it can match
            for word in _WORD_SPLIT.split(text):
                if word.lower().lstrip("+-") in _NON_FINITE_WORDS:
                    raise self.error(f"non-finite value {word!r}", line=number)
        tokens = []
        pos = 0
        for match in _ASDF_TOKEN.finditer(text):
            if match.start() != pos:  # a character no token form accepts
                break
            pos = match.end()
            kind = match.lastgroup
            if kind == "sep":
                continue
            token = match.group()
            if kind == "affn":
                value = float(token)
            elif kind == "dup":
                if len(token) > 10:
                    raise self.error(f"DUP count {token!r} is too large", line=number)
                value = int(_DUP_TEXT[token[0]] + token[1:])
            else:
                value = float((_SQZ_TEXT if kind == "sqz" else _DIF_TEXT)[token[0]] + token[1:])
            if not math.isfinite(value):
                raise self.error(f"value {token!r} is not finite", line=number)
            tokens.append((_ABS if kind in ("affn", "sqz") else kind, value))
        if pos != len(text):
            char = text[pos]
            what = "missing value '?'" if char == "?" else f"unexpected character {char!r}"
            raise self.error(f"{what} at column {pos + 1}", line=number)
        if not tokens:
            raise self.error("empty data line", line=number)
        if tokens[0][0] != _ABS:
            raise self.error("data line must start with an abscissa value", line=number)
        values: list[float] = []
        last_kind = None  # form of the last ordinate: _ABS or _DIF
        last_step = 0.0
        after_dup = False
        for kind, value in tokens[1:]:
            if kind == _DUP:
                if last_kind is None or after_dup:
                    raise self.error("DUP count must follow an ordinate", line=number)
                if value - 1 > room - len(values):
                    raise self.error(f"DUP count {int(value)} runs past ##NPOINTS",
                                     line=number, field="NPOINTS")
                # DUP repeats the previous token: the same value, or the same difference
                step = last_step if last_kind == _DIF else 0.0
                for _ in range(int(value) - 1):
                    values.append(values[-1] + step)
                after_dup = True
                continue
            after_dup = False
            if kind == _ABS:
                values.append(value)
                last_kind = _ABS
            else:
                if not values:
                    raise self.error("DIF value with no ordinate before it", line=number)
                values.append(values[-1] + value)
                last_kind, last_step = _DIF, value
            if len(values) > room:
                raise self.error("more ordinates than ##NPOINTS", line=number, field="NPOINTS")
        return tokens[0][1], values, last_kind == _DIF

    def check_xydata_axis(self, block, lines, n, firstx, lastx, xfactor) -> np.ndarray:
        """Check FIRSTX, LASTX, DELTAX and each line's abscissa; return the axis."""
        if n == 1:
            if firstx != lastx:
                raise self.error("##FIRSTX and ##LASTX differ but ##NPOINTS=1",
                                 line=block.headers["LASTX"].line, field="LASTX")
            return np.array([firstx])
        if firstx == lastx:
            raise self.error("##FIRSTX equals ##LASTX but ##NPOINTS > 1",
                             line=block.headers["LASTX"].line, field="LASTX")
        dx = (lastx - firstx) / (n - 1)
        if "DELTAX" in block.headers:
            deltax = self.header_float(block, "DELTAX")
            # DELTAX is often written rounded; 0.1 % of the step is common practice.
            if abs(deltax - dx) > 1e-3 * abs(dx):
                raise self.error(f"##DELTAX={deltax:g} but (LASTX-FIRSTX)/(NPOINTS-1)={dx:g}",
                                 line=block.headers["DELTAX"].line, field="DELTAX")
        # An abscissa written on a data line may be rounded to the X unit: allow
        # half a point spacing plus half an XFACTOR unit.
        tol = 0.5 * abs(dx) + 0.5 * abs(xfactor)
        number, first_abscissa, first_index = lines[0]
        if abs(first_abscissa * xfactor - firstx) > tol:
            raise self.error(f"##FIRSTX={firstx:g} but the first data line (line {number}) "
                             f"starts at {first_abscissa * xfactor:g}",
                             line=block.headers["FIRSTX"].line, field="FIRSTX")
        failed = [(number, abscissa, index) for number, abscissa, index in lines[1:]
                  if abs(abscissa * xfactor - (firstx + index * dx)) > tol]
        if not failed:
            return np.linspace(firstx, lastx, n)
        _, last_abscissa, last_index = lines[-1]
        span = last_index - first_index
        if len(failed) == len(lines) - 1 >= 2 and span > 0:
            # every later line is off but the lines agree with each other: the
            # step they imply contradicts LASTX (or NPOINTS)
            step = (last_abscissa - first_abscissa) * xfactor / span
            if all(abs(abscissa * xfactor - (first_abscissa * xfactor + (index - first_index)
                                              * step)) <= tol for _, abscissa, index in lines):
                predicted = last_abscissa * xfactor + (n - 1 - last_index) * step
                raise self.error(f"##LASTX={lastx:g} but the data lines end at about "
                                 f"{predicted:g}", line=block.headers["LASTX"].line,
                                 field="LASTX")
        number, abscissa, index = failed[0]
        raise self.error(f"X-check failed: line starts at {abscissa * xfactor:g}, expected "
                         f"{firstx + index * dx:g} for point {index + 1} from FIRSTX, LASTX and "
                         "NPOINTS", line=number)

    # ---- (XY..XY)
    def read_xypoints(self, block: _Block, table: _Ldr):
        form = re.sub(r"\s+", "", table.value).upper()
        if form != "(XY..XY)":
            raise self.error(f"unsupported ##XYPOINTS form {table.value!r}; expected (XY..XY)",
                             line=table.line, field="XYPOINTS")
        n = self.npoints(block)
        xfactor = self.factor(block, "XFACTOR")
        yfactor = self.factor(block, "YFACTOR")
        values: list[float] = []
        value_lines: list[int] = []
        for number, text in table.more:
            for word in _WORD_SPLIT.split(text):
                if not word:
                    continue
                if word.lower().lstrip("+-") in _NON_FINITE_WORDS:
                    raise self.error(f"non-finite value {word!r}", line=number)
                if not _AFFN_FULL.match(word):
                    raise self.error(f"{word!r} is not a number", line=number)
                value = float(word)
                if not math.isfinite(value):
                    raise self.error(f"value {word!r} is not finite", line=number)
                values.append(value)
                value_lines.append(number)
                if len(values) > 2 * n:
                    raise self.error(f"more points than ##NPOINTS={n}", line=number,
                                     field="NPOINTS")
        if len(values) % 2:
            raise self.error("odd number of values: the last X has no Y",
                             line=value_lines[-1] if value_lines else table.line)
        if len(values) // 2 != n:
            raise self.error(f"##NPOINTS={n} but {len(values) // 2} points were read",
                             line=table.line, field="NPOINTS")
        pairs = np.asarray(values, dtype=np.float64).reshape(-1, 2)
        x = pairs[:, 0] * xfactor
        y = pairs[:, 1] * yfactor
        # FIRSTX/LASTX are optional here; when given they must name the end
        # points to within half the smallest point spacing.
        steps = np.abs(np.diff(x))
        tol = 0.5 * steps[steps > 0].min() if np.any(steps > 0) else 1e-9 * abs(x[0])
        for label, actual in (("FIRSTX", x[0]), ("LASTX", x[-1])):
            if label in block.headers:
                stated = self.header_float(block, label)
                if abs(stated - actual) > tol:
                    raise self.error(f"##{label}={stated:g} but the data give {actual:g}",
                                     line=block.headers[label].line, field=label)
        return x, y, lambda i: value_lines[2 * i]

    # ---- record
    def make_record(self, block, table, x, y, line_of) -> SpectrumRecord:
        xunits = block.headers["XUNITS"]
        try:
            x_unit = canonical_x_unit(xunits.text(), file=self.file, line=xunits.line,
                                      field="XUNITS")
        except InputError as exc:
            raise self.error(exc.message, line=xunits.line, field="XUNITS") from None
        bad = np.flatnonzero(~np.isfinite(y))
        if bad.size:
            raise self.error(f"ordinate of point {bad[0] + 1} is not finite after YFACTOR",
                             line=line_of(int(bad[0])), field="YFACTOR")
        y = self.to_absorbance(block, y, line_of)
        try:
            x, y = normalise_ascending(x, y, file=self.file, line=table.line, field=table.label)
        except InputError as exc:
            raise self.error(exc.message, line=table.line, field=table.label) from None
        with np.errstate(over="ignore"):
            y32 = y.astype(np.float32)
        # Finite in float64 but beyond the float32 range of stored spectra.
        too_big = np.flatnonzero(~np.isfinite(y32))
        if too_big.size:
            raise self.error(f"ordinate of point {too_big[0] + 1} ({y[too_big[0]]:.3g}) is beyond "
                             "the float32 range of stored spectra", line=table.line,
                             field=table.label)
        sample = block.lookup(self.sample_label)
        sample_id = sample.text() if sample is not None else ""
        if not sample_id:
            raise self.error(f"no sample id: ##{self.sample_id_field} is missing or empty",
                             line=block.start, field=self.sample_label)
        return SpectrumRecord(sample_id=sample_id, x=x, y=y32, x_unit=x_unit,
                              metadata=self.metadata(block), source_file=self.file,
                              source_line=block.start)

    def to_absorbance(self, block, y, line_of) -> np.ndarray:
        yunits = block.headers["YUNITS"]
        unit = " ".join(yunits.text().upper().split())
        if "ABSORBANCE" in unit:
            return y
        if "TRANSMITTANCE" in unit or unit in ("%T", "T"):
            percent = True if ("%" in unit or "PERCENT" in unit) else None
            bad = np.flatnonzero(y <= 0)
            if bad.size:
                raise self.error(f"transmittance {y[bad[0]]:g} of point {bad[0] + 1} is not "
                                 "positive; absorbance is undefined",
                                 line=line_of(int(bad[0])), field="YUNITS")
            return transmittance_to_absorbance(y, percent)
        raise self.error(f"unsupported ##YUNITS={yunits.text()!r}; expected ABSORBANCE or "
                         "TRANSMITTANCE", line=yunits.line, field="YUNITS")

    def metadata(self, block: _Block) -> dict:
        chain = []
        while block is not None:
            chain.append(block)
            block = block.parent
        headers: dict = {}
        for part in reversed(chain):  # the innermost block wins
            for label, ldr in part.headers.items():
                if label not in _DATA_LABELS:
                    headers[label] = ldr.text()
        meta: dict = {}
        for label, value in headers.items():
            if label in _KNOWN_META:
                meta[_KNOWN_META[label]] = value
            elif label == "LONGDATE":
                meta["acquired_at"] = _parse_longdate(value)
            elif label.startswith("$") and len(label) > 1:
                meta[label[1:].lower()] = value
        meta["headers"] = headers
        return meta


def _parse_longdate(value: str) -> str:
    """LONGDATE ``YYYY/MM/DD[ HH:MM:SS[.ffffff]][ ±hhmm]`` as ISO-8601; other text kept as is."""
    for fmt in ("%Y/%m/%d %H:%M:%S.%f %z", "%Y/%m/%d %H:%M:%S %z", "%Y/%m/%d %H:%M:%S.%f",
                "%Y/%m/%d %H:%M:%S", "%Y/%m/%d"):
        try:
            return datetime.strptime(value, fmt).isoformat()
        except ValueError:
            continue
    return value


def read_jcamp(source=None, *, text: str | bytes | None = None, sample_id_field: str = "TITLE",
               file_label: str | None = None) -> list[SpectrumRecord]:
    """Read every spectrum of a JCAMP-DX file.

    Parameters
    ----------
    source : path-like or None
        File to read; ignored for the content when ``text`` is given.
    text : str or bytes, optional
        File content (bytes are decoded as UTF-8, falling back to Latin-1).
    sample_id_field : str
        Header naming the sample (default ``TITLE``); looked up in the block,
        then in the enclosing link block.
    file_label : str, optional
        Name used in errors and ``source_file`` (default: the path).

    Returns
    -------
    list of SpectrumRecord
        One per block with ``##XYDATA`` or ``##XYPOINTS``, in file order, each
        with an ascending axis and absorbance ordinates.

    Raises
    ------
    FormatError
        Any departure from the format, with file, line and header.
    """
    label = file_label or (os.fspath(source) if source is not None else "<text>")
    if text is None:
        if source is None:
            raise InputError("read_jcamp needs a path or text", field="source")
        with open(source, "rb") as handle:
            text = handle.read()
    if isinstance(text, bytes):
        try:
            text = text.decode("utf-8")
        except UnicodeDecodeError:
            text = text.decode("latin-1")
    return _Reader(label, sample_id_field).read(text)


# --------------------------------------------------------------------------- writer

def _sqz(value: int) -> str:
    digits = str(abs(value))
    lead = _SQZ_NEG[int(digits[0])] if value < 0 else _SQZ_POS[int(digits[0])]
    return lead + digits[1:]


def _dif(value: int) -> str:
    digits = str(abs(value))
    lead = _DIF_NEG[int(digits[0])] if value < 0 else _DIF_POS[int(digits[0])]
    return lead + digits[1:]


def _dup(count: int) -> str:
    digits = str(count)
    return _DUP_CHARS[int(digits[0])] + digits[1:]


def _plain(value: float) -> str:
    """Shortest decimal that reads back to the same float64, without an exponent."""
    return np.format_float_positional(float(value), unique=True, trim="-")


def _choose_yfactor(y: np.ndarray) -> float:
    # Eight significant digits for the largest ordinate: finer than the
    # float32 spacing (2^-23 ≈ 1.2e-7 relative) near the maximum, so the
    # written integers lose at most YFACTOR/2 per point.
    peak = float(np.max(np.abs(y))) if y.size else 0.0
    if peak == 0.0:
        return 1.0
    return 10.0 ** (math.floor(math.log10(peak)) - 7)


def _header_line(label: str, value: str, field_name: str) -> str:
    value = str(value)
    if "\n" in value or "\r" in value or "$$" in value:
        raise InputError(f"{field_name} value {value!r} cannot be written to JCAMP-DX "
                         "(line break or '$$')", field=field_name)
    line = f"##{label}={value}"
    if len(line) > MAX_LINE:
        raise InputError(f"{field_name} value is too long for an {MAX_LINE}-character "
                         "JCAMP-DX line", field=field_name)
    return line


def _longdate(value) -> str:
    if isinstance(value, str):
        try:
            value = datetime.fromisoformat(value)
        except ValueError:
            return value
    text = value.strftime("%Y/%m/%d %H:%M:%S")
    if value.microsecond:
        text += f".{value.microsecond:06d}"
    if value.tzinfo is not None:
        text += value.strftime(" %z")
    return text


#: Data forms :func:`write_jcamp` writes: free-format X++(Y..Y), compressed DIFDUP, (XY..XY) pairs.
JCAMP_FORMS = ("AFFN", "DIFDUP", "XYPOINTS")


def write_jcamp(record: SpectrumRecord, form: str = "AFFN", yfactor: float | None = None) -> str:
    """Write one spectrum as JCAMP-DX 4.24 text.

    Parameters
    ----------
    record : SpectrumRecord
        Absorbance spectrum; ``sample_id`` becomes ``##TITLE``.
    form : {"AFFN", "DIFDUP", "XYPOINTS"}
        ``(X++(Y..Y))`` with plain integers, ``(X++(Y..Y))`` in ASDF DIF/DUP
        form with Y-check, or ``(XY..XY)`` pairs (for uneven axes).
    yfactor : float, optional
        Ordinate scale; by default a power of ten giving the largest ordinate
        eight significant digits.  Each ordinate is written as the nearest
        integer multiple of YFACTOR, so it reads back within YFACTOR/2.

    Returns
    -------
    str
        File text; lines are at most 80 characters, ending with ``\\n``.
        Metadata written: ``instrument`` → ``##SPECTROMETER/DATA SYSTEM``,
        ``acquired_at`` → ``##LONGDATE``, other scalar entries → ``##$KEY``
        (read back with the key lower-cased and ``_ - /`` and blanks removed).

    Raises
    ------
    InputError
        Unknown form, an uneven axis for the XYDATA forms, non-finite data,
        or metadata that cannot be written on one line.
    """
    form = form.upper()
    if form not in JCAMP_FORMS:
        raise InputError(f"unknown JCAMP-DX form {form!r}; use AFFN, DIFDUP or XYPOINTS",
                         field="form")
    x = np.asarray(record.x, dtype=np.float64)
    y = np.asarray(record.y, dtype=np.float64)
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))) or x.size == 0:
        raise InputError(f"spectrum {record.sample_id!r} is empty or not finite", field="y")
    if yfactor is None:
        yfactor = _choose_yfactor(y)
    if not (math.isfinite(yfactor) and yfactor > 0):
        raise InputError(f"yfactor must be positive, got {yfactor!r}", field="yfactor")
    scaled = np.rint(y / yfactor)
    if np.max(np.abs(scaled)) >= 2.0 ** 53:
        raise InputError(f"yfactor {yfactor!r} is too small for these ordinates", field="yfactor")
    ints = [int(v) for v in scaled]
    n = x.size
    lines = [_header_line("TITLE", record.sample_id, "sample_id"), "##JCAMP-DX=4.24",
             "##DATA TYPE=INFRARED SPECTRUM"]
    meta = dict(record.metadata or {})
    lines.append(_header_line("ORIGIN", meta.pop("origin", ""), "origin"))
    lines.append(_header_line("OWNER", meta.pop("owner", ""), "owner"))
    if meta.get("instrument") is not None:
        lines.append(_header_line("SPECTROMETER/DATA SYSTEM", meta["instrument"], "instrument"))
    if meta.get("acquired_at") is not None:
        lines.append(_header_line("LONGDATE", _longdate(meta["acquired_at"]), "acquired_at"))
    for key, value in meta.items():
        if key in ("instrument", "acquired_at", "title", "headers") or value is None:
            continue
        if isinstance(value, (str, int, float)) and not isinstance(value, bool):
            label = "$" + normalise_label(str(key))
            lines.append(_header_line(label, value, str(key)))
    lines += [f"##XUNITS={record.x_unit}", "##YUNITS=ABSORBANCE", "##XFACTOR=1",
              f"##YFACTOR={yfactor!r}", f"##FIRSTX={float(x[0])!r}", f"##LASTX={float(x[-1])!r}"]
    if form != "XYPOINTS":
        if n > 1:
            dx = (x[-1] - x[0]) / (n - 1)
            even = np.linspace(x[0], x[-1], n)
            if np.max(np.abs(x - even)) > 1e-6 * abs(dx):
                raise InputError("axis is not evenly spaced; use form='XYPOINTS'", field="x")
            lines.append(f"##DELTAX={float(dx)!r}")
        lines.append(f"##FIRSTY={ints[0] * yfactor!r}")
    lines.append(f"##NPOINTS={n}")
    if form == "XYPOINTS":
        lines.append("##XYPOINTS=(XY..XY)")
        lines += [f"{_plain(xi)}, {yi}" for xi, yi in zip(x, ints)]
    elif form == "AFFN":
        lines.append("##XYDATA=(X++(Y..Y))")
        lines += _affn_lines(x, ints)
    else:
        lines.append("##XYDATA=(X++(Y..Y))")
        lines += _difdup_lines(x, ints)
    lines.append("##END=")
    return "\n".join(lines) + "\n"


def _affn_lines(x: np.ndarray, ints: list[int]) -> list[str]:
    out = []
    i = 0
    while i < len(ints):
        line = _plain(x[i])
        j = i
        while j < len(ints) and len(line) + 1 + len(str(ints[j])) <= MAX_LINE:
            line += " " + str(ints[j])
            j += 1
        if j == i:
            raise InputError("abscissa too long for an 80-character data line", field="x")
        out.append(line)
        i = j
    return out


def _difdup_lines(x: np.ndarray, ints: list[int]) -> list[str]:
    """DIF form with DUP counts; each new line repeats the last ordinate (Y-check)."""
    out = []
    n = len(ints)
    i = 0
    while True:
        line = f"{_plain(x[i])} {_sqz(ints[i])}"
        j = i
        while j + 1 < n:
            step = ints[j + 1] - ints[j]
            run = 1
            while j + run + 1 < n and ints[j + run + 1] - ints[j + run] == step:
                run += 1
            token = _dif(step) + (_dup(run) if run > 1 else "")
            if len(line) + len(token) > MAX_LINE:
                # try a shorter run that still fits before breaking the line
                while run > 1 and len(line) + len(_dif(step) + (_dup(run) if run > 1 else "")) \
                        > MAX_LINE:
                    run -= 1
                token = _dif(step) + (_dup(run) if run > 1 else "")
                if len(line) + len(token) > MAX_LINE:
                    break
            line += token
            j += run
        if len(line) > MAX_LINE or (j == i and n > 1):
            raise InputError("abscissa too long for an 80-character data line", field="x")
        out.append(line)
        if j >= n - 1:
            return out
        i = j
