-- Smoothing: the smooth expected curve of a noisy load series, and its repeating cycle.

-- Fitted values (mean, linear trend, harmonics) of the same length as the input; gaps get fitted values.
CREATE OR REPLACE TEMP MACRO harmonic_smooth(values, harmonics := 3, period := NULL) AS
    __tsql_harmonic_smooth(values, harmonics, period);

-- One cycle of round(period) values; list_position(p, list_max(p)) is the 1-based phase of the peak.
CREATE OR REPLACE TEMP MACRO harmonic_profile(values, period, harmonics := 3) AS
    __tsql_harmonic_profile(values, period, harmonics);
