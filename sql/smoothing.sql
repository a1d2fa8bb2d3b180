-- Smoothing: the smooth expected curve of a noisy load series, and its repeating cycle.
-- The *_agg forms put each group on its time grid; `period` may be an INTERVAL there
-- ('1 day' on hourly data) or a number of grid steps.

-- Fitted values (mean, linear trend, harmonics) of the same length as the input; gaps get fitted values.
CREATE OR REPLACE TEMP MACRO harmonic_smooth(values, harmonics := 3, period := NULL) AS
    __tsql_harmonic_smooth(values, harmonics, period);

-- STRUCT(time, value)[] on the grid, gaps included.
CREATE OR REPLACE TEMP MACRO harmonic_smooth_agg(value, time, harmonics := 3, period := NULL,
                                                 step := NULL, fill := 'null') AS
    list_transform(
        __tsql_harmonic_smooth_on_grid(__tsql_observations(value, time), __tsql_time_type(time), __tsql_span(step),
                                       fill, harmonics, __tsql_span(period)),
        lambda r: {'time': __tsql_moment(r.tick, r.kind), 'value': r.value});

-- One cycle of round(period) values; list_position(p, list_max(p)) is the 1-based phase of the peak.
CREATE OR REPLACE TEMP MACRO harmonic_profile(values, period, harmonics := 3) AS
    __tsql_harmonic_profile(values, period, harmonics);

CREATE OR REPLACE TEMP MACRO harmonic_profile_agg(value, time, period, harmonics := 3,
                                                  step := NULL, fill := 'null') AS
    __tsql_harmonic_profile_on_grid(__tsql_observations(value, time), __tsql_time_type(time), __tsql_span(step),
                                    fill, __tsql_span(period), harmonics);
