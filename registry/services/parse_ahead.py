"""Parse large spectrum files in child processes while this process stores what is parsed.

Parsing (pandas' tokenizer and the numeric checks) and storing (hashing, inserts)
each take a large share of a big import, and threads do not overlap them (the
parser holds the GIL much of the time). A large wide-form CSV file is therefore cut
into whole-line windows, each parsed by a forked child that hands over batches of at
most ``chunk_rows`` spectra through a small queue; this process takes one batch from
each child in turn. Memory stays a few chunks per child; the children only read the
file and never touch the database.

Errors are sent as plain fields and raised again here with the same file, line and
field, so a bad file reads as it would without the children.
"""

from __future__ import annotations

import multiprocessing as mp
import os
import queue
import threading
from typing import Callable, Iterator

from ..errors import FormatError, InputError, RegistryError

#: Files smaller than this are parsed inline (forking would cost more than it saves).
PARALLEL_MIN_BYTES = 32 * 2**20
_DONE, _ERROR, _ITEM = "done", "error", "item"


def _child(produce: Callable[[], Iterator], q) -> None:
    try:
        for item in produce():
            q.put((_ITEM, item))
        q.put((_DONE, None))
    except InputError as exc:
        q.put((_ERROR, (type(exc).__name__, exc.message, exc.file, exc.line, exc.field)))
    except Exception as exc:  # anything else: reported, never a silent partial import
        q.put((_ERROR, ("RegistryError", f"{type(exc).__name__}: {exc}", None, None, None)))


def _rebuild(kind: str, message: str, file, line, field) -> Exception:
    if kind == "FormatError":
        return FormatError(message, file=file, line=line, field=field)
    if kind == "RegistryError":
        return RegistryError(message)
    return InputError(message, file=file, line=line, field=field)


def use_children(path) -> bool:
    """Large file, a second core, and called from the main thread: forking a process whose
    other threads may hold locks (a web server's, say) is not worth the risk."""
    try:
        return (os.path.getsize(path) >= PARALLEL_MIN_BYTES
                and "fork" in mp.get_all_start_methods() and (os.cpu_count() or 1) > 1
                and threading.current_thread() is threading.main_thread())
    except OSError:
        return False


def interleaved(producers: list[Callable[[], Iterator]], *, depth: int = 2) -> Iterator:
    """Items of every producer, one from each in turn, each producer run in a forked child."""
    ctx = mp.get_context("fork")
    channels = []
    try:
        for k, produce in enumerate(producers):
            q = ctx.Queue(maxsize=depth)
            child = ctx.Process(target=_child, args=(produce, q), daemon=True,
                                name=f"specledger-parse-{k}")
            child.start()
            channels.append((child, q))
        live = list(channels)
        while live:
            for child, q in list(live):
                kind, payload = _take(child, q)
                if kind == _DONE:
                    live.remove((child, q))
                elif kind == _ERROR:
                    raise _rebuild(*payload)
                else:
                    yield payload
    finally:
        for child, q in channels:
            if child.is_alive():
                child.terminate()
            child.join(timeout=5)
            q.close()


def _take(child, q):
    while True:
        try:
            return q.get(timeout=1.0)
        except queue.Empty:
            if not child.is_alive() and q.empty():
                raise RegistryError(f"a parser process stopped unexpectedly "
                                    f"(exit code {child.exitcode})") from None
