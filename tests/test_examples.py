"""The Python quick start example (examples/quickstart.py) runs and finds what its generator planted."""

import importlib.util
from pathlib import Path

import tsql

ROOT = Path(__file__).resolve().parents[1]


def load_quickstart():
    spec = importlib.util.spec_from_file_location("quickstart", ROOT / "examples" / "quickstart.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_quickstart_runs(capsys):
    load_quickstart().main()
    out = capsys.readouterr().out
    assert "statistical indications" in out and "shop-00" in out


def test_quickstart_finds_the_planted_yearly_cycles():
    quickstart = load_quickstart()
    con = tsql.connect()
    con.register("sales", quickstart.invented_sales())
    rows = con.execute(
        """SELECT planted, s.period = INTERVAL 12 MONTH AND s.p_value < 0.01, t
           FROM (SELECT any_value(planted) AS planted, seasonality_agg(loaves, month, max_period := 24) AS s,
                        trend_test_agg(loaves, month) AS t
                 FROM sales GROUP BY shop)"""
    ).fetchall()
    cycles = [yearly for planted, yearly, _ in rows if planted == "yearly cycle"]
    climbs = [t for planted, _, t in rows if planted == "steady climb"]
    assert len(cycles) == 10 and all(cycles)
    assert len(climbs) == 10 and all(t["p_value"] < 0.01 and 4 < t["slope"] < 8 for t in climbs)
