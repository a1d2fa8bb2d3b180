-- Look: eyeball a series inside a result table.

-- Block characters between the series' min and max; NULL elements are spaces.
CREATE OR REPLACE TEMP MACRO sparkline(values, width := NULL) AS
    __tsql_sparkline(values, width);
