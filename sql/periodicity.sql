-- Periodicity: the strongest cycle of each series.
-- The *_agg forms put each group on its time grid and give the period as a span of time:
-- an INTERVAL for DATE/TIMESTAMP times (whole months on a calendar grid), a number for numeric times.

-- Period of the strongest cycle, in samples.
CREATE OR REPLACE TEMP MACRO dominant_period(values, min_period := 2, max_period := NULL) AS
    __tsql_dominant_period(values, min_period, max_period);

CREATE OR REPLACE TEMP MACRO dominant_period_agg(value, time, min_period := 2, max_period := NULL,
                                                 step := NULL, fill := 'null') AS
    __tsql_dominant_period_on_grid(__tsql_observations(value, time), __tsql_time_type(time), __tsql_span(step),
                                   fill, __tsql_span(min_period), __tsql_span(max_period));

-- STRUCT(period, strength, p_value): the cycle, how much of the variance it
-- explains, and Fisher's g test of the periodogram maximum.
CREATE OR REPLACE TEMP MACRO seasonality(values, min_period := 2, max_period := NULL) AS
    __tsql_seasonality(values, min_period, max_period);

CREATE OR REPLACE TEMP MACRO seasonality_agg(value, time, min_period := 2, max_period := NULL,
                                             step := NULL, fill := 'null') AS
    __tsql_seasonality_on_grid(__tsql_observations(value, time), __tsql_time_type(time), __tsql_span(step),
                               fill, __tsql_span(min_period), __tsql_span(max_period));
