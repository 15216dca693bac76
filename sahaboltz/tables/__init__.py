"""Population tables: grid specs, chunked builds, HDF5 files, a cache and an interpolating reader.

>>> from sahaboltz.tables import TableSpec, get_table, open_table    # doctest: +SKIP
>>> tab = open_table(get_table(TableSpec.from_file("grid.toml")))   # doctest: +SKIP
>>> tab.interpolate("fraction_Fe_II", 5800.0, 1e5)                  # doctest: +SKIP

The file layout is described in docs/table_format.md.
"""

from sahaboltz.tables.build import build_table
from sahaboltz.tables.cache import (TableCacheWarning, TableResult, cache_dir, get_table,
                                    obtain_table, table_key)
from sahaboltz.tables.interpolate import PopulationTable, open_table
from sahaboltz.tables.spec import TableSpec, spec_from_options

__all__ = ["TableSpec", "spec_from_options", "build_table", "get_table", "obtain_table",
           "TableResult", "table_key",
           "cache_dir", "TableCacheWarning", "open_table", "PopulationTable"]
