"""Population tables: grid specs, chunked builds, HDF5 files, a cache and an interpolating reader.

>>> from sahaboltz.tables import TableSpec, get_table, open_table    # doctest: +SKIP
>>> tab = open_table(get_table(TableSpec.from_file("grid.toml")))   # doctest: +SKIP
>>> tab.interpolate("fraction_Fe_II", 5800.0, 1e5)                  # doctest: +SKIP

The file layout is described in docs/table_format.md.  Names are imported on first use, so
that a command that only looks a table up in the cache starts fast.
"""

from __future__ import annotations

from sahaboltz._lazy import lazy_names

_LAZY = {
    "TableSpec": "sahaboltz.tables.spec", "spec_from_options": "sahaboltz.tables.spec",
    "build_table": "sahaboltz.tables.build",
    "get_table": "sahaboltz.tables.cache", "obtain_table": "sahaboltz.tables.cache",
    "TableResult": "sahaboltz.tables.cache", "table_key": "sahaboltz.tables.cache",
    "cache_dir": "sahaboltz.tables.cache", "TableCacheWarning": "sahaboltz.tables.cache",
    "open_table": "sahaboltz.tables.interpolate",
    "PopulationTable": "sahaboltz.tables.interpolate",
}

__getattr__, __dir__ = lazy_names(__name__, globals(), _LAZY)

__all__ = list(_LAZY)
