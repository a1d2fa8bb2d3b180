-- The 5 items whose monthly sales curves are most alike, for each item.
--
-- Input: monthly_sales(item, month, units), one row per item and month.
-- Shape is compared, not size: each curve is z-normalised first. A band of
-- 2 months lets a curve run up to two months ahead of or behind another.
--
-- LB_Keogh is a cheap lower bound of the DTW distance. For each item, the
-- exact distance of its 5 best-bounded neighbours gives a limit that the
-- true 5th-best distance cannot exceed; only pairs whose bound is within that
-- limit can be in the top 5, so the exact distance is computed for those
-- alone (and stops early past the limit). The answer is the same as ranking
-- every pair by dtw_distance.
WITH series AS (
    SELECT item, list(units::DOUBLE ORDER BY month) AS curve
    FROM monthly_sales
    GROUP BY item
),
shapes AS (
    SELECT item,
           list_transform(curve, lambda x: coalesce((x - list_avg(curve)) / nullif(list_stddev_pop(curve), 0), 0)) AS z
    FROM series
),
bounds AS (
    SELECT a.item, b.item AS other, a.z AS za, b.z AS zb, lb_keogh(a.z, b.z, 2) AS bound
    FROM shapes a JOIN shapes b ON a.item <> b.item
),
limits AS (
    SELECT item, max(dtw_distance(za, zb, band := 2)) AS limit_distance
    FROM (SELECT *, row_number() OVER (PARTITION BY item ORDER BY bound, other) AS by_bound FROM bounds)
    WHERE by_bound <= 5
    GROUP BY item
),
exact AS (
    SELECT b.item, b.other, dtw_distance(b.za, b.zb, band := 2, cutoff := l.limit_distance) AS distance
    FROM bounds b JOIN limits l USING (item)
    WHERE b.bound <= l.limit_distance
)
SELECT item, other, distance, rank
FROM (
    SELECT *, row_number() OVER (PARTITION BY item ORDER BY distance, other) AS rank
    FROM exact
    WHERE distance IS NOT NULL
)
WHERE rank <= 5
ORDER BY item, rank;
