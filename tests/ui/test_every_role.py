"""Every page opens for every role without an exception or an error message (AppTest).

The lab manager's pass is in test_app.py; here the other four roles, the admin included
(the Admin page is new, and the admin holds none of the other pages' duties).
"""

from __future__ import annotations

import pytest

from tests.ui.helpers import PAGES, open_page, signed_in
from ui.common import CAUTION


@pytest.mark.parametrize("role", ["admin", "analyst", "reviewer", "auditor"])
def test_every_page_opens_for_the_role(ui_reg, role):
    at = signed_in(role)
    for page in PAGES:
        at = open_page(at, page)
        assert not at.exception, (page, [e.value for e in at.exception])
        assert not at.error, (page, [e.value for e in at.error])
        assert CAUTION in [c.value for c in at.sidebar.caption], page
