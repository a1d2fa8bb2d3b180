-- Groups of items whose monthly sales curves move alike, with each group's
-- most typical item (its medoid) and how well each item sits in its group.
--
-- Input: monthly_sales(item, month, units), one row per item and month; a
-- month without a row is filled linearly by on_grid. dtw_clusters is an
-- aggregate over the items (one row each): k-medoids on dtw_distance of the
-- z-normalised curves (shape, not volume), k chosen in 2..10 by the average
-- silhouette. A silhouette near 1 is a clear member, near 0 a borderline one.
WITH series AS (
    SELECT item,
           on_grid(list(units::DOUBLE ORDER BY month), list(month ORDER BY month),
                   step := INTERVAL '1 month', fill := 'linear') AS curve
    FROM monthly_sales
    GROUP BY item
),
grouped AS (
    SELECT unnest(dtw_clusters(item, curve, band := 2)) AS g FROM series
)
SELECT g.cluster, g.medoid, count(*) AS items, round(avg(g.silhouette), 3) AS mean_silhouette,
       list(g.id ORDER BY g.silhouette DESC)[1:5] AS clearest_members
FROM grouped
GROUP BY g.cluster, g.medoid
ORDER BY g.cluster;
