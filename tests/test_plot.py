"""`seriesql plot`: a query's series drawn to PNG or SVG, with marks and smooth curves, never over a file by mistake."""

import contextlib
import io
import re
import subprocess
import sys
import xml.etree.ElementTree as ET

import duckdb
import numpy as np
import pyarrow as pa
import pytest

from tsql.cli import main
from tsql.plot import MISSING_MATPLOTLIB, PlotError, column_roles

pytest.importorskip("matplotlib")

SVG = "{http://www.w3.org/2000/svg}"
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"  # PNG specification, section 5.2: the signature of every PNG file
SERIES = ("east", "north", "west")
# (series, day, value): three sine waves of 90 days with different periods, one NULL value in 'north'
ROWS = """
SELECT s AS region, DATE '2024-01-01' + INTERVAL (i) DAY AS day,
       CASE WHEN s = 'north' AND i = 40 THEN NULL ELSE 10 * k + sin(2 * pi() * i / (7 * k)) END AS sales
FROM (VALUES ('east', 1), ('north', 2), ('west', 3)) regions(s, k), range(90) days(i)
"""


@pytest.fixture(scope="module")
def db(tmp_path_factory):
    path = tmp_path_factory.mktemp("plot") / "sales.duckdb"
    with duckdb.connect(str(path)) as con:
        con.execute(f"CREATE TABLE sales AS {ROWS}")
    return str(path)


def run(argv: list[str]) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


def groups(svg_path) -> dict[str, list[str]]:
    """The tsql-* groups of an SVG file: id -> tags of their children."""
    root = ET.parse(svg_path).getroot()
    return {
        g.get("id"): [child.tag.removeprefix(SVG) for child in g]
        for g in root.iter(f"{SVG}g")
        if g.get("id", "").startswith("tsql-")
    }


def test_png_is_written(db, tmp_path):
    out = tmp_path / "sales.png"
    code, stdout, err = run(["plot", "--db", db, "--sql", "SELECT region, day, sales FROM sales", "--out", str(out)])
    assert code == 0 and err == ""
    assert out.read_bytes()[:8] == PNG_MAGIC
    assert stdout.strip() == f"wrote {out} (3 series, 270 points)"
    from matplotlib.image import imread

    pixels = imread(out)
    assert pixels.shape[:2] == (576, 1200)  # 10 x 4.8 inches at 120 dots per inch
    white = (pixels[..., :3] > 0.99).all(axis=-1)
    assert white[0, 0] and white[-1, -1]  # the corners are background
    assert 0.02 < 1 - white.mean() < 0.5  # lines, axes and labels: some ink, not a filled picture
    colours = {tuple(np.round(p[:3], 1)) for p in pixels[~white][::50]}
    assert len(colours) >= 4  # three series colours and the black of the axes at least


def test_svg_has_one_path_per_series(db, tmp_path):
    out = tmp_path / "sales.svg"
    assert run(["plot", "--db", db, "--sql", "SELECT day, sales, region FROM sales", "--out", str(out)])[0] == 0
    found = groups(out)
    assert found == {f"tsql-series-{k}": ["path"] for k in range(1, 4)}
    assert ET.parse(out).getroot().tag == f"{SVG}svg"


def test_one_series_without_a_series_column(tmp_path):
    out = tmp_path / "one.svg"
    sql = "SELECT i AS t, i * i AS y FROM range(20) r(i)"  # numbers for times: the first numeric column
    code, stdout, _ = run(["plot", "--sql", sql, "--out", str(out)])
    assert code == 0 and "(1 series, 20 points)" in stdout
    assert groups(out) == {"tsql-series-1": ["path"]}


def test_marks_are_drawn_on_their_series(db, tmp_path):
    out = tmp_path / "marked.svg"
    marks = (
        "SELECT 'west' AS region, [DATE '2024-02-01', DATE '2024-03-01'] AS days "  # a list: one mark per element
        "UNION ALL SELECT 'east', [DATE '2024-01-15']"
    )
    code, _, err = run(
        ["plot", "--db", db, "--sql", "SELECT region, day, sales FROM sales", "--marks", marks, "--out", str(out)]
    )
    assert code == 0, err
    found = groups(out)
    assert sorted(g for g in found if g.startswith("tsql-mark-")) == ["tsql-mark-1-1", "tsql-mark-3-1", "tsql-mark-3-2"]
    assert all(found[g] == ["path"] for g in found)


def test_marks_without_a_series_go_on_every_series(db, tmp_path):
    out = tmp_path / "everywhere.svg"
    code, _, _ = run(
        ["plot", "--db", db, "--sql", "SELECT region, day, sales FROM sales",
         "--marks", "SELECT DATE '2024-02-10'", "--out", str(out)]
    )  # fmt: skip
    assert code == 0
    assert sorted(g for g in groups(out) if g.startswith("tsql-mark-")) == [f"tsql-mark-{k}-1" for k in (1, 2, 3)]


def test_smooth_overlays_one_curve_per_series(db, tmp_path):
    out = tmp_path / "smooth.svg"
    code, _, err = run(
        ["plot", "--db", db, "--sql", "SELECT region, day, sales FROM sales", "--smooth",
         "--harmonics", "2", "--period", "7 days", "--out", str(out)]
    )  # fmt: skip
    assert code == 0, err
    found = groups(out)
    assert [g for g in found if g.startswith("tsql-smooth-")] == [f"tsql-smooth-{k}" for k in (1, 2, 3)]


def test_an_existing_file_is_not_overwritten_without_replace(db, tmp_path):
    out = tmp_path / "taken.png"
    out.write_bytes(b"someone else's picture")
    argv = ["plot", "--db", db, "--sql", "SELECT region, day, sales FROM sales", "--out", str(out)]
    code, stdout, err = run(argv)
    assert code == 2 and stdout == ""
    assert err == f"seriesql plot: {out} exists; pass --replace to overwrite it\n"
    assert out.read_bytes() == b"someone else's picture"
    assert run([*argv, "--replace"])[0] == 0
    assert out.read_bytes()[:8] == PNG_MAGIC
    assert sorted(p.name for p in tmp_path.iterdir()) == ["taken.png"]  # no temporary file left behind


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["--sql", "SELECT 1 AS t, 2 AS v", "--out", "picture.jpg"], "--out must end in .png or .svg"),
        (["--sql", "SELECT * FROM no_such_table", "--out", "p.png"], "--sql query failed: Catalog Error"),
        (["--sql", "SELECT 'a' AS x, 'b' AS y", "--out", "p.png"], "must return a time, a value and optionally"),
        (["--sql", "SELECT 1 AS t, 2 AS v WHERE false", "--out", "p.png"], "returned no rows"),
        (["--sql", "SELECT 1 AS t, 2 AS v; SELECT 3", "--out", "p.png"], "exactly one SQL query"),
        (["--sql", "SELECT 1 AS t, 2 AS v", "--marks", "SELECT 'x'", "--out", "p.png"], "neither times nor numbers"),
        (["--sql", "SELECT 1 AS t, 2 AS v", "--smooth", "--period", "often", "--out", "p.png"], "--period must be"),
        (["--sql", "SELECT 1 AS t, 2 AS v", "--marks", "SELECT DATE '2024-01-01'", "--out", "p.png"], "but the times"),
        (["--db", "missing.duckdb", "--sql", "SELECT 1 AS t, 2 AS v", "--out", "p.png"], "no database at"),
    ],
)
def test_mistakes_are_one_line_errors(tmp_path, monkeypatch, argv, message):
    monkeypatch.chdir(tmp_path)
    code, stdout, err = run(["plot", *argv])
    assert code == 2 and stdout == ""
    assert err.startswith("seriesql plot: ") and message in err and err.count("\n") == 1
    assert list(tmp_path.iterdir()) == []


def test_missing_matplotlib_is_a_clear_message(tmp_path, monkeypatch):
    monkeypatch.setitem(sys.modules, "matplotlib", None)  # makes `import matplotlib` raise ImportError
    out = tmp_path / "p.png"
    code, stdout, err = run(["plot", "--sql", "SELECT 1 AS time, 2 AS value", "--out", str(out)])
    assert code == 2 and stdout == ""
    assert err == f"seriesql plot: {MISSING_MATPLOTLIB}\n" and "pip install 'seriesql[plot]'" in err
    assert not out.exists()


def test_missing_matplotlib_from_the_command_line(tmp_path):
    """The same in a fresh interpreter, where matplotlib was never imported."""
    script = (
        "import sys; sys.modules['matplotlib'] = None\n"
        "from tsql.cli import main\n"
        f"sys.exit(main(['plot', '--sql', 'SELECT 1 AS time, 2 AS value', '--out', {str(tmp_path / 'p.svg')!r}]))\n"
    )
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True)
    assert done.returncode == 2 and done.stdout == ""
    assert done.stderr == f"seriesql plot: {MISSING_MATPLOTLIB}\n"


def schema(**columns: pa.DataType) -> pa.Schema:
    return pa.schema(list(columns.items()))


def test_column_roles_by_name_then_by_type():
    # by name, in any order
    assert column_roles(schema(value=pa.float64(), series=pa.string(), time=pa.date32())) == {
        "time": 2,
        "value": 0,
        "series": 1,
    }
    # by type: the text column is the series, the date the time
    assert column_roles(schema(instrument=pa.string(), day=pa.date32(), price=pa.float64())) == {
        "time": 1,
        "value": 2,
        "series": 0,
    }
    # two numbers: the first is the time
    assert column_roles(schema(step=pa.int64(), reading=pa.float64())) == {"time": 0, "value": 1}
    for bad in (
        schema(a=pa.string(), b=pa.string(), c=pa.float64()),  # two text columns
        schema(t=pa.date32(), a=pa.float64(), b=pa.float64()),  # which number is the series?
        schema(only=pa.float64()),
    ):
        with pytest.raises(PlotError, match="Name the columns time, value and series"):
            column_roles(bad)
    with pytest.raises(PlotError, match="is not a number"):
        column_roles(schema(time=pa.date32(), value=pa.string()))


def test_query_from_a_file_and_a_series_too_short_to_smooth(db, tmp_path):
    query = tmp_path / "query.sql"
    query.write_text(
        "-- east in full; north and west for three days only\n"
        "SELECT region, day, sales FROM sales WHERE region = 'east' OR day < DATE '2024-01-04';\n"
    )
    out = tmp_path / "short.svg"
    code, stdout, err = run(["plot", "--db", db, "--sql-file", str(query), "--smooth", "--out", str(out)])
    assert code == 0 and "(3 series, 96 points)" in stdout
    assert err == "seriesql plot: too few values for a smooth curve: north, west\n"
    assert [g for g in groups(out) if g.startswith("tsql-smooth-")] == ["tsql-smooth-1"]


def runs(svg_path, gid: str) -> list[np.ndarray]:
    """The vertices of a line's path in picture coordinates, one (n, 2) array per unbroken run."""
    root = ET.parse(svg_path).getroot()
    group = next(g for g in root.iter(f"{SVG}g") if g.get("id") == gid)
    d = next(child for child in group if child.tag == f"{SVG}path").get("d")
    found = []
    for command, x, y in re.findall(r"([ML])\s*(-?[\d.]+)\s+(-?[\d.]+)", d):
        if command == "M":
            found.append([])
        found[-1].append((float(x), float(y)))
    return [np.array(run) for run in found]


def test_gaps_on_the_grid_are_breaks(tmp_path):
    out = tmp_path / "gaps.svg"
    sql = (
        # daily: days 20-24 have no row and day 40 a NULL value; monthly: July 2020 has no row (months
        # of 28 to 31 days are one step of a monthly grid, so the other spacings are no gaps)
        "SELECT 'daily' AS s, DATE '2024-01-01' + INTERVAL (i) DAY AS t, CASE WHEN i = 40 THEN NULL ELSE i END AS v "
        "FROM range(60) r(i) WHERE i NOT BETWEEN 20 AND 24 UNION ALL "
        "SELECT 'monthly', DATE '2020-01-01' + INTERVAL (i) MONTH, i FROM range(24) r(i) WHERE i <> 6"
    )
    code, stdout, err = run(["plot", "--sql", sql, "--out", str(out)])
    assert code == 0 and err == "" and "(2 series, 78 points)" in stdout
    assert [len(r) for r in runs(out, "tsql-series-1")] == [20, 15, 19]
    assert [len(r) for r in runs(out, "tsql-series-2")] == [6, 17]
    daily = runs(out, "tsql-series-1")
    step = np.diff(daily[0][:, 0]).mean()
    assert daily[1][0, 0] - daily[0][-1, 0] == pytest.approx(6 * step, rel=1e-3)  # day 19 to day 25


def test_a_point_alone_between_gaps_is_a_dot(tmp_path):
    out = tmp_path / "alone.svg"
    sql = "SELECT i / 2 AS t, i AS y FROM range(31) r(i) WHERE i NOT IN (10, 12, 20, 21)"  # steps of 0.5
    assert run(["plot", "--sql", sql, "--out", str(out)])[0] == 0
    line = runs(out, "tsql-series-1")
    assert [len(r) for r in line] == [10, 1, 7, 9]
    assert groups(out)["tsql-series-1"] == ["path", "defs", "g"]  # the line, the dot's shape, the dot
    group = next(g for g in ET.parse(out).getroot().iter(f"{SVG}g") if g.get("id") == "tsql-series-1")
    (dot,) = group.iter(f"{SVG}use")
    assert (float(dot.get("x")), float(dot.get("y"))) == pytest.approx(tuple(line[1][0]), abs=1e-3)


def smooth_miss(svg_path, k: int) -> float:
    """The largest distance, in picture units, between series k's smooth curve and its line at the line's points."""
    line = np.concatenate(runs(svg_path, f"tsql-series-{k}"))
    curve = np.concatenate(runs(svg_path, f"tsql-smooth-{k}"))
    at = np.searchsorted(curve[:, 0], line[:, 0]).clip(0, len(curve) - 1)
    same = np.abs(curve[at, 0] - line[:, 0]) < 1e-3
    assert same.sum() > 0.9 * len(line)  # nearly every day of the line is a point of the curve
    return float(np.abs(curve[at[same], 1] - line[same, 1]).max())


def test_smooth_without_period_uses_each_series_dominant_period(db, tmp_path):
    # each series is a level plus one sine of 7, 14 or 21 days: harmonics of the series' own period fit it
    # exactly, so its smooth curve lies on its line; one period for all (or the whole record) cannot
    out = tmp_path / "own.svg"
    code, _, err = run(
        ["plot", "--db", db, "--sql", "SELECT region, day, sales FROM sales", "--smooth", "--out", str(out)]
    )
    assert code == 0 and err == ""
    assert [smooth_miss(out, k) for k in (1, 2, 3)] == pytest.approx([0, 0, 0], abs=0.5)
    for period in ("7 days", "90"):
        other = tmp_path / f"fixed {period}.svg"
        argv = ["plot", "--db", db, "--sql", "SELECT region, day, sales FROM sales", "--smooth", "--out", str(other)]
        assert run([*argv, "--period", period])[0] == 0
        assert max(smooth_miss(other, k) for k in (1, 2, 3)) > 5


def test_a_series_without_a_dominant_period_is_smoothed_over_its_record(tmp_path):
    out = tmp_path / "flat.svg"
    code, _, err = run(["plot", "--sql", "SELECT i AS t, 5.0 AS y FROM range(30) r(i)", "--smooth", "--out", str(out)])
    assert code == 0
    assert err == "seriesql plot: no dominant period in y: smoothed over the whole record; give one with --period\n"
    assert "tsql-smooth-1" in groups(out)


def test_one_line_of_more_than_50000_points_gets_a_warning(tmp_path):
    def draw(sql: str) -> str:
        code, _, err = run(["plot", "--sql", sql, "--out", str(tmp_path / "long.png"), "--replace"])
        assert code == 0
        return err

    err = draw("SELECT i AS t, sqrt(i) AS y FROM range(50001) r(i)")
    assert err.startswith("seriesql plot: warning: one line of 50,001 points; ") and err.count("\n") == 1
    assert "return the series column too" in err and "aggregate first" in err
    assert draw("SELECT i AS t, sqrt(i) AS y FROM range(50000) r(i)") == ""
    assert draw("SELECT i // 2 AS t, sqrt(i) AS y, (i % 2)::VARCHAR AS s FROM range(50002) r(i)") == ""  # two series
