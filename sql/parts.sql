-- parts: one row per tested part. Key: (file_id, part_index); part_index is the 0-based
-- PRR order in the file, touchdown the 0-based touchdown within the file.
-- From STDF V4, PRR 5/20: PART_FLG bit 3 = failed, bit 4 = no pass/fail indication (then
-- passed is null), bits 0/1 = retest that supersedes an earlier part, bit 2 = abnormal
-- end; X/Y -32768 = not given; TEST_T 0 = not recorded (null here).
-- Timing-CSV lots contribute one row per (lot, touchdown, head, site, part_id).
-- lot_id: the MIR's LOT_ID ('unknown' when it gives none), the partition the log's rows
-- are filed under.
-- materialized: file
with

prr as (
    select * from raw_parts
),

csv as (
    select * from raw_timing_csv
),

stdf_parts as (
    select
        prr.file_id,
        prr.lot as lot_id,
        prr.part_index,
        prr.touchdown,
        prr.head_num::integer as head,
        prr.site_num::integer as site,
        nullif(prr.part_id, '') as part_id,
        nullif(prr.x_coord, -32768)::integer as x,
        nullif(prr.y_coord, -32768)::integer as y,
        prr.hard_bin::integer as hard_bin,
        nullif(prr.soft_bin, 65535)::integer as soft_bin,
        case when (prr.part_flg & 16) <> 0 then null else (prr.part_flg & 8) = 0 end as passed,
        nullif(prr.test_t, 0)::double as test_time_ms,
        prr.num_test::integer as num_test,
        (prr.part_flg & 3) <> 0 as is_retest,
        (prr.part_flg & 4) <> 0 as is_abnormal_end,
        'stdf' as source
    from prr
),

csv_parts as (
    select
        file_id,
        lot as lot_id,
        (dense_rank() over (partition by file_id order by min(line)) - 1)::bigint
            as part_index,
        touchdown::integer as touchdown,
        head::integer as head,
        site::integer as site,
        part_id,
        null::integer as x,
        null::integer as y,
        any_value(hard_bin)::integer as hard_bin,
        any_value(soft_bin)::integer as soft_bin,
        bool_and(passed) as passed,
        max(test_time_ms) as test_time_ms,
        count(*)::integer as num_test,
        false as is_retest,
        false as is_abnormal_end,
        'csv' as source
    from csv
    group by file_id, lot, touchdown, head, site, part_id
),

final as (
    select * from stdf_parts
    union all
    select * from csv_parts
)

select * from final
