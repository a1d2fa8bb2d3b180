-- Regime changes: exact PELT segmentation of each series.
-- The *_agg forms order rows by `time` and answer in the time column's own type:
-- change_points_agg gives the times where new segments start, segments_agg the
-- first and last time of each segment (the slope stays per sample). Rows are
-- treated as equally spaced (the gap-aware grid comes later).

-- 1-based positions of the first element of each new segment.
CREATE OR REPLACE TEMP MACRO change_points(values, model := 'mean', penalty := 'bic', min_size := 2) AS
    __tsql_change_points(values, model, penalty::VARCHAR, min_size);

CREATE OR REPLACE TEMP MACRO change_points_agg(value, time, model := 'mean', penalty := 'bic', min_size := 2) AS
    list_select(
        list(time ORDER BY time),
        __tsql_change_points(list(value::DOUBLE ORDER BY time), model, penalty::VARCHAR, min_size));

-- Every segment: STRUCT(first, last, mean, slope)[].
CREATE OR REPLACE TEMP MACRO segments(values, model := 'mean', penalty := 'bic', min_size := 2) AS
    __tsql_segments(values, model, penalty::VARCHAR, min_size);

CREATE OR REPLACE TEMP MACRO segments_agg(value, time, model := 'mean', penalty := 'bic', min_size := 2) AS
    list_transform(
        __tsql_segments(list(value::DOUBLE ORDER BY time), model, penalty::VARCHAR, min_size),
        lambda s: struct_pack(
            first := list(time ORDER BY time)[s.first],
            last := list(time ORDER BY time)[s.last],
            mean := s.mean,
            slope := s.slope));
