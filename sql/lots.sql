-- lots: one row per (lot_id, file_id) — a lot tested in several logs has several rows.
-- STDF logs take the lot from MIR (STDF V4, MIR 1/10) and the finish from MRR; times are
-- the test floor's local clock (the standard records no zone), so they stay naive.
-- Timing CSVs contribute their lot_id with no program details. lot_id is the partition
-- the log's rows are filed under (the MIR's LOT_ID, 'unknown' when it gives none).
-- materialized: file
with

mir as (
    select * from raw_mir
),

mrr as (
    select file_id, max(finish_t) as finish_t from raw_mrr group by file_id
),

csv as (
    select distinct file_id, lot from raw_timing_csv
),

stdf_lots as (
    select
        mir.lot as lot_id,
        mir.file_id,
        nullif(mir.part_typ, '') as part_type,
        nullif(mir.job_nam, '') as program,
        nullif(mir.job_rev, '') as program_rev,
        nullif(mir.tstr_typ, '') as tester_type,
        nullif(mir.node_nam, '') as tester_node,
        nullif(mir.sblot_id, '') as sublot_id,
        case when mir.start_t > 0 then make_timestamp(mir.start_t::bigint * 1000000) end
            as started_at,
        case when mrr.finish_t > 0 then make_timestamp(mrr.finish_t::bigint * 1000000) end
            as finished_at,
        'stdf' as source
    from mir
    left join mrr using (file_id)
),

csv_lots as (
    select
        lot as lot_id,
        file_id,
        null::varchar as part_type,
        null::varchar as program,
        null::varchar as program_rev,
        null::varchar as tester_type,
        null::varchar as tester_node,
        null::varchar as sublot_id,
        null::timestamp as started_at,
        null::timestamp as finished_at,
        'csv' as source
    from csv
),

final as (
    select * from stdf_lots
    union all
    select * from csv_lots
)

select * from final
