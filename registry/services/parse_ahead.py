"""Parse spectrum files in a child process while this process stores what is parsed.

Parsing (pandas' tokenizer, the numeric checks, hashing) and storing (inserts) each
take a large share of a big import, and threads do not overlap them (the parser holds
the GIL much of the time). A large wide-form CSV file is therefore cut into whole-line
windows: a forked child parses its window and hands over batches of at most
``chunk_rows`` spectra through a pipe, while this process stores every batch that is
ready and, when none is, parses a chunk of its own window instead of waiting (a child
needs a few tenths of a second before its first batch). Memory stays a few chunks per process; a
child only reads the file and never touches the database.

A folder of many small files (JCAMP-DX, one spectrum each) is shared the same way:
the child parses every second file and runs a few files ahead, this process parses the
others and stores every file's spectra in folder order (:func:`in_order`), so ids,
errors and the audit entry come out as they would from one process.

Errors are sent as plain fields and raised again here with the same file, line and
field, so a bad file reads as it would without the children.
"""

from __future__ import annotations

import functools
import multiprocessing as mp
import os
import queue
import threading
from multiprocessing.connection import wait
from typing import Callable, Iterator

from ..errors import FormatError, InputError, RegistryError

#: Files smaller than this are parsed inline (forking would cost more than it saves).
PARALLEL_MIN_BYTES = 32 * 2**20
#: A list of files is shared with a child when it has at least this many files and bytes,
#: and no file over FILE_MAX_BYTES (each file's spectra are held whole while in transit).
FILES_MIN_COUNT, FILES_MIN_BYTES, FILE_MAX_BYTES = 4, 2**20, 8 * 2**20
_DONE, _ERROR, _ITEM = "done", "error", "item"


def _child(produce: Callable[[], Iterator], conn, depth: int) -> None:
    """Run ``produce`` and send its items; a feeding thread writes to the pipe so that
    parsing the next chunk goes on while this one waits for the reader."""
    out: queue.Queue = queue.Queue(maxsize=depth)

    def feed() -> None:
        while True:
            message = out.get()
            try:
                conn.send(message)
            except (BrokenPipeError, OSError):  # the reader gave up; nothing to report to
                return
            if message[0] != _ITEM:
                return

    feeder = threading.Thread(target=feed, daemon=True)
    feeder.start()
    try:
        for item in produce():
            out.put((_ITEM, item))
        out.put((_DONE, None))
    except InputError as exc:
        out.put((_ERROR, _fields(exc)))
    except Exception as exc:  # anything else: reported, never a silent partial import
        out.put((_ERROR, ("RegistryError", f"{type(exc).__name__}: {exc}", None, None, None)))
    feeder.join()
    conn.close()


def _fields(exc: InputError) -> tuple:
    """An input error as plain, picklable fields (see :func:`_rebuild`), with the fields of
    each problem it stands for when it lists several (:func:`registry.errors.all_of`)."""
    parts = tuple(_fields(e) for e in getattr(exc, "errors", None) or ())
    return type(exc).__name__, exc.message, exc.file, exc.line, exc.field, parts


def _start(produce: Callable[[], Iterator], depth: int, name: str):
    """Fork a child running ``produce``; (process, receiving end of its pipe)."""
    ctx = mp.get_context("fork")
    receiver, sender = ctx.Pipe(duplex=False)
    child = ctx.Process(target=_child, args=(produce, sender, depth), daemon=True, name=name)
    child.start()
    sender.close()  # the child's end; closing ours lets a dead child show as EOF
    return child, receiver


def _stop(child, receiver) -> None:
    if child.is_alive():
        child.terminate()
    child.join(timeout=5)
    receiver.close()


def _rebuild(kind: str, message: str, file, line, field, parts: tuple = ()) -> Exception:
    if kind == "RegistryError":
        return RegistryError(message)
    exc = (FormatError if kind == "FormatError" else InputError)(message, file=file, line=line,
                                                                 field=field)
    if parts:
        exc.errors = [_rebuild(*p) for p in parts]
    return exc


def _can_fork() -> bool:
    """A second core, and called from the main thread: forking a process whose other
    threads may hold locks (a web server's, say) is not worth the risk."""
    return ("fork" in mp.get_all_start_methods() and (os.cpu_count() or 1) > 1
            and threading.current_thread() is threading.main_thread())


def use_children(path) -> bool:
    """Parse this one file in windows with a child (see :data:`PARALLEL_MIN_BYTES`)."""
    try:
        return os.path.getsize(path) >= PARALLEL_MIN_BYTES and _can_fork()
    except OSError:
        return False


def share_files(paths) -> bool:
    """Parse these files with a child, every second one (see :data:`FILES_MIN_BYTES`)."""
    try:
        sizes = [os.path.getsize(p) for p in paths]
    except OSError:
        return False
    return (len(sizes) >= FILES_MIN_COUNT and sum(sizes) >= FILES_MIN_BYTES
            and max(sizes) <= FILE_MAX_BYTES and _can_fork())


def interleaved(producers: list[Callable[[], Iterator]], *,
                local: Callable[[], Iterator] | None = None, depth: int = 2) -> Iterator:
    """Items of every producer, each run in a forked child, as they become ready; items of
    ``local`` (run here) whenever no child has one ready. Order between producers is
    not kept; within a producer it is."""
    children = []  # (process, receiving end)
    try:
        for k, produce in enumerate(producers):
            children.append(_start(produce, depth, f"specledger-parse-{k}"))
        mine = iter(local()) if local is not None else None
        live = dict((receiver, child) for child, receiver in children)
        while live or mine is not None:
            ready = wait(list(live), timeout=0)
            if not ready and mine is not None:
                try:
                    yield next(mine)
                except StopIteration:
                    mine = None
                continue
            if not ready:
                ready = wait(list(live))
            for receiver in ready:
                kind, payload = _receive(receiver, live[receiver])
                if kind == _ITEM:
                    yield payload
                elif kind == _DONE:
                    del live[receiver]
                else:
                    raise _rebuild(*payload)
    finally:
        for child, receiver in children:
            _stop(child, receiver)


def _outcomes(items: list, work: Callable) -> Iterator:
    """(result, None) or (None, error fields) for each item: a bad item is an answer, not
    the end of the others."""
    for item in items:
        try:
            yield work(item), None
        except InputError as exc:
            yield None, _fields(exc)


def in_order(items: list, work: Callable, *, depth: int = 4) -> Iterator[tuple]:
    """``(item, work(item), None)``, or ``(item, None, error)`` when ``work`` raised an
    InputError, for every item in order. The items at odd positions are worked on by a
    forked child that runs up to ``depth`` items ahead; this process works on the others
    when their turn comes. Any other exception ends the whole run."""
    produce = functools.partial(_outcomes, list(items)[1::2], work)
    child, receiver = _start(produce, depth, "specledger-parse-files")
    try:
        for k, item in enumerate(items):
            if k % 2 == 0:
                try:
                    result, error = work(item), None
                except InputError as exc:
                    result, error = None, exc
                yield item, result, error
                continue
            kind, payload = _receive(receiver, child)
            if kind == _ERROR:
                raise _rebuild(*payload)
            if kind != _ITEM:
                raise RegistryError("a parser process ended before its last file")
            result, error = payload
            yield item, result, _rebuild(*error) if error else None
    finally:
        _stop(child, receiver)


def _receive(receiver, child):
    try:
        return receiver.recv()
    except (EOFError, OSError):
        child.join(timeout=5)
        raise RegistryError(f"a parser process stopped unexpectedly "
                            f"(exit code {child.exitcode})") from None
