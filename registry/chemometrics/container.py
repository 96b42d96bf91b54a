"""A byte container for named plain arrays plus a JSON document; no pickle.

Layout (all integers little-endian)::

    8 bytes   magic  b"SLARRAY1"
    8 bytes   uint64 length L of the manifest
    L bytes   manifest: UTF-8 JSON, keys sorted, no whitespace:
              {"arrays": [{"name", "dtype", "shape", "offset", "nbytes"}, ...],
               "json": <the caller's document>}
    ...       array payloads, C order, each starting at a multiple of 8
              bytes from the start of the payload section, zero padded

Only ``<f8``, ``<i8`` and ``|b1`` arrays are allowed. The same content always
gives the same bytes (no timestamps), so the SHA-256 identifies the content.
"""

from __future__ import annotations

import json
import struct
from typing import Any

import numpy as np

from registry.errors import FormatError, IntegrityError
from registry.lineage.canonical import sha256_hex

MAGIC = b"SLARRAY1"
_DTYPES = {"<f8": np.dtype("<f8"), "<i8": np.dtype("<i8"), "|b1": np.dtype("|b1")}


def _canonical(arr: np.ndarray) -> np.ndarray:
    arr = np.asarray(arr)
    if arr.dtype.kind == "f":
        return np.ascontiguousarray(arr, dtype="<f8")
    if arr.dtype.kind in "iu":
        return np.ascontiguousarray(arr, dtype="<i8")
    if arr.dtype.kind == "b":
        return np.ascontiguousarray(arr, dtype="|b1")
    raise FormatError(f"cannot store array of dtype {arr.dtype}")


def pack(arrays: dict[str, np.ndarray], document: Any) -> bytes:
    """Serialise arrays (sorted by name) and a JSON-able document."""
    entries, chunks, offset = [], [], 0
    for name in sorted(arrays):
        arr = _canonical(arrays[name])
        raw = arr.tobytes(order="C")
        entries.append({"name": name, "dtype": arr.dtype.str, "shape": list(arr.shape),
                        "offset": offset, "nbytes": len(raw)})
        pad = (-len(raw)) % 8
        chunks.append(raw + b"\0" * pad)
        offset += len(raw) + pad
    manifest = json.dumps({"arrays": entries, "json": document}, sort_keys=True,
                          separators=(",", ":"), allow_nan=False).encode("utf-8")
    return MAGIC + struct.pack("<Q", len(manifest)) + manifest + b"".join(chunks)


def unpack(blob: bytes, expected_sha256: str | None) -> tuple[dict[str, np.ndarray], Any]:
    """Verify the hash (if given) first, then parse. Arrays are writable copies."""
    if expected_sha256 is not None:
        actual = sha256_hex(blob)
        if actual != str(expected_sha256).lower():
            raise IntegrityError(f"model artifact hash mismatch: expected {expected_sha256}, "
                                 f"got {actual}")
    if len(blob) < 16 or blob[:8] != MAGIC:
        raise FormatError("not a model artifact (bad magic bytes)")
    (length,) = struct.unpack("<Q", blob[8:16])
    if 16 + length > len(blob):
        raise FormatError("model artifact manifest is truncated")
    try:
        manifest = json.loads(blob[16:16 + length].decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise FormatError(f"model artifact manifest is not valid JSON: {exc}") from None
    payload = memoryview(blob)[16 + length:]
    arrays: dict[str, np.ndarray] = {}
    expected_offset = 0
    for entry in manifest.get("arrays", []):
        name, dtype = entry.get("name"), _DTYPES.get(entry.get("dtype"))
        if dtype is None:
            raise FormatError(f"array {name!r} has a disallowed dtype {entry.get('dtype')!r}",
                              field=str(name))
        shape = tuple(int(s) for s in entry["shape"])
        nbytes = int(np.prod(shape, dtype=np.int64)) * dtype.itemsize
        if entry["offset"] != expected_offset or entry["nbytes"] != nbytes:
            raise FormatError(f"array {name!r} has an inconsistent offset or size", field=str(name))
        end = expected_offset + nbytes
        if end > len(payload):
            raise FormatError(f"array {name!r} is truncated", field=str(name))
        arrays[name] = np.frombuffer(payload[expected_offset:end], dtype=dtype).reshape(shape).copy()
        expected_offset = end + (-nbytes) % 8
    if expected_offset != len(payload):
        raise FormatError("model artifact has trailing or missing bytes")
    return arrays, manifest.get("json")
