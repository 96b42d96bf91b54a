"""Developer tool for migrations.

``python -m registry.storage.revise "message"``
    autogenerate a new revision against a scratch SQLite database at head.
    Review it before committing: Alembic does not compare CHECK constraints or
    triggers, so those are written by hand (see revisions 0002 and 0004).
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

from alembic import command

from .engine import alembic_config, upgrade


def new_revision(message: str) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        url = f"sqlite:///{Path(tmp) / 'scratch.db'}"
        upgrade(url)
        command.revision(alembic_config(url), message=message, autogenerate=True)


if __name__ == "__main__":
    new_revision(" ".join(sys.argv[1:]) or "schema change")
