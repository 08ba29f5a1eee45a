"""The columnar store: every campaign's levels, overall levels, single-event metrics and
sign-off as Parquet files, one folder per campaign (``FOLDER/NAME/*.parquet``), readable by
pandas, by pyarrow and by SQL engines such as DuckDB across campaigns::

    SELECT campaign, label, region, band_hz, avg(level_db)
    FROM read_parquet('store/*/levels.parquet') GROUP BY ALL

Every row names its campaign (``campaign``) and, where it belongs to one, its pass and label.
Each file also carries the campaign's provenance in its metadata (key ``flyover``, JSON), and
``provenance.parquet`` holds it as rows (``campaign``, ``key``, ``value``), for queries.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd

from flyover.io.atomic import atomic_path
from flyover.model.errors import FlyoverInputError

# Each table of a campaign's folder and the per-pass result file (or campaign file) it holds.
TABLES = {
    "levels": "every pass's levels.csv (with pass and label)",
    "overall": "every pass's levels_overall.csv (with pass and label)",
    "metrics": "every pass's event_metrics.csv (with pass and label)",
    "signoff": "signoff.csv",
}
PROVENANCE = "provenance"
METADATA_KEY = b"flyover"


def table_path(folder, name: str, table: str) -> Path:
    """A table of one campaign in a store folder."""
    return Path(folder) / name / f"{table}.parquet"


def campaign_files(folder, name: str) -> list[Path]:
    """Every file a campaign keeps in the store (its tables and its provenance)."""
    return [table_path(folder, name, t) for t in (*TABLES, PROVENANCE)]


def write_parquet(path, frame: pd.DataFrame, provenance: dict) -> Path:
    """A table as Parquet (written whole or not at all), the provenance in its metadata."""
    import pyarrow as pa
    import pyarrow.parquet as pq
    table = pa.Table.from_pandas(frame, preserve_index=False)
    meta = dict(table.schema.metadata or {})
    meta[METADATA_KEY] = json.dumps(provenance, sort_keys=True).encode()
    with atomic_path(path) as tmp:
        pq.write_table(table.replace_schema_metadata(meta), tmp)
    return Path(path)


def write_campaign(folder, name: str, tables: dict[str, pd.DataFrame],
                   provenance: dict) -> list[Path]:
    """Write a campaign's tables (keys of :data:`TABLES`) and its provenance."""
    unknown = set(tables) - set(TABLES)
    if unknown:
        raise RuntimeError(f"not tables of the store: {sorted(unknown)}")
    rows = pd.DataFrame([{"campaign": name, "key": k, "value": str(v)}
                         for k, v in sorted(provenance.items())])
    written = [write_parquet(table_path(folder, name, t), tables[t].assign(campaign=name)
                             if "campaign" not in tables[t] else tables[t], provenance)
               for t in TABLES]
    return written + [write_parquet(table_path(folder, name, PROVENANCE), rows, provenance)]


def stored_campaigns(folder) -> list[str]:
    """The campaigns of a store folder (those with every table)."""
    root = Path(folder)
    return sorted(p.name for p in root.iterdir() if p.is_dir()
                  and all(table_path(root, p.name, t).is_file() for t in TABLES)) \
        if root.is_dir() else []


def query(folder, sql: str, **tables) -> pd.DataFrame:
    """Run SQL over a store with DuckDB: each table name of :data:`TABLES` (and
    ``provenance``) reads every campaign's file of that table.

    Parameters
    ----------
    sql : str
        A query naming the tables, e.g. ``SELECT DISTINCT campaign, label FROM levels``;
        ``$name`` parameters are taken from the keyword arguments.
    """
    import duckdb
    root = Path(folder)
    if not stored_campaigns(root):
        raise FlyoverInputError("no campaign in the store", str(root),
                                f"folders NAME/ holding {', '.join(TABLES)} as .parquet",
                                "none", "run the campaign's workflow (its 'store' step) first")
    with duckdb.connect() as con:
        for table in (*TABLES, PROVENANCE):
            # A view cannot take parameters: the paths go in as SQL string literals.
            files = ", ".join("'" + str(table_path(root, n, table)).replace("'", "''") + "'"
                              for n in stored_campaigns(root))
            con.execute(f"CREATE VIEW {table} AS SELECT * FROM read_parquet([{files}], "
                        "union_by_name = true)")
        return con.execute(sql, tables).df()
