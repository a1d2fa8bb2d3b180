-- Helper macros of the generated public macros (tsql/binding.py): how the *_agg forms hand a
-- group's rows and spans of time to their UDFs, and how grid times come back (tsql/forms/agg.py).

-- Ticks: microseconds since 1970 for DATE and TIMESTAMP (TIMESTAMPTZ: the UTC instant,
-- whatever the session's TimeZone), otherwise the number itself.
CREATE OR REPLACE TEMP MACRO __tsql_tick(t) AS
    CASE WHEN typeof(t) = 'TIMESTAMP WITH TIME ZONE' THEN epoch_us(TRY_CAST(t AS TIMESTAMPTZ))
         ELSE COALESCE(epoch_us(TRY_CAST(t AS TIMESTAMP)), TRY_CAST(t AS DOUBLE)) END;

-- A step or a length of time as the UDFs take it: an INTERVAL, a number, and the text for messages.
CREATE OR REPLACE TEMP MACRO __tsql_span(x) AS
    {'text': x::VARCHAR, 'interval': TRY_CAST(x AS INTERVAL), 'number': TRY_CAST(x AS DOUBLE)};

-- A DOUBLE's 64 bits as a number (NULL as NaN), so that two of them make one UHUGEINT.
CREATE OR REPLACE TEMP MACRO __tsql_bits(x) AS
    COALESCE(x::DOUBLE, 'NaN'::DOUBLE)::BIT::UBIGINT::UHUGEINT;

-- One group's rows, in no particular order (the grid sorts them: cheaper than ORDER BY here),
-- each as one UHUGEINT: the tick's bits above the value's. DuckDB builds a list of one plain type
-- far faster than a list of {t, v} structs, and a time cannot part from its value (two lists,
-- list(t) and list(v), have no promise of the same order). Then the time column's type.
-- The time column as it is, or an error naming the function when its type is not a time or a number
-- (typeof is known when DuckDB plans the query: nothing is added per row).
CREATE OR REPLACE TEMP MACRO __tsql_time(function, time) AS
    CASE WHEN regexp_full_match(typeof(time), 'DATE|TIMESTAMP(_S|_MS|_NS| WITH TIME ZONE)?|.?NULL.?|'
                                              || 'U?(TINY|SMALL|BIG|HUGE)?INT(EGER)?|FLOAT|DOUBLE|DECIMAL\(\d+,\d+\)')
         THEN time
         ELSE error(function || ': time must be DATE, TIMESTAMP, TIMESTAMPTZ or a number, got ' || typeof(time)) END;

CREATE OR REPLACE TEMP MACRO __tsql_observations(function, value, time) AS
    list((__tsql_bits(__tsql_tick(__tsql_time(function, time))) << 64) | __tsql_bits(value));

-- The same for a function of two series (cross_correlation_agg): per row one struct of the tick and
-- both values (NULL as NaN), so that neither value parts from its time.
CREATE OR REPLACE TEMP MACRO __tsql_pairs(function, a, b, time) AS
    list({'tick': COALESCE(__tsql_tick(__tsql_time(function, time))::DOUBLE, 'NaN'::DOUBLE), 'a': COALESCE(a::DOUBLE, 'NaN'::DOUBLE),
          'b': COALESCE(b::DOUBLE, 'NaN'::DOUBLE)});

CREATE OR REPLACE TEMP MACRO __tsql_time_type(time) AS any_value(typeof(time));

-- A grid time from its tick and kind (0: TIMESTAMP, 1: TIMESTAMPTZ, 2: a number). Each value is cast
-- straight to the union (its type picks the member): no one-member union on the way.
CREATE OR REPLACE TEMP MACRO __tsql_moment(tick, kind) AS
    CASE kind
        WHEN 0 THEN make_timestamp(tick::BIGINT)::UNION("time" TIMESTAMP, time_tz TIMESTAMPTZ, number DOUBLE)
        WHEN 1 THEN (to_timestamp(0) + to_microseconds(tick::BIGINT))::UNION("time" TIMESTAMP, time_tz TIMESTAMPTZ,
                                                                                number DOUBLE)
        ELSE tick::DOUBLE::UNION("time" TIMESTAMP, time_tz TIMESTAMPTZ, number DOUBLE)
    END;

-- An *_agg UDF's answer, or its error message (an error found in the data) raised as an error naming
-- the function. The lambda reads the UDF's one result twice without calling it twice: a plain CASE over
-- r.error and r.answer has DuckDB call the UDF once for each (measured: screen_agg over 10,000 groups
-- took 1.7x as long).
CREATE OR REPLACE TEMP MACRO __tsql_answer(r) AS
    list_transform([r], lambda x: CASE WHEN x.error IS NULL THEN x.answer ELSE error(x.error) END)[1];
