-- test_blocks: one row per (file_id, test_num) with results: the block most of its
-- results were assigned to (results.block; ties to the first block name), which is where
-- its TSR time goes (tsr_times). Derived once per log from the result records grouped by
-- their integer keys, so the per-lot TSR times never re-read the results.
-- materialized: file
with

records as (
    select lot, file_id, section_id, 1 as record, test_num, 1 as result_rows
    from raw_ptr
    union all
    select lot, file_id, section_id, 2, test_num, len(rtn_rslt) from raw_mpr
    union all
    select lot, file_id, section_id, 3, test_num, 1 from raw_ftr
),

grouped as (
    select lot, file_id, section_id, record, test_num, sum(result_rows) as result_rows
    from records
    group by all
),

named as (
    select
        g.lot, g.file_id, g.test_num, g.result_rows,
        coalesce(s.name, t.fallback_block, 'unassigned') as block
    from grouped as g
    left join raw_sections as s
        on s.lot = g.lot and s.file_id = g.file_id and s.section_id = g.section_id
    left join result_tests as t
        on t.lot_id = g.lot and t.file_id = g.file_id
        and t.record = ['PTR', 'MPR', 'FTR'][g.record]
        and t.test_num = g.test_num
),

per_block as (
    select lot, file_id, test_num, block, sum(result_rows) as n from named group by all
),

final as (
    select
        lot as lot_id,
        file_id,
        test_num::bigint as test_num,
        first(block order by n desc, block) as block,
        sum(n)::bigint as result_rows
    from per_block
    group by all
)

select * from final
