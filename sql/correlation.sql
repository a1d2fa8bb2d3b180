-- Correlation and trend: persistence, white-noise tests, monotone trend.
-- The *_agg forms put each group on its time grid first: lags count grid steps,
-- a missing period is a missing value (skipped), and the Sen slope is per step.

-- Sample autocorrelation at one lag.
CREATE OR REPLACE TEMP MACRO autocorrelation(values, lag := 1) AS
    __tsql_autocorrelation(values, lag);

CREATE OR REPLACE TEMP MACRO autocorrelation_agg(value, time, lag := 1, step := NULL, fill := 'null') AS
    __tsql_autocorrelation_on_grid(__tsql_observations(value, time), __tsql_time_type(time), __tsql_span(step),
                                   fill, lag);

-- Autocorrelations at lags 1..max_lag.
CREATE OR REPLACE TEMP MACRO acf(values, max_lag := 10) AS
    __tsql_acf(values, max_lag);

CREATE OR REPLACE TEMP MACRO acf_agg(value, time, max_lag := 10, step := NULL, fill := 'null') AS
    __tsql_acf_on_grid(__tsql_observations(value, time), __tsql_time_type(time), __tsql_span(step), fill, max_lag);

-- Ljung-Box portmanteau test: STRUCT(q, p_value).
CREATE OR REPLACE TEMP MACRO ljung_box(values, lags := 10) AS
    __tsql_ljung_box(values, lags);

CREATE OR REPLACE TEMP MACRO ljung_box_agg(value, time, lags := 10, step := NULL, fill := 'null') AS
    __tsql_ljung_box_on_grid(__tsql_observations(value, time), __tsql_time_type(time), __tsql_span(step),
                             fill, lags);

-- Mann-Kendall trend test with Sen's slope: STRUCT(tau, p_value, slope).
CREATE OR REPLACE TEMP MACRO trend_test(values) AS
    __tsql_trend_test(values);

CREATE OR REPLACE TEMP MACRO trend_test_agg(value, time, step := NULL, fill := 'null') AS
    __tsql_trend_test_on_grid(__tsql_observations(value, time), __tsql_time_type(time), __tsql_span(step), fill);
