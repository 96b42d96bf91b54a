"""Canonical JSON, signed-content hashes and signature records."""

import hashlib
import json
import uuid
from datetime import date, datetime, timedelta, timezone
from enum import Enum

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from registry.errors import InputError
from registry.lifecycle.signatures import (
    MODEL_VERSION_PARTS,
    SIGNATURE_MEANINGS,
    SignatureRecord,
    canonical_json,
    sha256_hex,
    signed_content_hash,
)
from registry.lifecycle.states import LifecycleAction

PARTS = {"artifact_sha256": "a" * 64, "validation_record_sha256": "b" * 64,
         "calibration_set_sha256": "c" * 64}
SIGNED_AT = datetime(2026, 5, 4, 9, 30, tzinfo=timezone.utc)


def test_sha256_known_vector():
    # FIPS 180-2, appendix B.1: SHA-256("abc")
    assert sha256_hex("abc") == ("ba7816bf8f01cfea414140de5dae2223"
                                 "b00361a396177a9cb410ff61f20015ad")


def test_canonical_json_layout():
    # sorted keys, no spaces, UTF-8 kept: compared with the standard library's own encoder
    obj = {"b": [1, 2.5, None, True], "a": "Prüfgas é", "c": {"z": 1, "y": "x"}}
    expected = json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert canonical_json(obj) == expected
    assert canonical_json(obj) == '{"a":"Prüfgas é","b":[1,2.5,null,true],"c":{"y":"x","z":1}}'


def test_datetimes_become_utc_with_z():
    # ISO 8601 extended format, UTC designator "Z"
    berlin = datetime(2026, 7, 1, 14, 0, 0, 123456, tzinfo=timezone(timedelta(hours=2)))
    assert canonical_json({"t": berlin}) == '{"t":"2026-07-01T12:00:00.123456Z"}'
    # same instant, different zone: same text
    assert canonical_json(berlin) == canonical_json(berlin.astimezone(timezone.utc))
    assert canonical_json(date(2028, 2, 29)) == '"2028-02-29"'
    with pytest.raises(InputError):
        canonical_json({"t": datetime(2026, 7, 1)})


def test_numpy_values_are_their_python_values():
    obj = {"f": np.float64(0.1), "i": np.int64(7), "b": np.bool_(True),
           "a": np.array([[1.5, 2.0]]), "f32": np.float32(0.25)}
    assert canonical_json(obj) == canonical_json({"f": 0.1, "i": 7, "b": True,
                                                  "a": [[1.5, 2.0]], "f32": 0.25})


@given(st.floats(allow_nan=False, allow_infinity=False))
@settings(max_examples=200, deadline=None)
def test_floats_round_trip_exactly(x):
    # repr is the shortest text that reads back to the same double (Python float repr)
    assert json.loads(canonical_json([x]))[0] == x
    assert canonical_json(x) == repr(x)


json_values = st.recursive(
    st.none() | st.booleans() | st.integers() | st.text()
    | st.floats(allow_nan=False, allow_infinity=False),
    lambda children: st.lists(children, max_size=4)
    | st.dictionaries(st.text(max_size=5), children, max_size=4),
    max_leaves=15)


@given(st.dictionaries(st.text(max_size=8), json_values, max_size=6), st.randoms())
@settings(max_examples=80, deadline=None)
def test_key_order_does_not_matter_and_text_reads_back(obj, rnd):
    items = list(obj.items())
    rnd.shuffle(items)
    assert canonical_json(dict(items)) == canonical_json(obj)
    assert json.loads(canonical_json(obj)) == obj


@pytest.mark.parametrize("bad,field", [({"x": float("nan")}, "$.x"), ({"x": [1, float("inf")]}, "$.x[1]"),
                                       ({1: "a"}, "$"), ({"s": {1, 2}}, "$.s"),
                                       ({"b": b"raw"}, "$.b")])
def test_ambiguous_values_are_refused_with_their_path(bad, field):
    with pytest.raises(InputError) as info:
        canonical_json(bad)
    assert info.value.field == field


def test_enums_and_uuids():
    class Colourless(str, Enum):
        A = "a"

    u = uuid.UUID("12345678-1234-5678-1234-567812345678")
    assert canonical_json({Colourless.A: u}) == '{"a":"12345678-1234-5678-1234-567812345678"}'


def test_signed_content_hash_is_sha256_of_the_canonical_text():
    text = ('{"artifact_sha256":"' + "a" * 64 + '","calibration_set_sha256":"' + "c" * 64
            + '","validation_record_sha256":"' + "b" * 64 + '"}')
    assert signed_content_hash(PARTS) == hashlib.sha256(text.encode("utf-8")).hexdigest()
    assert set(MODEL_VERSION_PARTS) == set(PARTS)


def test_signed_content_hash_refuses_empty_or_non_text_parts():
    for bad in ({}, {"artifact_sha256": None}, {"artifact_sha256": ""}, {"": "x"}):
        with pytest.raises(InputError):
            signed_content_hash(bad)


def test_meanings_per_action():
    # 21 CFR Part 11 §11.50(a)(3) asks that the meaning be stated
    assert {a.value: m for a, m in SIGNATURE_MEANINGS.items()} == {
        "approve": "approved as reviewer", "reject": "rejected as reviewer",
        "activate": "activated for use", "retire": "retired from use"}


def test_signature_record_holds_name_time_meaning():
    # 21 CFR Part 11 §11.50(a): printed name, date and time, meaning
    sig = SignatureRecord.sign(signer_id=3, signer_name="R. Example", action="approve",
                               parts=PARTS, signed_at=SIGNED_AT)
    assert sig.meaning == "approved as reviewer"
    assert sig.action is LifecycleAction.APPROVE
    assert sig.manifestation() == "R. Example, 2026-05-04 09:30:00 UTC: approved as reviewer"
    # shown in the site's zone: Berlin is on CEST (UTC+2) in May
    assert sig.manifestation("Europe/Berlin") == ("R. Example, 2026-05-04 11:30:00 CEST: "
                                                  "approved as reviewer")
    stored = sig.as_dict()
    assert stored["signed_at"] == "2026-05-04T09:30:00.000000Z"
    assert json.loads(canonical_json(stored))["content_hash"] == sig.content_hash


def test_signature_breaks_when_signed_content_changes():
    sig = SignatureRecord.sign(signer_id=3, signer_name="R. Example", action="activate",
                               parts=PARTS, signed_at=SIGNED_AT)
    assert sig.is_intact(dict(reversed(list(PARTS.items()))))
    for name in PARTS:
        changed = dict(PARTS, **{name: PARTS[name][:-1] + "0"})
        assert not sig.is_intact(changed), name
    assert not sig.is_intact(dict(PARTS, extra_sha256="d" * 64))
    assert not sig.is_intact({k: v for k, v in PARTS.items() if k != "artifact_sha256"})
    assert not sig.is_intact({})


def test_unsigned_actions_and_incomplete_signers_are_refused():
    with pytest.raises(InputError):
        SignatureRecord.sign(signer_id=3, signer_name="R", action="submit", parts=PARTS,
                             signed_at=SIGNED_AT)
    with pytest.raises(InputError):
        SignatureRecord.sign(signer_id=3, signer_name="  ", action="approve", parts=PARTS,
                             signed_at=SIGNED_AT)
    with pytest.raises(InputError):
        SignatureRecord.sign(signer_id=3, signer_name="R", action="approve", parts=PARTS,
                             signed_at=datetime(2026, 5, 4))
