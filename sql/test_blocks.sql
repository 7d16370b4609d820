-- test_blocks: one row per (file_id, test_num) with results: the block most of its
-- results were assigned to (results.block), which is where its TSR time goes
-- (tsr_times). Derived once per log, so the per-lot TSR times never re-read the results.
-- materialized: file
with

results as (
    select * from results
),

final as (
    select lot_id, file_id, test_num, mode(block) as block, count(*) as result_rows
    from results
    group by lot_id, file_id, test_num
)

select * from final
