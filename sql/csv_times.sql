-- csv_times: one row per (file_id, lot_id, touchdown, head, site, part_id, block) from a
-- timing CSV (README, "Timing conventions"); rows of one block for one part are summed.
-- materialized: file
with

csv as (
    select * from raw_timing_csv
),

final as (
    select
        lot_id, file_id, touchdown::integer as touchdown, head::integer as head,
        site::integer as site, part_id, block,
        sum(end_ms - start_ms) as duration_ms,
        min(start_ms) as start_ms,
        max(end_ms) as end_ms
    from csv
    group by lot_id, file_id, touchdown, head, site, part_id, block
)

select * from final
