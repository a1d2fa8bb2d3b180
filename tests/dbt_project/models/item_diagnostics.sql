-- One row per item: its strongest cycle and the months where its level changed.
-- A table, so that readers without tsql can read it too.
{{ config(materialized='table') }}

select
    item,
    count(*) as n_months,
    seasonality_agg(units, month) as seasonality,
    change_points_agg(units, month) as change_points
from {{ ref('monthly_units') }}
group by item
