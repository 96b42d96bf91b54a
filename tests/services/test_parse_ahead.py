"""Parsing in a child process while this one stores: every item once, errors as raised."""

from __future__ import annotations

import functools
import multiprocessing as mp
import os

import pytest

from registry.errors import FormatError, RegistryError
from registry.services import parse_ahead

pytestmark = pytest.mark.skipif("fork" not in mp.get_all_start_methods(),
                                reason="the parse-ahead path needs fork")


def _numbers(start: int, stop: int, fail_at: int | None = None, crash_at: int | None = None):
    for k in range(start, stop):
        if k == fail_at:
            raise FormatError("value 'x' is not a number", file="f.csv", line=k, field="4000.0")
        if k == crash_at:
            os._exit(3)  # a child killed mid-file (out of memory, say)
        yield k


def _producer(*args, **kwargs):
    return functools.partial(_numbers, *args, **kwargs)


def test_every_item_arrives_once_in_producer_order():
    got = list(parse_ahead.interleaved([_producer(100, 160), _producer(200, 230)],
                                       local=_producer(0, 40)))
    assert sorted(got) == list(range(40)) + list(range(100, 160)) + list(range(200, 230))
    for lo, hi in ((0, 40), (100, 160), (200, 230)):  # order within each producer is kept
        mine = [k for k in got if lo <= k < hi]
        assert mine == sorted(mine)


def test_a_childs_format_error_comes_back_with_its_file_line_and_field():
    with pytest.raises(FormatError) as err:
        list(parse_ahead.interleaved([_producer(0, 50, fail_at=37)], local=_producer(100, 110)))
    assert (err.value.file, err.value.line, err.value.field) == ("f.csv", 37, "4000.0")


def test_an_error_in_this_process_stops_the_children():
    with pytest.raises(FormatError) as err:
        list(parse_ahead.interleaved([_producer(0, 10**9)], local=_producer(0, 20, fail_at=5)))
    assert err.value.line == 5
    assert not [p for p in mp.active_children() if p.name.startswith("specledger-parse")]


def test_a_child_that_dies_is_an_error_not_a_short_import():
    with pytest.raises(RegistryError, match="stopped unexpectedly"):
        list(parse_ahead.interleaved([_producer(0, 100, crash_at=60)]))


def _square_or_refuse(k: int) -> int:
    if k % 7 == 3:
        raise FormatError(f"item {k} refused", file=f"f{k}.jdx", line=k, field="XYDATA")
    if k == 99:
        raise ZeroDivisionError("a bug, not bad input")
    return k * k


def test_in_order_answers_every_item_in_order_with_its_own_error():
    got = list(parse_ahead.in_order(list(range(30)), _square_or_refuse))
    assert [item for item, _, _ in got] == list(range(30))
    for k, result, error in got:
        if k % 7 == 3:  # on both sides of the split: 3, 17 here; 10, 24 in the child
            assert result is None and isinstance(error, FormatError)
            assert (error.file, error.line, error.field) == (f"f{k}.jdx", k, "XYDATA")
        else:
            assert error is None and result == k * k


def test_in_order_stops_on_anything_but_bad_input():
    with pytest.raises(RegistryError, match="ZeroDivisionError"):  # 99 at position 9: child
        list(parse_ahead.in_order(list(range(90, 110)), _square_or_refuse))
    with pytest.raises(ZeroDivisionError):  # 99 at position 0: this process
        list(parse_ahead.in_order(list(range(99, 110)), _square_or_refuse))
    assert not [p for p in mp.active_children() if p.name.startswith("specledger-parse")]
