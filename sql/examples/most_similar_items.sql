-- The 5 items whose monthly sales curves are most alike, for each item.
--
-- Input: monthly_sales(item, month, units), one row per item and month; a
-- month without a row is missing. on_grid puts each item's months on the
-- monthly grid and fills such a month linearly between its neighbours.
-- Shape is compared, not size: dtw_nearest z-normalises each curve first. A
-- band of 2 months lets a curve run up to two months ahead of or behind another.
--
-- dtw_nearest is an aggregate over the items (one row each): it answers for
-- every item at once, exactly as ranking every pair by dtw_distance would (ties
-- go to the smaller item), while computing the warping distance of only a small
-- share of the pairs (lower bounds first, then early abandoning).
WITH series AS (
    SELECT item,
           on_grid(list(units::DOUBLE ORDER BY month), list(month ORDER BY month),
                   step := INTERVAL '1 month', fill := 'linear') AS curve
    FROM monthly_sales
    GROUP BY item
)
SELECT near.id AS item, near.neighbor AS other, near.distance, near.rank
FROM (SELECT unnest(dtw_nearest(item, curve, k := 5, band := 2, normalize := true)) AS near FROM series)
ORDER BY item, near.rank;
