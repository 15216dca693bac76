"""Where the project's data live: the shipped level_data and (for re-imports) the raw sources."""

from __future__ import annotations

import os
from pathlib import Path

from sahaboltz.errors import NoDataError

#: repository root when the package runs from a source checkout (an editable install)
REPO_ROOT = Path(__file__).resolve().parents[2]


def level_data_dir() -> Path:
    """Directory of the project's level_data (``$SAHABOLTZ_LEVEL_DATA`` overrides)."""
    env = os.environ.get("SAHABOLTZ_LEVEL_DATA")
    path = Path(env) if env else REPO_ROOT / "level_data"
    if not path.is_dir():
        raise NoDataError(
            f"level data directory {path} not found: install sahaboltz from a source checkout "
            "(pip install -e .) or point SAHABOLTZ_LEVEL_DATA at a level_data directory")
    return path


def shared_data_dir() -> Path | None:
    """The raw source data (NIST ASD exports, Barklem & Collet tables) next to the checkout.

    ``$SAHABOLTZ_SOURCE_DATA`` overrides; returns None when absent, so tests that re-run the
    importers can skip with a clear reason.
    """
    env = os.environ.get("SAHABOLTZ_SOURCE_DATA")
    candidates = [Path(env)] if env else [REPO_ROOT.parent / "shared" / "data"]
    for path in candidates:
        if (path / "nist_asd").is_dir():
            return path
    return None
