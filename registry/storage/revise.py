"""Developer tool: autogenerate a new migration revision from the models.

Usage: ``python -m registry.storage.revise "message"``. Builds a scratch SQLite
database at the current head and lets Alembic compare it with the models.
"""

from __future__ import annotations

import sys
import tempfile
from pathlib import Path

from alembic import command

from .engine import alembic_config, upgrade


def main(message: str) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        url = f"sqlite:///{Path(tmp) / 'scratch.db'}"
        upgrade(url)
        command.revision(alembic_config(url), message=message, autogenerate=True)


if __name__ == "__main__":
    main(" ".join(sys.argv[1:]) or "schema change")
