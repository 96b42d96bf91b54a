"""The pages of the navigation, and which of them a user's roles show."""

from __future__ import annotations

from collections.abc import Iterable

from registry.lifecycle.permissions import Action, is_allowed

#: (script, title, icon[, action]): a page with an action is in the navigation only for the
#: roles that may do it (every other page is for every signed-in user).
PAGES = [
    ("pages/overview.py", "Overview", ":material/dashboard:"),
    ("pages/coverage.py", "Coverage", ":material/scatter_plot:"),
    ("pages/send_list.py", "Send list", ":material/science:"),
    ("pages/models.py", "Models", ":material/model_training:"),
    ("pages/train.py", "Train", ":material/tune:", Action.MODEL_TRAIN),
    ("pages/qc.py", "QC charts", ":material/monitoring:"),
    ("pages/due.py", "Due", ":material/event:"),
    ("pages/trace.py", "Trace", ":material/account_tree:"),
    ("pages/imports.py", "Import", ":material/upload_file:"),
    ("pages/admin.py", "Admin", ":material/admin_panel_settings:"),
]


def pages_for(roles: Iterable[str]) -> list[tuple[str, str, str]]:
    """(script, title, icon) of the pages the roles show, in navigation order."""
    roles = set(roles)
    return [(path, title, icon) for path, title, icon, *needs in PAGES
            if all(is_allowed(roles, a) for a in needs)]
