"""The names of the molecule sets the solver accepts (``molecules=...``, CLI ``--molecules``).

Kept apart from the molecular engine so that option parsers and spec checks can offer the
choices without importing the engine (scipy, the molecule data): a command-line cache hit
must not pay for them.
"""

from __future__ import annotations

#: ``default`` = ``all``: every molecule with data (diatomics of Barklem & Collet 2016 and the
#: NASA polyatomics and ions); ``diatomics``; ``abundant``: 23 common diatomics; ``none``
MOLECULE_SETS = ("default", "all", "diatomics", "abundant", "none")

__all__ = ["MOLECULE_SETS"]
