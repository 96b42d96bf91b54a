"""What ``--format json`` prints of stored records: explicit allow-lists, never a dump of
every column with secrets removed by name."""

from __future__ import annotations

import json

import pytest
from sqlalchemy import LargeBinary

from registry.commands.common import json_text
from registry.storage.output_fields import RECORD_FIELDS, output_record
from registry.services import admin
from registry.storage.engine import make_engine, session_scope, upgrade
from registry.storage.models import Spectrum, User


@pytest.fixture
def engine(tmp_path):
    url = f"sqlite:///{tmp_path / 'out.db'}"
    upgrade(url)
    eng = make_engine(url)
    yield eng
    eng.dispose()


def test_allow_lists_name_real_columns_and_no_secret_or_blob():
    for model, fields in RECORD_FIELDS.items():
        columns = model.__table__.columns
        assert len(set(fields)) == len(fields), model.__name__
        assert set(fields) <= set(columns.keys()), (model.__name__, set(fields) - set(columns.keys()))
        for name in fields:
            assert not isinstance(columns[name].type, LargeBinary), (model.__name__, name)
            assert "password" not in name, (model.__name__, name)


def test_a_user_prints_exactly_its_allow_list_even_with_a_new_column(engine, monkeypatch):
    with session_scope(engine) as s:
        user = admin.add_user(s, None, "root", ["admin"], "correct-horse-1", full_name="R. Oot")
        doc = json.loads(json_text(user))
        assert list(doc) == list(RECORD_FIELDS[User])
        assert doc["name"] == "root" and doc["roles"] == ["admin"]
        # A column added later (here: an API token appearing in the model's own dump)
        # must not reach the output until someone adds it to the allow-list.
        original = User.model_dump

        def with_token(self, *args, **kwargs):
            return {**original(self, *args, **kwargs), "api_token": "s3cret"}

        monkeypatch.setattr(User, "model_dump", with_token)
        assert "s3cret" not in json_text(user) and "password_hash" not in json_text([user])
        assert json.loads(json_text({"user": user}))["user"] == doc


def test_a_record_kind_without_an_allow_list_is_refused():
    with pytest.raises(TypeError, match="allow-list"):
        output_record(Spectrum(sample_id=1, instrument_id=1, axis_id=1, data=b"", sha256="0" * 64))
