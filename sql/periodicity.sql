-- Periodicity: the strongest cycle of each series.
-- The *_agg forms order the rows by `time` and treat them as equally spaced
-- (a missing period is not yet filled in; the gap-aware grid comes later).

-- Period of the strongest cycle, in samples.
CREATE OR REPLACE TEMP MACRO dominant_period(values, min_period := 2, max_period := NULL) AS
    __tsql_dominant_period(values, min_period, max_period);

CREATE OR REPLACE TEMP MACRO dominant_period_agg(value, time, min_period := 2, max_period := NULL) AS
    __tsql_dominant_period(list(value::DOUBLE ORDER BY time), min_period, max_period);

-- STRUCT(period, strength, p_value): the cycle, how much of the variance it
-- explains, and Fisher's g test of the periodogram maximum.
CREATE OR REPLACE TEMP MACRO seasonality(values, min_period := 2, max_period := NULL) AS
    __tsql_seasonality(values, min_period, max_period);

CREATE OR REPLACE TEMP MACRO seasonality_agg(value, time, min_period := 2, max_period := NULL) AS
    __tsql_seasonality(list(value::DOUBLE ORDER BY time), min_period, max_period);
