-- Similarity: dynamic time warping between two series (e.g. a self-join of an item table).
-- `window` is a reserved word in DuckDB, hence `band` for the Sakoe-Chiba half-width.

-- DTW distance; NULL past `cutoff`, so WHERE dtw_distance(..., cutoff := x) IS NOT NULL is cheap.
CREATE OR REPLACE TEMP MACRO dtw_distance(a, b, band := NULL, normalize := false, cutoff := NULL) AS
    __tsql_dtw_distance(a, b, band, normalize, cutoff);

-- The optimal warping path as STRUCT(i, j)[].
CREATE OR REPLACE TEMP MACRO dtw_path(a, b, band := NULL) AS
    __tsql_dtw_path(a, b, band);

-- LB_Keogh lower bound of dtw_distance(a, b, band := band).
CREATE OR REPLACE TEMP MACRO lb_keogh(a, b, band) AS
    __tsql_lb_keogh(a, b, band);
