-- Regime changes: exact PELT segmentation of each series.
-- The *_agg forms put each group on its time grid and answer with the rows' own
-- times: change_points_agg gives the time of the first row of each new segment,
-- segments_agg the first and last row's time of each segment (the slope is per grid step).

-- 1-based positions of the first element of each new segment.
CREATE OR REPLACE TEMP MACRO change_points(values, model := 'mean', penalty := 'bic', min_size := 2) AS
    __tsql_change_points(values, model, penalty::VARCHAR, min_size);

CREATE OR REPLACE TEMP MACRO change_points_agg(value, time, model := 'mean', penalty := 'bic', min_size := 2,
                                               step := NULL, fill := 'null') AS
    list_select(
        list(time ORDER BY time NULLS LAST),
        __tsql_change_points_on_grid(__tsql_observations(value, time), __tsql_time_type(time), __tsql_span(step),
                                     fill, model, penalty::VARCHAR, min_size));

-- Every segment: STRUCT(first, last, mean, slope)[].
CREATE OR REPLACE TEMP MACRO segments(values, model := 'mean', penalty := 'bic', min_size := 2) AS
    __tsql_segments(values, model, penalty::VARCHAR, min_size);

CREATE OR REPLACE TEMP MACRO segments_agg(value, time, model := 'mean', penalty := 'bic', min_size := 2,
                                          step := NULL, fill := 'null') AS
    list_transform(
        __tsql_segments_on_grid(__tsql_observations(value, time), __tsql_time_type(time), __tsql_span(step),
                                fill, model, penalty::VARCHAR, min_size),
        lambda s: struct_pack(
            first := list(time ORDER BY time NULLS LAST)[s.first],
            last := list(time ORDER BY time NULLS LAST)[s.last],
            mean := s.mean,
            slope := s.slope));
