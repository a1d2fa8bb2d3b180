"""dtw_nearest through DuckDB: equal to the brute-force dtw_distance self-join, ids of any type, groups, errors."""

import duckdb
import numpy as np
import pyarrow as pa
import pytest

import tsql
from tsql.kernels.nearest import dtw_nearest
from tsql.kernels.ragged import Ragged
from tsql.registry import TABLE_FUNCTIONS

BRUTE = """
    SELECT id, neighbor, distance, rank FROM (
        SELECT a.id, b.id AS neighbor, d AS distance,
               row_number() OVER (PARTITION BY a.id ORDER BY d, b.id)::INTEGER AS rank
        FROM items a JOIN items b ON a.id <> b.id,
             LATERAL (SELECT dtw_distance(a.s, b.s, band := {band}, normalize := {normalize}) AS d)
    ) WHERE rank <= {k} ORDER BY id, rank
"""
NEAREST = """
    SELECT r.id, r.neighbor, r.distance, r.rank
    FROM (SELECT unnest(dtw_nearest(id, s, k := {k}, band := {band}, normalize := {normalize})) AS r FROM items)
    ORDER BY r.id, r.rank
"""


@pytest.fixture(scope="module")
def con():
    c = tsql.connect()
    rng = np.random.default_rng(1818)
    families = np.cumsum(rng.standard_normal((6, 30)), axis=1)
    rows = []
    for item in range(90):
        n = 30 - int(rng.integers(0, 4))  # lengths differ a little
        curve = families[item % 6, :n] * rng.uniform(0.5, 2.0) + rng.uniform(-3, 3) + 0.4 * rng.standard_normal(n)
        rows.append((f"item-{item:03d}", np.round(curve, 1).tolist()))  # rounding makes some ties
    rows.append(("twin", rows[0][1]))  # an exact twin: distance 0, ties at the same distance
    rows.append(("twin-2", rows[0][1]))
    order = rng.permutation(len(rows))  # the row order must not matter
    table = pa.table(
        {"id": [rows[i][0] for i in order], "s": pa.array([rows[i][1] for i in order], pa.list_(pa.float64()))}
    )
    c.register("arrow_items", table)
    c.execute("CREATE TEMP TABLE items AS SELECT * FROM arrow_items")
    yield c
    c.close()


@pytest.mark.parametrize(
    "k, band, normalize", [(5, "NULL", "false"), (3, "2", "false"), (4, "NULL", "true"), (1, "0", "true")]
)
def test_equals_the_brute_force_self_join(con, k, band, normalize):
    settings = {"k": k, "band": band, "normalize": normalize}
    expected = con.execute(BRUTE.format(**settings)).fetchall()
    got = con.execute(NEAREST.format(**settings)).fetchall()
    assert len(got) == 92 * k
    assert got == expected  # the same neighbours, ranks and distances bit for bit; ties by the smaller id


def test_groups_answer_as_the_kernel_on_each_group_alone(con):
    got = con.execute(
        """SELECT g, dtw_nearest(id, s, k := 2) FROM (SELECT hash(id) % 3 AS g, id, s FROM items)
           GROUP BY g ORDER BY g"""
    ).fetchall()
    assert len(got) == 3
    for g, answer in got:
        ids, series = zip(*con.execute(f"SELECT id, s FROM items WHERE hash(id) % 3 = {g} ORDER BY id").fetchall())
        found = dtw_nearest(np.array(ids), Ragged.from_list(series), k=2)
        expected = [
            {"id": ids[i], "neighbor": ids[j], "distance": d, "rank": r}
            for i, j, d, r in zip(found["item"], found["neighbor"], found["distance"].tolist(), found["rank"])
        ]
        assert answer == expected


def test_gaps_are_filled_linearly_as_on_grid_would(con):
    rows = con.execute("SELECT id, s FROM items ORDER BY id LIMIT 12").fetchall()
    gappy = [(i, [None if 3 <= m <= 5 and n % 2 else v for m, v in enumerate(s)]) for n, (i, s) in enumerate(rows)]
    c = tsql.connect()
    c.register(
        "gappy", pa.table({"id": [r[0] for r in gappy], "s": pa.array([r[1] for r in gappy], pa.list_(pa.float64()))})
    )
    got = c.execute(NEAREST.replace("FROM items", "FROM gappy").format(k=11, band="NULL", normalize="false")).fetchall()
    # reference: the self-join of dtw_distance on the series whose missing months on_grid fills linearly
    c.execute(
        """CREATE TEMP TABLE items AS SELECT id, on_grid(list_filter(s, lambda v: v IS NOT NULL),
                  list_filter(range(1, len(s) + 1), lambda m: s[m] IS NOT NULL), fill := 'linear') AS s FROM gappy"""
    )
    expected = c.execute(BRUTE.format(k=11, band="NULL", normalize="false")).fetchall()
    assert got == expected


def test_null_ids_are_left_out_and_items_without_a_series_take_no_part():
    c = tsql.connect()
    got = c.execute(
        """SELECT r.id, r.neighbor FROM (SELECT unnest(dtw_nearest(id, s, k := 3)) AS r
           FROM (VALUES (3, [1.0, 2, 3]), (NULL, [1.0, 2, 3]), (1, [1.0, 2, 4]), (2, NULL), (4, [5.0, 5, 6]))
                t(id, s)) ORDER BY r.id, r.rank"""
    ).fetchall()
    ids = {row[0] for row in got} | {row[1] for row in got}
    assert ids == {1, 3, 4}
    assert [r[:2] for r in got if r[0] == 1] == [(1, 3), (1, 4)]
    assert c.execute("SELECT dtw_nearest(id, s) FROM (SELECT 1 AS id, [1.0] AS s) WHERE id > 1").fetchall() == [(None,)]


@pytest.mark.parametrize(
    "rows, args, message",
    [
        ("(1, [1.0, 2]), (1, [2.0, 3])", "", "dtw_nearest: id must be unique"),
        ("(1, [1.0, 2]), (2, [2.0, 3])", ", k := 0", "dtw_nearest: k must be >= 1"),
        ("(1, [1.0, 2]), (2, [2.0, 3])", ", band := -1", "dtw_nearest: band must be >= 0"),
        ("(1, [1.0, 2]), (2, [2.0, 3])", ", k := 1.5", "dtw_nearest: k must be a whole number"),
    ],
)
def test_bad_input_names_the_function(rows, args, message):
    c = tsql.connect()
    with pytest.raises(duckdb.Error, match=message):
        c.execute(f"SELECT dtw_nearest(id, s{args}) FROM (VALUES {rows}) t(id, s)").fetchall()


@pytest.mark.parametrize("fn", TABLE_FUNCTIONS, ids=lambda f: f.name)
def test_the_registry_examples_run(fn):
    rows = tsql.connect().execute(fn.example).fetchall()
    assert rows and all(r[0] is not None for r in rows)


def test_a_reference_set_equals_the_self_join_against_those_rows_only(con):
    # every item searches only the rows whose reference flag is true (NULL: not one of them)
    reference = "id < 'item-040' OR CASE WHEN id = 'twin' THEN NULL END"
    brute = BRUTE.format(k=3, band="2", normalize="false").replace(
        "ON a.id <> b.id", f"ON a.id <> b.id AND (SELECT {reference.replace('id', 'b.id')})"
    )
    expected = con.execute(brute).fetchall()
    got = con.execute(
        f"""SELECT r.id, r.neighbor, r.distance, r.rank
            FROM (SELECT unnest(dtw_nearest(id, s, k := 3, band := 2, reference := {reference})) AS r FROM items)
            ORDER BY r.id, r.rank"""
    ).fetchall()
    assert len(got) == 92 * 3 and got == expected
    assert {n for _, n, _, _ in got} == {f"item-{i:03d}" for i in range(40)}  # twin (NULL flag) is nobody's
