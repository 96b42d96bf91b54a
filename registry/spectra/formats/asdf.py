"""Vectorised decoding of a whole JCAMP-DX ``(X++(Y..Y))`` table in ASDF or AFFN form.

The character tables and rules are those of McDonald & Wilks, Appl. Spectrosc. 42:151
(1988): SQZ ``@A-I a-i`` (0, ±1..±9) starts an absolute ordinate, DIF ``%J-R j-r`` a
difference from the previous ordinate, DUP ``S-Z s`` (1..9) repeats the previous token
so many times in all; after a line that ends in DIF form the next line's first ordinate
repeats the last one (the Y-check) and is dropped.

Instead of one token at a time, every character of the table is classified at once
with lookup tables (numpy), tokens start where a class says so, integer tokens are
summed digit by digit, DUP counts become ``np.repeat`` counts and DIF runs become
cumulative sums. Ordinates are exact integers in the common case, so these sums give
bit for bit what one addition after the other gives.

:func:`decode_table` handles well-formed tables only. For anything else (a character
no form accepts, an exponent, a word such as ``nan``, a DUP in the wrong place, a
failed Y-check, a count that does not match NPOINTS, fractional differences) it returns
None, and the reader decodes the table line by line, which names the line and column
of the problem (:meth:`registry.spectra.formats.jcamp._Reader.decode_asdf_line`).
"""

from __future__ import annotations

import numpy as np

# Character classes.
_SEP, _DIGIT, _DOT, _SIGN, _SQZ, _DIF, _DUP, _BAD = range(8)
_CLASS = np.full(256, _BAD, dtype=np.int8)
# What the line decoder's [\s,;] separates on, in ASCII (str.isspace includes \x1c-\x1f).
for _c in range(128):
    if chr(_c).isspace() or chr(_c) in ",;":
        _CLASS[_c] = _SEP
_LEAD = np.zeros(256, dtype=np.float64)  # digit a character stands for (sign apart)
_NEGATIVE = np.zeros(256, dtype=bool)
for _c in "0123456789":
    _CLASS[ord(_c)], _LEAD[ord(_c)] = _DIGIT, int(_c)
_CLASS[ord(".")] = _DOT
_CLASS[ord("+")] = _CLASS[ord("-")] = _SIGN
_NEGATIVE[ord("-")] = True
for _kind, _pos, _neg in ((_SQZ, "@ABCDEFGHI", "abcdefghi"), (_DIF, "%JKLMNOPQR", "jklmnopqr")):
    for _d, _c in enumerate(_pos):
        _CLASS[ord(_c)], _LEAD[ord(_c)] = _kind, _d
    for _d, _c in enumerate(_neg, start=1):
        _CLASS[ord(_c)], _LEAD[ord(_c)], _NEGATIVE[ord(_c)] = _kind, _d, True
for _d, _c in enumerate("STUVWXYZs", start=1):
    _CLASS[ord(_c)], _LEAD[ord(_c)] = _DUP, _d
# The digit text a leading character stands for, for tokens converted with float().
_LEAD_TEXT = {chr(c): ("-" if _NEGATIVE[c] else "") + str(int(_LEAD[c]))
              for c in range(128) if _CLASS[c] in (_SQZ, _DIF, _DUP)}
_POW10 = 10.0 ** np.arange(16)
_MAX_DIGITS = 15  # integers below 10**15 < 2**53 are exact as float64, and so are their sums
_MAX_DUP_CHARS = 10  # a longer DUP token is refused by the line decoder
_EXACT = 2.0 ** 52  # bound on the ordinates and running sums of a table

_LOWER_E, _LOWER_N, _LOWER_A, _LOWER_I, _LOWER_F = (ord(c) for c in "enaif")


def _defer(raw: np.ndarray, after: np.ndarray) -> bool:
    """An exponent (or a sign after E, which the line decoder reads differently), or
    letters that may spell a word it refuses as non-finite (nan, inf)."""
    low = raw | 0x20  # ASCII letters in lower case
    if ((low == _LOWER_E) & (after == _SIGN)).any():
        return True
    a, b, c = low[:-2], low[1:-1], low[2:]
    return bool((((a == _LOWER_N) & (b == _LOWER_A) & (c == _LOWER_N))
                 | ((a == _LOWER_I) & (b == _LOWER_N) & (c == _LOWER_F))).any())


def decode_table(texts: list[str], n: int) -> tuple[np.ndarray, list[float], list[int]] | None:
    """Decode the data lines of one ``(X++(Y..Y))`` table.

    Parameters
    ----------
    texts : list of str
        The data lines, comments and surrounding blanks removed.
    n : int
        NPOINTS.

    Returns
    -------
    (ordinates, abscissas, starts) or None
        ``ordinates`` float64 of length ``n`` (before YFACTOR); per line its abscissa as
        written and the index of the ordinate it starts at (for a Y-check line, the
        repeated one). None when the table needs the line-by-line decoder.
    """
    text = "\n".join(texts)
    if not text.isascii():
        return None
    raw = np.frombuffer(text.encode("ascii"), dtype=np.uint8)
    cls = _CLASS[raw]
    if (cls == _BAD).any():
        return None
    before = np.empty_like(cls)
    before[0], before[1:] = _SEP, cls[:-1]
    after = np.empty_like(cls)
    after[-1], after[:-1] = _SEP, cls[1:]
    if _defer(raw, after):
        return None
    # A sign needs a digit or a point after it; a point needs a digit beside it.
    if ((cls == _SIGN) & (after != _DIGIT) & (after != _DOT)).any():
        return None
    dots = cls == _DOT
    if (dots & (before != _DIGIT) & (after != _DIGIT)).any():
        return None
    inside = cls != _SEP
    starts_here = (cls >= _SIGN) | (inside & (before == _SEP))
    first = np.flatnonzero(starts_here)  # first character of each token
    ends_here = inside & ((after == _SEP) | np.append(starts_here[1:], True))
    last = np.flatnonzero(ends_here)  # last character of each token, in token order
    token = np.cumsum(starts_here, dtype=np.int32) - 1  # of each character (not separators)
    kind = cls[first]
    # An absolute value (AFFN or SQZ) counts as _SQZ from here on, as for the line decoder.
    lead_kind = np.where(kind <= _SIGN, _SQZ, kind)

    # Line of each token (the joining newlines separate tokens).
    n_lines = len(texts)
    line = np.searchsorted(np.flatnonzero(raw == 10), first)
    per_line = np.bincount(line, minlength=n_lines)
    if (per_line < 2).any():  # an empty line, or an abscissa without ordinates
        return None
    line_first = np.concatenate(([0], np.cumsum(per_line)[:-1]))  # token index of each abscissa
    is_abscissa = np.zeros(first.size, dtype=bool)
    is_abscissa[line_first] = True

    # Values. A token holds at most one point, and a DUP token none.
    n_dots = np.bincount(token[dots], minlength=first.size)
    is_dup = kind == _DUP
    if (n_dots > 1).any() or (n_dots[is_dup] > 0).any():
        return None
    if ((last - first + 1)[is_dup] > _MAX_DUP_CHARS).any():
        return None
    # Integer tokens digit by digit (a leading letter stands for its digit): exact below
    # 10**15. Decimals and longer digit strings are read with float(), as the line decoder.
    digit_at = np.flatnonzero(inside & (cls != _SIGN) & ~dots)
    digit_token = token[digit_at]
    place = np.minimum(last[digit_token] - digit_at, _MAX_DIGITS)
    n_digits = np.bincount(digit_token, minlength=first.size)
    magnitude = np.bincount(digit_token, weights=_LEAD[raw[digit_at]] * _POW10[place],
                            minlength=first.size)
    value = np.where(_NEGATIVE[raw[first]], -magnitude, magnitude)
    exact = np.flatnonzero((n_dots > 0) | (n_digits > _MAX_DIGITS))
    if exact.size:
        words = [text[a:b] for a, b in zip(first[exact].tolist(), (last[exact] + 1).tolist())]
        for k in np.flatnonzero(kind[exact] >= _SQZ).tolist():
            words[k] = _LEAD_TEXT[words[k][0]] + words[k][1:]
        value[exact] = [float(word) for word in words]
        if not np.isfinite(value).all():
            return None

    # Ordinates: the first of a line is absolute; DUP follows an ordinate that is no DUP.
    if (lead_kind[line_first] != _SQZ).any() or (lead_kind[line_first + 1] != _SQZ).any():
        return None
    if (is_dup[1:] & (is_dup[:-1] | is_abscissa[:-1])).any():
        return None
    # Each ordinate token that is no DUP stands for itself and the DUP repeats after it.
    keep = ~is_abscissa & ~is_dup
    repeat = np.ones(first.size, dtype=np.int64)
    dup_at = np.flatnonzero(is_dup)
    repeat[dup_at - 1] = value[dup_at].astype(np.int64)
    ops = np.flatnonzero(keep)
    counts = repeat[ops]
    is_dif = lead_kind[ops] == _DIF
    op_line = line[ops]  # every line has an op: its first ordinate
    ends_in_dif = is_dif[np.flatnonzero(np.append(op_line[1:] != op_line[:-1], True))]
    y_check = np.zeros(n_lines, dtype=bool)
    y_check[1:] = ends_in_dif[:-1]
    total = int(counts.sum())
    if total != n + int(y_check.sum()):
        return None
    op_value = value[ops]
    if is_dif.any() and (op_value != np.round(op_value)).any():
        return None  # fractional differences: the running sums would round differently
    steps_bound = np.abs(op_value[is_dif]) @ counts[is_dif].astype(np.float64)
    if steps_bound + np.abs(op_value[~is_dif]).max() > _EXACT:
        return None  # a running sum could leave the integers that float64 holds exactly

    # Expand: an absolute value, then its DUP copies as steps of zero; a difference and
    # its DUP copies as that step. y = the run's absolute value + the steps since it.
    step = np.repeat(np.where(is_dif, op_value, 0.0), counts)
    is_first_copy = np.zeros(total, dtype=bool)
    is_first_copy[np.concatenate(([0], np.cumsum(counts)[:-1]))] = True
    absolute = np.repeat(~is_dif, counts) & is_first_copy
    run = np.cumsum(absolute) - 1  # which absolute value each ordinate counts from
    base = np.repeat(op_value, counts)[absolute]
    sums = np.cumsum(step)
    y = base[run] + (sums - sums[absolute][run])
    y[absolute] = base  # an absolute ordinate as written (keeps -0.0, as the line decoder)

    # Per line: where its ordinates start in y; Y-check lines repeat the previous ordinate.
    line_counts = np.bincount(op_line, weights=counts, minlength=n_lines).astype(np.int64)
    line_start = np.concatenate(([0], np.cumsum(line_counts)[:-1]))
    checked = np.flatnonzero(y_check)
    repeated, expected = y[line_start[checked]], y[line_start[checked] - 1]
    if (np.abs(repeated - expected) > 1e-9 * np.maximum(np.abs(expected),
                                                         np.abs(repeated))).any():
        return None
    kept = np.ones(total, dtype=bool)
    kept[line_start[checked]] = False
    start_index = line_start - np.cumsum(y_check)  # index in the kept ordinates
    return y[kept], value[line_first].tolist(), start_index.tolist()
