"""dtw_clusters through DuckDB: equal to the kernel on each group alone, planted families, ids, errors."""

import duckdb
import numpy as np
import pyarrow as pa
import pytest

import tsql
from tsql.kernels.clusters import dtw_clusters
from tsql.kernels.ragged import Ragged


@pytest.fixture(scope="module")
def con():
    c = tsql.connect()
    rng = np.random.default_rng(1819)
    t = np.arange(36)
    shapes = [np.sin(2 * np.pi * t / 12), np.cos(2 * np.pi * t / 6), t / 36.0]  # three planted families
    rows = []
    for item in range(60):
        curve = shapes[item % 3] * rng.uniform(1, 20) + rng.uniform(0, 50) + 0.05 * rng.standard_normal(36)
        rows.append((f"item-{item:02d}", item % 3, item % 2, curve.tolist()))
    order = rng.permutation(len(rows))
    table = pa.table(
        {
            "id": [rows[i][0] for i in order],
            "family": [rows[i][1] for i in order],
            "half": [rows[i][2] for i in order],
            "s": pa.array([rows[i][3] for i in order], pa.list_(pa.float64())),
        }
    )
    c.register("arrow_items", table)
    c.execute("CREATE TEMP TABLE items AS SELECT * FROM arrow_items")
    yield c
    c.close()


def test_groups_answer_as_the_kernel_on_each_group_alone(con):
    got = con.execute("SELECT half, dtw_clusters(id, s, band := 3) FROM items GROUP BY half ORDER BY half").fetchall()
    assert len(got) == 2
    for half, answer in got:
        ids, series = zip(*con.execute(f"SELECT id, s FROM items WHERE half = {half} ORDER BY id").fetchall())
        found = dtw_clusters(np.array(ids), Ragged.from_list(series), band=3)
        expected = [
            {"id": ids[i], "cluster": int(found["cluster"][i]), "medoid": ids[found["medoid"][i]], "silhouette": s}
            for i, s in enumerate(found["silhouette"].tolist())
        ]
        assert answer == expected


def test_planted_families_are_found_whatever_the_row_order(con):
    query = """SELECT r.id, r.cluster FROM (SELECT unnest(dtw_clusters(id, s)) AS r FROM ({rows})) ORDER BY r.id"""
    got = con.execute(query.format(rows="SELECT * FROM items")).fetchall()
    shuffled = con.execute(query.format(rows="SELECT * FROM items ORDER BY hash(id)")).fetchall()
    assert got == shuffled
    family = dict(con.execute("SELECT id, family FROM items").fetchall())
    pairs = {(family[i], c) for i, c in got}
    assert len(pairs) == 3 and len({c for _, c in pairs}) == 3  # k := NULL chose 3, one cluster per family


def test_null_ids_left_out_and_unusable_items_get_null():
    c = tsql.connect()
    got = c.execute(
        """SELECT r.id, r.cluster FROM (SELECT unnest(dtw_clusters(id, s, k := 2, normalize := false)) AS r
           FROM (VALUES (1, [1.0, 2, 3]), (NULL, [1.0, 2, 3]), (2, [1.0, 2, 4]), (3, NULL), (4, [9.0, 8, 7]),
                        (5, [9.0, 8, 6])) t(id, s)) ORDER BY r.id"""
    ).fetchall()
    assert got == [(1, 1), (2, 1), (3, None), (4, 2), (5, 2)]


@pytest.mark.parametrize(
    "rows, args, message",
    [
        ("(1, [1.0, 2]), (1, [2.0, 3])", "", "dtw_clusters: id must be unique"),
        ("(1, [1.0, 2]), (2, [2.0, 3])", ", k := 1", "dtw_clusters: k must be >= 2"),
        ("(1, [1.0, 2]), (2, [2.0, 3])", ", band := -1", "dtw_clusters: band must be >= 0"),
    ],
)
def test_bad_input_names_the_function(rows, args, message):
    c = tsql.connect()
    with pytest.raises(duckdb.Error, match=message):
        c.execute(f"SELECT dtw_clusters(id, s{args}) FROM (VALUES {rows}) t(id, s)").fetchall()
