-- Plain SQL over the diagnostics table: which items are seasonal, and when each first changed.
{{ config(materialized='view') }}

select
    item,
    seasonality.period as period,
    seasonality.p_value < 0.01 as is_seasonal,
    len(change_points) as n_changes,
    change_points[1] as first_change
from {{ ref('item_diagnostics') }}
