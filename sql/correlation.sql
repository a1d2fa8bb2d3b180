-- Correlation and trend: persistence, white-noise tests, monotone trend.
-- The *_agg forms order the rows by `time` and treat them as equally spaced
-- (a missing period is not yet filled in; the gap-aware grid comes later).

-- Sample autocorrelation at one lag.
CREATE OR REPLACE TEMP MACRO autocorrelation(values, lag := 1) AS
    __tsql_autocorrelation(values, lag);

CREATE OR REPLACE TEMP MACRO autocorrelation_agg(value, time, lag := 1) AS
    __tsql_autocorrelation(list(value::DOUBLE ORDER BY time), lag);

-- Autocorrelations at lags 1..max_lag.
CREATE OR REPLACE TEMP MACRO acf(values, max_lag := 10) AS
    __tsql_acf(values, max_lag);

CREATE OR REPLACE TEMP MACRO acf_agg(value, time, max_lag := 10) AS
    __tsql_acf(list(value::DOUBLE ORDER BY time), max_lag);

-- Ljung-Box portmanteau test: STRUCT(q, p_value).
CREATE OR REPLACE TEMP MACRO ljung_box(values, lags := 10) AS
    __tsql_ljung_box(values, lags);

CREATE OR REPLACE TEMP MACRO ljung_box_agg(value, time, lags := 10) AS
    __tsql_ljung_box(list(value::DOUBLE ORDER BY time), lags);

-- Mann-Kendall trend test with Sen's slope: STRUCT(tau, p_value, slope).
CREATE OR REPLACE TEMP MACRO trend_test(values) AS
    __tsql_trend_test(values);

CREATE OR REPLACE TEMP MACRO trend_test_agg(value, time) AS
    __tsql_trend_test(list(value::DOUBLE ORDER BY time));
