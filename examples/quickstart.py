"""A first look: which shops sell seasonally, which trend, which only wander.

The data are invented here (a seeded generator): 30 bakeries of a made-up
chain, four years of monthly loaves sold. Run it after `pip install -e .`:

    python examples/quickstart.py
"""

import numpy as np
import pyarrow as pa

import tsql


def invented_sales() -> pa.Table:
    rng = np.random.default_rng(42)
    shops, months = 30, 48
    rows = {"shop": [], "planted": [], "month": [], "loaves": []}
    for shop in range(shops):
        month = np.arange(months)
        level = rng.uniform(400, 900)
        kind = shop % 3
        if kind == 0:  # a summer-holiday town: a yearly cycle
            units = level + 120 * np.sin(2 * np.pi * month / 12) + rng.normal(0, 25, months)
        elif kind == 1:  # a growing suburb: a steady climb
            units = level + 6 * month + rng.normal(0, 25, months)
        else:  # a quiet high street: random ups and downs
            units = level + np.cumsum(rng.normal(0, 20, months))
        rows["shop"] += [f"shop-{shop:02d}"] * months
        rows["planted"] += [("yearly cycle", "steady climb", "random walk")[kind]] * months
        rows["month"] += [(np.datetime64("2022-01") + int(m)).astype("datetime64[D]") for m in month]
        rows["loaves"] += list(np.round(units))
    months_as_dates = pa.array(np.array(rows["month"], dtype="datetime64[D]")).cast(pa.date32())
    return pa.table(
        {"shop": rows["shop"], "planted": rows["planted"], "month": months_as_dates, "loaves": rows["loaves"]}
    )


QUERY = """
SELECT shop, planted,
       s.period                  AS cycle,
       round(s.strength, 2)      AS strength,
       s.p_value < 0.01          AS seasonal,
       round(t.slope, 1)         AS loaves_per_month,
       t.p_value < 0.01          AS trending,
       round(r1, 2)              AS lag1_autocorrelation
FROM (
    SELECT shop, any_value(planted) AS planted,
           seasonality_agg(loaves, month, max_period := 24) AS s,
           trend_test_agg(loaves, month)                    AS t,
           autocorrelation_agg(loaves, month)               AS r1
    FROM sales
    GROUP BY shop
)
ORDER BY shop
LIMIT 9
"""


def main() -> None:
    con = tsql.connect()
    con.register("sales", invented_sales())
    print("-- 30 invented bakeries, 48 months each; the first nine:")
    print(QUERY.strip())
    print(con.sql(QUERY))
    print(
        "The 'planted' column is what the generator built. Fisher's g tests a cycle against white noise,\n"
        "so a random walk, whose power sits at long periods, can pass it: read `seasonal` together with\n"
        "`trending` and a lag-1 autocorrelation near 1 before trusting a long cycle.\n"
        "Results are statistical indications, not business, staffing or financial advice."
    )


if __name__ == "__main__":
    main()
