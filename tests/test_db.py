"""The database module: large frames stored in whole row groups."""

from __future__ import annotations

import duckdb
import numpy as np
import pandas as pd

from perfcheck import db


def _row_groups(con: duckdb.DuckDBPyConnection) -> int:
    return con.execute("SELECT count(DISTINCT row_group_id) FROM pragma_storage_info('t')"
                       ).fetchone()[0]


def test_insert_frame_fills_whole_row_groups(tmp_path):
    # Four frames of 131,040 rows (91 days of 1-minute rows), each a little over one row
    # group: inserted whole, each leaves a short group that the checkpoint at close has to
    # merge; db.insert_frame leaves only full groups and the last one. Row group size 122,880
    # rows: DuckDB's documentation on its storage format (from memory; the test fails if a
    # DuckDB release changes it, and db.ROW_GROUP_ROWS must follow).
    n = 131_040
    frames = [pd.DataFrame({"i": np.arange(k * n, (k + 1) * n), "x": np.arange(n) * 0.5})
              for k in range(4)]
    groups = {}
    for how in ("whole", "insert_frame"):
        con = duckdb.connect(str(tmp_path / f"{how}.duckdb"))
        con.execute("CREATE TABLE t (i BIGINT, x DOUBLE)")
        with db.transaction(con):
            for frame in frames:
                if how == "whole":
                    con.from_df(frame).query("_n", "INSERT INTO t BY NAME SELECT * FROM _n")
                else:
                    db.insert_frame(con, "t", frame)
        groups[how] = _row_groups(con)
        assert con.execute("SELECT count(*), sum(i), sum(x) FROM t").fetchone() == (
            4 * n, (4 * n) * (4 * n - 1) // 2, 4 * 0.5 * n * (n - 1) / 2)
        con.close()
    assert groups == {"whole": 8, "insert_frame": -(-4 * n // db.ROW_GROUP_ROWS)}
