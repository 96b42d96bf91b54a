"""How the front end words an error: located for a person, option names said in words,
uploaded names instead of server paths."""

from __future__ import annotations

from registry.errors import InputError, PermissionDenied
from ui.common import field_label, readable


def test_option_names_become_words():
    assert field_label("--reason") == "Reason"
    assert field_label("--on-duplicate") == "On duplicate"
    assert field_label("NAME") == "Name"
    assert field_label("--n/--budget") == "N or budget"
    assert field_label(None) == ""


def test_an_error_names_the_uploaded_file_not_the_server_path():
    exc = InputError("value 'x' is not a number", file="/tmp/specledger-upload-ab12/0/week 7.csv",
                     line=12, field="4000.0")
    names = {"/tmp/specledger-upload-ab12/0/week 7.csv": "week 7.csv"}
    assert readable(exc, names) == "week 7.csv, line 12, 4000.0: value 'x' is not a number"
    # without a map, the server's folders are still never shown
    assert readable(exc).startswith("week 7.csv, line 12")
    assert readable(InputError("a reason is required", field="--reason")) == "Reason: a reason is required"
    assert readable(PermissionDenied("user 'x' may not add users")) == "user 'x' may not add users"
