"""The columnar store: Parquet files per campaign, read back by pandas, pyarrow and DuckDB, and
labels compared from it across campaigns."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from test_compare import levels, metrics, side

from flyover.io.results import store
from flyover.model.errors import FlyoverInputError
from flyover.pipeline._compare import compare, sides_from_sources


def _tables(label: str, offsets, *, rejected=()) -> dict[str, pd.DataFrame]:
    passes = [f"p{k}" for k in range(len(offsets))]
    return {
        "levels": pd.concat([levels(o).assign(**{"pass": p, "label": label})
                             for p, o in zip(passes, offsets)], ignore_index=True),
        "overall": pd.DataFrame({"pass": passes, "label": label, "overall_db": offsets}),
        "metrics": pd.concat([metrics(o).assign(**{"pass": p, "label": label})
                              for p, o in zip(passes, offsets)], ignore_index=True),
        "signoff": pd.DataFrame({"pass": passes, "label": label,
                                 "status": ["rejected" if p in rejected else "accepted"
                                            for p in passes]})}


def _provenance(name):
    return {"campaign": name, "calibration_shared_db": 0.15, "flyover_version": "test"}


def test_store_files_read_back_by_pandas_pyarrow_and_duckdb(tmp_path):
    # The Parquet format's own readers (pandas, pyarrow) and an SQL engine (DuckDB) see the
    # same rows; every file carries the provenance in its metadata and every row its campaign.
    import duckdb
    import pyarrow.parquet as pq
    written = store.write_campaign(tmp_path / "team store", "spring", _tables("a", [0.0, 1.0]),
                                   _provenance("spring"))
    assert written == store.campaign_files(tmp_path / "team store", "spring")
    path = store.table_path(tmp_path / "team store", "spring", "levels")
    frame = pd.read_parquet(path)
    assert (frame["campaign"] == "spring").all() and set(frame["pass"]) == {"p0", "p1"}
    meta = pq.read_schema(path).metadata[store.METADATA_KEY]
    assert json.loads(meta)["calibration_shared_db"] == 0.15
    direct = duckdb.sql(f"SELECT count(*) FROM read_parquet('{path}')").fetchall()[0][0]
    assert direct == len(frame)
    store.write_campaign(tmp_path / "team store", "autumn", _tables("a", [2.0]),
                         _provenance("autumn"))
    counts = store.query(tmp_path / "team store", "SELECT campaign, count(DISTINCT pass) AS n "
                                                  "FROM metrics GROUP BY ALL ORDER BY ALL")
    assert counts.to_dict("list") == {"campaign": ["autumn", "spring"], "n": [1, 2]}
    assert store.query(tmp_path / "team store", "SELECT value FROM provenance WHERE campaign = "
                                                "$c AND key = 'flyover_version'",
                       c="autumn")["value"].tolist() == ["test"]
    with pytest.raises(FlyoverInputError, match="no campaign in the store"):
        store.query(tmp_path, "SELECT 1")


def test_labels_compare_across_stored_campaigns_as_from_results(tmp_path):
    # Two campaigns in one store, a results folder's store beside it: B against A read from
    # the stores gives the tables of the same sides held in memory (two campaigns: the shared
    # calibration counts a side). A rejected pass is left out, as from the results folders.
    a_off, b_off = [0.0, 0.6, -0.4, 0.2], [-2.1, -1.7, -2.4]
    store.write_campaign(tmp_path / "team", "spring", _tables("cruise", a_off + [9.0],
                                                              rejected=("p4",)),
                         _provenance("spring"))
    results = tmp_path / "autumn results"
    store.write_campaign(results / "store", "autumn", _tables("cruise", b_off),
                         _provenance("autumn"))
    a, b, out = sides_from_sources([tmp_path / "team", results],
                                   ["spring:cruise", "autumn:cruise"], load_campaign=None)
    assert (a.name, b.name) == ("spring.cruise", "autumn.cruise")
    assert sorted(a.levels) == ["p0", "p1", "p2", "p3"]
    got = compare(a, b)
    expected = compare(side("A", a_off), side("B", b_off, results="/other"))
    for g, e in zip(got, expected):
        for column in ("difference_db", "ci90_low_db", "ci90_high_db"):
            np.testing.assert_allclose(g[column].to_numpy(float), e[column].to_numpy(float),
                                       rtol=1e-9)
    # A plain label must name one campaign; an unknown campaign gets the names there are.
    with pytest.raises(FlyoverInputError, match="names no single campaign"):
        sides_from_sources([tmp_path / "team", results], ["cruise", "autumn:cruise"],
                           load_campaign=None)
    with pytest.raises(FlyoverInputError, match="no campaign 'sprung'") as err:
        sides_from_sources([tmp_path / "team"], ["sprung:cruise", "spring:cruise"],
                           load_campaign=None)
    assert "spring" in str(err.value.message)
